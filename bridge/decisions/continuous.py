"""Continuous controls: a channel's level (or a weighted mix) as a smoothed value 0..1.

They bypass the classifier's window: every new sample of the conditioner's ``level``
stream (ΔC/C0 above the tracked baseline) updates them at once. A per-wearer range
(``LevelRange``: the level when relaxed and at the closest reach, per channel) maps each
channel to 0..1; the weighted mix of those is smoothed by the one-euro filter, an adaptive
low-pass whose cut-off rises with speed: little lag on fast moves, little jitter at rest.

The filter (plain functions, state in and state out, as in scipy.signal):

    cutoff = min_cutoff + beta · |dx̂|        (Hz; dx̂ the low-passed derivative, units/s)
    alpha  = 1 / (1 + τ/Tₑ),  τ = 1/(2π·cutoff)   (Tₑ the time since the last sample, s)
    x̂ ← x̂ + alpha · (x − x̂)
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .gate import Event

CONTROL = "control"


# -- one-euro filter ---------------------------------------------------------------------

@dataclass(frozen=True)
class OneEuroSettings:
    """min_cutoff_hz: cut-off at rest (lower: steadier, more lag); beta: how much the cut-off
    rises per unit/s of speed (higher: less lag on fast moves); d_cutoff_hz: cut-off of the
    derivative's own low-pass."""

    min_cutoff_hz: float = 1.0
    beta: float = 0.0
    d_cutoff_hz: float = 1.0

    def __post_init__(self):
        if not (self.min_cutoff_hz > 0 and self.d_cutoff_hz > 0 and self.beta >= 0):
            raise ValueError("one-euro filter needs min_cutoff_hz > 0, d_cutoff_hz > 0, beta >= 0")


@dataclass(frozen=True)
class OneEuroState:
    """x_hat: last filtered value; dx_hat: last filtered derivative (units/s); t_s: its time."""

    x_hat: float
    dx_hat: float
    t_s: float


def smoothing_factor(te_s: float, cutoff_hz: float) -> float:
    """alpha = 1 / (1 + τ/Tₑ) with τ = 1/(2π·cutoff): the exponential smoothing factor of a
    first-order low-pass with that cut-off, sampled Tₑ seconds apart."""
    tau_s = 1.0 / (2.0 * math.pi * cutoff_hz)
    return 1.0 / (1.0 + tau_s / te_s)


def one_euro_step(x: float, t_s: float, state: OneEuroState | None,
                  settings: OneEuroSettings) -> tuple[float, OneEuroState]:
    """Filter one sample ``x`` taken at ``t_s``; returns (filtered value, new state).

    The first sample (``state`` None) passes unchanged. A sample no later than the last
    one (a repeated time stamp) leaves the state as it is.
    """
    if state is None:
        return x, OneEuroState(x, 0.0, t_s)
    te_s = t_s - state.t_s
    if te_s <= 0:
        return state.x_hat, state
    dx = (x - state.x_hat) / te_s
    dx_hat = state.dx_hat + smoothing_factor(te_s, settings.d_cutoff_hz) * (dx - state.dx_hat)
    cutoff_hz = settings.min_cutoff_hz + settings.beta * abs(dx_hat)
    x_hat = state.x_hat + smoothing_factor(te_s, cutoff_hz) * (x - state.x_hat)
    return x_hat, OneEuroState(x_hat, dx_hat, t_s)


def one_euro(x: np.ndarray, t_s: np.ndarray, state: OneEuroState | None,
             settings: OneEuroSettings) -> tuple[np.ndarray, OneEuroState | None]:
    """``one_euro_step`` over arrays (n,) of values and times; returns (filtered (n,), state)."""
    out = np.empty(len(x))
    for i, (xi, ti) in enumerate(zip(x, t_s)):
        out[i], state = one_euro_step(float(xi), float(ti), state, settings)
    return out, state


# -- per-wearer range ---------------------------------------------------------------------

class RangeError(ValueError):
    pass


@dataclass(frozen=True)
class LevelRange:
    """Per channel: the level (ΔC/C0) with the body relaxed, and at the closest reach."""

    channel_names: tuple[str, ...]
    relaxed: tuple[float, ...]
    closest: tuple[float, ...]

    def normalise(self, level: np.ndarray) -> np.ndarray:
        """level (n, channels) → 0..1 per channel (clipped)."""
        lo = np.asarray(self.relaxed)
        span = np.asarray(self.closest) - lo
        return np.clip((np.asarray(level, dtype=float) - lo) / span, 0.0, 1.0)

    def to_dict(self) -> dict:
        return {"kind": "drape-level-range", "channels": list(self.channel_names),
                "relaxed": list(self.relaxed), "closest": list(self.closest)}

    def save(self, path: str | Path) -> Path:
        path = Path(path)
        path.write_text(json.dumps(self.to_dict(), indent=1) + "\n", encoding="utf-8")
        return path


MIN_SPAN = 1e-6  # ΔC/C0: a closest reach must rise at least this much above relaxed


def range_from_levels(channel_names, relaxed_level: np.ndarray, closest_level: np.ndarray,
                      closest_quantile: float = 0.95, leave_out_flat: bool = False) -> LevelRange:
    """The range from two short captures of the ``level`` stream, each (n, channels):
    relaxed (arms down, standing still) then reaching as close as the wearer will on stage.

    Relaxed is the median of its capture; closest is the ``closest_quantile`` of its capture
    (a high quantile rather than the maximum, so one spike does not set the top).
    Raises RangeError naming the channels whose closest reach did not rise above relaxed;
    with ``leave_out_flat`` those channels are left out of the range instead (a control can
    then not mix them), and only a capture where no channel rose is an error.
    """
    r = np.median(np.asarray(relaxed_level, dtype=float), axis=0)
    c = np.quantile(np.asarray(closest_level, dtype=float), closest_quantile, axis=0)
    names = tuple(channel_names)
    rose = [hi - lo > MIN_SPAN for lo, hi in zip(r, c)]
    flat = [n for n, up in zip(names, rose) if not up]
    if flat and not (leave_out_flat and any(rose)):
        raise RangeError(f"closest reach did not rise above relaxed on {', '.join(flat)}: "
                         f"reach nearer to those antennas during the second capture"
                         + ("" if leave_out_flat else ", or leave them out (`drape range --leave-out-flat`)"))
    keep = [i for i, up in enumerate(rose) if up]
    return LevelRange(tuple(names[i] for i in keep), tuple(float(r[i]) for i in keep), tuple(float(c[i]) for i in keep))


def capture_range(source, conditioner, channel_names, seconds: float = 5.0, prompt=print,
                  countdown_s: float = 3.0, leave_out_flat: bool = False) -> LevelRange:
    """Run the two captures on a live source: ``seconds`` relaxed, then ``seconds`` closest.

    ``source`` is a ``bridge.sources`` Source, ``conditioner`` a ``bridge.signal.Conditioner``
    started on this source (its baseline and resting frequencies carry over). ``prompt``
    tells the wearer what to do next. Before each capture, ``countdown_s`` of stream time
    counts down (one prompt a second) while the wearer gets into place; those samples are
    conditioned but not kept. ``leave_out_flat``: see ``range_from_levels``. Used by the
    range calibration verb.
    """
    parts, pending = [], None
    for what in ("stand relaxed, arms down", "reach as close to the antennas as you will on stage, and hold"):
        if countdown_s > 0:
            prompt(f"next: {what}; starting in {countdown_s:g} s")
            _, pending = _levels(source, conditioner, countdown_s, prompt, pending)
        prompt(f"{what} for {seconds:g} s ...")
        got, pending = _levels(source, conditioner, seconds, pending=pending)
        if not got:
            raise RangeError("the source gave no samples")
        parts.append(np.concatenate(got))
    return range_from_levels(channel_names, parts[0], parts[1], leave_out_flat=leave_out_flat)


def _levels(source, conditioner, seconds: float, tick=None, pending=None) -> tuple[list, np.ndarray | None]:
    """``seconds`` of the source's stream as conditioned levels; ``tick`` gets each whole second left.

    A block can hold more than is still needed (a source hands over all that has arrived):
    the rest is returned, (levels, frequencies left over), for the next stretch to start
    with, so no sample counts for the wrong stretch. ``pending``: such a rest, taken first.
    """
    got, n, need = [], 0, int(round(seconds * source.rate_hz))
    said = math.ceil(seconds)
    while n < need and (pending is not None or not source.ended):
        freq, pending = (pending, None) if pending is not None else (source.read().freq_hz, None)
        if len(freq):
            if len(freq) > need - n:
                freq, pending = freq[:need - n], freq[need - n:]
            level, _ = conditioner.process(freq, hold_baseline=True)
            got.append(level)
            n += len(level)
            left = math.ceil((need - n) / source.rate_hz)
            if tick and 0 < left < said:
                said = left
                tick(f"  {left} ...")
    return got, pending


def load_range(path: str | Path) -> LevelRange:
    path = Path(path)
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise RangeError(f"{path}: no such range file; make one with `drape range`") from None
    except (OSError, ValueError) as exc:
        raise RangeError(f"{path}: not a range file ({exc})") from None
    try:
        names = tuple(str(n) for n in d["channels"])
        lo = tuple(float(v) for v in d["relaxed"])
        hi = tuple(float(v) for v in d["closest"])
    except (KeyError, TypeError, ValueError):
        raise RangeError(f"{path}: a range file has channels, relaxed and closest lists") from None
    if not (len(names) == len(lo) == len(hi)) or not all(math.isfinite(v) for v in lo + hi):
        raise RangeError(f"{path}: channels, relaxed and closest must be finite and of equal length")
    if any(not h - l > MIN_SPAN for l, h in zip(lo, hi)):
        raise RangeError(f"{path}: closest must be above relaxed on every channel; capture it again")
    return LevelRange(names, lo, hi)


# -- the control itself --------------------------------------------------------------------

@dataclass(frozen=True)
class ControlSettings:
    """One continuous control.

    weights: (channels,) weight of each channel in the mix (0 leaves it out); range: the
    per-wearer range; only_while: a posture that must be held for the control to move
    (empty: always).
    """

    name: str
    weights: tuple[float, ...]
    range: LevelRange
    filter: OneEuroSettings = field(default_factory=OneEuroSettings)
    only_while: str = ""

    def key(self) -> tuple:
        """Settings that, when unchanged across a mapping reload, let the filter state carry over."""
        return (self.name, self.weights, self.range, self.filter, self.only_while)


class Controls:
    """State of every continuous control of one garment: each filter's state."""

    def __init__(self, settings: list[ControlSettings] | tuple = (), garment: str = ""):
        self.garment = garment
        self.settings: tuple[ControlSettings, ...] = ()
        self.state: dict[str, OneEuroState | None] = {}
        self.configure(settings)

    def configure(self, settings) -> None:
        """Take new settings (a mapping reload); unchanged controls keep their filter state."""
        old = {s.name: s.key() for s in self.settings}
        self.state = {s.name: self.state.get(s.name) if old.get(s.name) == s.key() else None for s in settings}
        self.settings = tuple(settings)
        self._w = [np.asarray(s.weights, dtype=float) / max(1e-12, float(np.sum(s.weights))) for s in settings]

    def step(self, t_s: np.ndarray, level: np.ndarray, held=()) -> list[Event]:
        """Update from samples at times t_s (n,), level (n, channels); one "control" event
        per control and sample. A control whose posture is not held sends nothing and
        restarts its filter when the posture comes back."""
        events = []
        if not self.settings or len(t_s) == 0:
            return events
        per_sample = []
        for s, w in zip(self.settings, self._w):
            if s.only_while and s.only_while not in held:
                self.state[s.name] = None
                per_sample.append(None)
                continue
            mix = s.range.normalise(level) @ w
            y, self.state[s.name] = one_euro(mix, t_s, self.state[s.name], s.filter)
            per_sample.append(y)
        for i, t in enumerate(t_s):
            for s, y in zip(self.settings, per_sample):
                if y is not None:
                    events.append(Event(float(t), s.name, CONTROL, 1.0, 0.0, self.garment, float(y[i])))
        return events
