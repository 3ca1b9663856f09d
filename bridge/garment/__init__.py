"""Simulated jacket: a dancer's body, a loose jacket with textile antennas, LC oscillators, a counter.

The simulator stands in for the garment and its microcontroller: it renders
scripts of gestures, postures and null activity into counted oscillator
frequencies, seeded and reproducible.  Modules, from the body outward:

``body``        upper-body capsules posed by joint angles; wearers
``antennas``    where each cable lies on the loose jacket; cloth lag; session fit
``coupling``    cable-to-body capacitance from closed-form handbook formulas
``oscillator``  LC resonance, drift and the gated cycle counter
``vocabulary``  gestures, postures and null activities as pose trajectories
``surroundings`` a second person, a grounded stand, a table near the jacket
``layout``      cable layouts read from TOML files
``jacket``      ``Jacket`` (owns the stream state), takes and scripts
``delivery``    dropped and late samples on the way to the computer
``troupe``      several wearers and sessions (written as take files by ``sources.troupe``)

Figures with the default constants (seed 0, several wearers and sessions):
resting channels near 174, 236, 318 and 430 kHz (inductor tolerance moves
them by a few per cent); a hand coming from 30 cm to touching a cable lowers
a sleeve channel by 1.3-1.8 % and a front channel by 0.9-1.2 %; a sleeve
lying on a raised arm or crossed arms reach about -8 %; standing still the
channels wander by 0.05-0.25 % (sway, breathing, one count = 100 Hz).
Ten minutes of four channels at 100 Hz render in about one second.
"""

from .jacket import (
    DEFAULT_RATE_HZ,
    Interval,
    Jacket,
    Take,
    random_script,
    simulate_take,
    tour_script,
    training_script,
)
from .layout import GarmentLayout, LayoutError, default_layout, load_layout
from .vocabulary import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES, SURROUNDINGS

__all__ = [
    "DEFAULT_RATE_HZ",
    "FULL_GESTURES",
    "FULL_NULL_ACTIVITIES",
    "GESTURES",
    "GarmentLayout",
    "LayoutError",
    "SURROUNDINGS",
    "default_layout",
    "load_layout",
    "NULL_ACTIVITIES",
    "Interval",
    "Jacket",
    "Take",
    "random_script",
    "simulate_take",
    "tour_script",
    "training_script",
]
