"""LC oscillators and the frequency counter that reads them.

Each antenna is the capacitor of an LC oscillator; its frequency is the
resonance f = 1 / (2 pi sqrt(L C)).  The microcontroller counts whole
oscillator cycles during a gate of ``gate_s`` seconds and reports
counts / gate_s, so every reading is a multiple of 1 / gate_s (the sample
rate) and carries +-1 count of quantisation.
"""

from __future__ import annotations

import numpy as np


def resonant_frequency_hz(inductance_h, capacitance_f):
    """Resonant frequency of an LC tank, Hz: f = 1 / (2 pi sqrt(L C))."""
    return 1.0 / (2.0 * np.pi * np.sqrt(np.asarray(inductance_h, float) * np.asarray(capacitance_f, float)))


def inductance_for_frequency_h(frequency_hz, capacitance_f):
    """Inductance that resonates with ``capacitance_f`` at ``frequency_hz``, H."""
    w = 2.0 * np.pi * np.asarray(frequency_hz, float)
    return 1.0 / (w * w * np.asarray(capacitance_f, float))


def capacitance_for_frequency_f(frequency_hz, inductance_h):
    """Capacitance that resonates with ``inductance_h`` at ``frequency_hz``, F."""
    return inductance_for_frequency_h(frequency_hz, inductance_h)


def relative_capacitance_change(rest_hz, freq_hz):
    """Relative capacitance change dC/C0 = (f0 / f)^2 - 1 implied by a frequency change.

    Exact for a fixed inductance, since C is proportional to 1 / f^2.
    """
    ratio = np.asarray(rest_hz, float) / np.asarray(freq_hz, float)
    return ratio * ratio - 1.0


def frequency_ratio_for_capacitance_change(dc_over_c):
    """Exact f / f0 after a relative capacitance change: 1 / sqrt(1 + dC/C0)."""
    return 1.0 / np.sqrt(1.0 + np.asarray(dc_over_c, float))


def spread_centres_hz(n_channels: int, low_hz: float = 150e3, high_hz: float = 500e3) -> np.ndarray:
    """Resting frequencies spread geometrically over [low_hz, high_hz], Hz.

    Each channel sits in the middle of its own band, so neighbours are a
    constant ratio apart (for 4 channels: about 174, 236, 318 and 430 kHz);
    keeping oscillators apart avoids injection locking between cables that
    run side by side (common practice, no source).
    """
    k = (np.arange(n_channels) + 0.5) / n_channels
    return low_hz * (high_hz / low_hz) ** k


PHASE_STEPS_PER_CYCLE = 2**24  # fixed-point resolution of the counter's phase


def count_cycles(freq_hz, gate_s: float, phase, clock_error: float = 0.0):
    """Count oscillator cycles in consecutive gates.

    ``freq_hz`` (n, channels) is the oscillator frequency during each gate,
    ``phase`` (channels,) int64 the fraction of a cycle carried over from
    the previous gate, in units of 1 / PHASE_STEPS_PER_CYCLE, ``clock_error``
    the relative error of the counter's time base (a fast clock shortens the
    real gate).  Returns (counts (n, channels) int64, new phase).  The phase
    carries over, so the +-1 count errors never accumulate; it is kept in
    integers so that counting a stream in pieces gives exactly the same counts.
    """
    freq_hz = np.asarray(freq_hz, float)
    phase = np.asarray(phase, np.int64)
    steps = np.rint(freq_hz * (gate_s / (1.0 + clock_error)) * PHASE_STEPS_PER_CYCLE).astype(np.int64)
    total = phase[None, :] + np.cumsum(steps, axis=0)
    whole = total // PHASE_STEPS_PER_CYCLE
    counts = np.diff(whole, axis=0, prepend=0)
    new_phase = total[-1] - whole[-1] * PHASE_STEPS_PER_CYCLE if freq_hz.shape[0] else phase
    return counts, new_phase


def temperature_factor(temperature_c, tempco_per_c, reference_c: float):
    """Relative frequency factor 1 + tempco (T - T_ref) of an oscillator.

    ``temperature_c`` (n,), ``tempco_per_c`` (channels,) as a fraction per
    degree C (e.g. -40e-6).  Returns (n, channels).
    """
    dt = np.asarray(temperature_c, float)[:, None] - reference_c
    return 1.0 + dt * np.asarray(tempco_per_c, float)[None, :]
