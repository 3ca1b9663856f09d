"""Device time to host time, gaps and jumps, and resampling onto the model's rate.

Two small state objects, fed block by block (the scipy.signal idiom: all state is in the
object's attributes):

``DeviceClock``  maps device timestamps to the host's monotonic clock with a running estimate
                 of offset and drift, and counts gaps (samples missing) and jumps (the device
                 clock went backwards or leapt: a restart).
``Resampler``    linear interpolation of a time-stamped stream onto a uniform grid at the
                 model's rate, so a device running slightly fast or slow (a crystal off by a
                 fraction of a per cent, a gate of 10.2 ms instead of 10 ms) feeds the model the
                 rate it was trained at. It never interpolates across a gap.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class DeviceClock:
    """Running fit host_s ~ offset_s + (1 + drift) * device_s.

    Transport delay only ever adds to the arrival time, so the fit follows the lower envelope
    of (host - device): the minimum per ``window_s`` of device time, and a least-squares line
    through the last ``windows`` minima (common practice for one-way clock estimation, no source).

    nominal_period_s: the device's sample period, s; a step longer than ``gap_factor`` periods
    is a gap; a step backwards or longer than ``jump_s`` is a jump, after which the fit restarts.
    """

    nominal_period_s: float
    gap_factor: float = 1.5  # a step this many periods long means at least one sample is missing
    jump_s: float = 2.0
    window_s: float = 2.0
    windows: int = 30
    gaps: int = 0
    missing: int = 0          # samples estimated lost in gaps
    jumps: int = 0
    offset_s: float | None = None
    drift: float = 0.0
    last_device_s: float | None = None
    _minima: list = field(default_factory=list)   # (device_s, host - device) per window
    _win_start: float | None = None
    _win_min: tuple | None = None

    def update(self, device_s: np.ndarray, host_s: float) -> np.ndarray:
        """Take a block's device times (s) and the host time it arrived (s); return the
        host-time estimate of each sample (s)."""
        d = np.asarray(device_s, dtype=float)
        if d.size == 0:
            return d
        prev = self.last_device_s
        steps = np.diff(d, prepend=d[0] if prev is None else prev)
        if prev is not None or d.size > 1:
            jump = (steps < 0) | (steps > self.jump_s)
            if prev is None:
                jump[0] = False
            if jump.any():
                self.jumps += int(jump.sum())
                self._restart()
            gap = ~jump & (steps > self.gap_factor * self.nominal_period_s)
            if gap.any():
                self.gaps += int(gap.sum())
                self.missing += int(np.maximum(np.round(steps[gap] / self.nominal_period_s) - 1, 0).sum())
        self.last_device_s = float(d[-1])
        # The last sample of a block arrived no later than host_s.
        self._observe(float(d[-1]), host_s - float(d[-1]))
        return self.to_host(d)

    def to_host(self, device_s) -> np.ndarray:
        d = np.asarray(device_s, dtype=float)
        if self.offset_s is None:
            return d.copy()
        return self.offset_s + (1.0 + self.drift) * d

    def _observe(self, dev: float, resid: float) -> None:
        if self._win_start is None or dev - self._win_start >= self.window_s:
            if self._win_min is not None:
                self._minima.append(self._win_min)
                del self._minima[:-self.windows]
            self._win_start, self._win_min = dev, (dev, resid)
        elif resid < self._win_min[1]:
            self._win_min = (dev, resid)
        pts = self._minima + [self._win_min]
        if len(pts) >= 3:
            x = np.array([p[0] for p in pts])
            y = np.array([p[1] for p in pts])
            slope, icept = np.polyfit(x - x[0], y, 1)
            self.drift, self.offset_s = float(slope), float(icept - slope * x[0])
        else:
            self.drift, self.offset_s = 0.0, min(p[1] for p in pts)

    def _restart(self) -> None:
        self._minima, self._win_start, self._win_min = [], None, None
        self.offset_s, self.drift = None, 0.0


@dataclass
class Resampler:
    """Linear interpolation of time-stamped samples onto the grid t0 + k / rate_hz.

    ``process(t_s, values)`` takes (n,) device times, s, and (n, channels) values, and returns
    the grid times and interpolated values that the samples so far determine. A step longer
    than ``max_gap_s`` (or backwards) restarts the grid at the next sample instead of
    interpolating across it. State: the last input sample and the next grid time.
    """

    rate_hz: float
    max_gap_s: float = 0.1
    restarts: int = 0
    _last_t: float | None = None
    _last_v: np.ndarray | None = None
    _next_t: float | None = None
    _k: int = 0
    _t0: float = 0.0

    def process(self, t_s, values) -> tuple[np.ndarray, np.ndarray]:
        t = np.asarray(t_s, dtype=float)
        v = np.asarray(values, dtype=float).reshape(t.size, -1)
        if t.size == 0:
            return t, v
        out_t, out_v = [], []
        start = 0
        period = 1.0 / self.rate_hz
        # Split the block wherever the stream breaks; each piece is interpolated alone.
        prev_t = self._last_t
        breaks = []
        for i in range(t.size):
            ti = t[i]
            if prev_t is not None and (ti <= prev_t or ti - prev_t > self.max_gap_s):
                breaks.append(i)
            prev_t = ti
        for stop in breaks + [t.size]:
            piece_t, piece_v = t[start:stop], v[start:stop]
            if piece_t.size:
                gt, gv = self._piece(piece_t, piece_v, period)
                out_t.append(gt)
                out_v.append(gv)
            if stop < t.size:  # a break before sample `stop`: forget the past
                self.restarts += 1
                self._last_t = self._last_v = self._next_t = None
            start = stop
        if not out_t:
            return np.empty(0), np.empty((0, v.shape[1]))
        return np.concatenate(out_t), np.concatenate(out_v)

    def _piece(self, t: np.ndarray, v: np.ndarray, period: float):
        if self._last_t is not None:
            t = np.concatenate([[self._last_t], t])
            v = np.concatenate([self._last_v[None, :], v])
        if self._next_t is None:
            self._t0, self._k = float(t[0]), 0
            self._next_t = self._t0
        # Grid points up to the last sample (the rest wait for the next block).
        n = int(np.floor((t[-1] - self._t0) / period + 1e-9)) - self._k + 1
        self._last_t, self._last_v = float(t[-1]), v[-1].copy()
        if n <= 0:
            return np.empty(0), np.empty((0, v.shape[1]))
        grid = self._t0 + (self._k + np.arange(n)) * period
        self._k += n
        self._next_t = self._t0 + self._k * period
        out = np.empty((n, v.shape[1]))
        for c in range(v.shape[1]):
            out[:, c] = np.interp(grid, t, v[:, c])
        return grid, out
