"""From class probabilities to events: threshold, k-of-n agreement, refractory time, postures."""

from .gate import Event, Gate, GateSettings, gate_settings_for

__all__ = ["Event", "Gate", "GateSettings", "gate_settings_for"]
