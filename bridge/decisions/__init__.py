"""From probabilities and levels to events: the gate (threshold, k-of-n agreement, refractory
time, posture hysteresis), continuous controls (range, one-euro filter), arming and panic."""

from .continuous import (ControlSettings, Controls, LevelRange, OneEuroSettings, OneEuroState, RangeError,
                         capture_range, load_range, one_euro, one_euro_step, range_from_levels, smoothing_factor)
from .gate import Event, Gate, GateSettings, gate_settings_for
from .safety import Safety, SafetySettings

__all__ = ["ControlSettings", "Controls", "Event", "Gate", "GateSettings", "LevelRange", "OneEuroSettings",
           "OneEuroState", "RangeError", "Safety", "SafetySettings", "capture_range", "gate_settings_for",
           "load_range", "one_euro", "one_euro_step", "range_from_levels", "smoothing_factor"]
