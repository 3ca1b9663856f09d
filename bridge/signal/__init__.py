"""Streaming conditioning of counted oscillator frequencies.

Plain functions over arrays with explicit state, in the manner of ``scipy.signal``:
a function takes a block and the state left by the previous block and returns the
output and the new state, so a stream processed in blocks of any size gives the same
result as the whole stream processed at once.
"""

from .conditioning import (
    BandPass,
    Conditioner,
    ConditionerState,
    baseline_init,
    bandpass_init,
    design_bandpass,
    plausible_rows,
    relative_capacitance,
    track_baseline,
    bandpass_block,
)

__all__ = [
    "BandPass",
    "Conditioner",
    "ConditionerState",
    "baseline_init",
    "bandpass_init",
    "bandpass_block",
    "design_bandpass",
    "plausible_rows",
    "relative_capacitance",
    "track_baseline",
]
