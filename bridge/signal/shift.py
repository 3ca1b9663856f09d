"""Sudden sustained shifts: something arrived near the antennas and stayed.

A metal chair, a table edge or a second person close by moves some channels' resting
frequency by a step that then holds. A gesture moves them too, but comes back within a
second or two. The detector compares a fast and a slow running mean of each channel's log
frequency (dimensionless relative change); a channel whose fast mean stays more than
``threshold`` away from its slow mean for ``sustain_s`` reports a shift. Postures also hold
a step: the caller ignores shifts while the gate holds a posture, and ``dismiss`` puts the
reference back, so the posture's end (a step back to rest) is not taken for a shift either.

The defaults come from ``benchmarks/resettle.py`` on the simulated jacket (docs/benchmarks.md):
no re-settle in an hour of ordinary movement, every second person and stand that moved a
channel by the threshold found. A posture held for longer than ``sustain_s`` that the gate
did not recognise is still taken for a shift.

State in, state out in the manner of ``scipy.signal``: ``ShiftDetector`` owns all of it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class ShiftDetector:
    """``step(freq_hz)`` over blocks (n, channels) of Hz; returns the channels (indices) that
    shifted, once per shift (empty tuple otherwise). ``reset()`` forgets the reference (after
    a re-baseline). Times in seconds of stream time.

    ``fired_at`` is the row of the last ``step``'s block at which the shift was reported
    (None when it reported none). ``step(freq_hz, stop=True)`` stops right after that row
    and leaves the later rows unread, so a caller can treat them differently (sample-exact,
    whatever the blocks): its state is then that of a stream ending at that row.
    """

    rate_hz: float
    threshold: float = 0.005      # relative frequency step, |Δf/f| (≈ half of ΔC/C0)
    sustain_s: float = 10.0       # longer than a gesture and than most postures (held 2-6 s)
    release: float = 0.8          # fraction of the threshold a counting step must stay above
    fast_tau_s: float = 0.2
    slow_tau_s: float = 20.0
    fast: np.ndarray | None = None
    slow: np.ndarray | None = None
    over_n: int = 0
    shifts: int = 0
    fired_at: int | None = None
    dismissed: int = 0
    before: np.ndarray | None = None  # the reference just before the last report

    def reset(self, rest_hz=None) -> None:
        """Forget the reference; with ``rest_hz`` (per channel, e.g. a hold-still capture's
        median) start from it, rather than from the next single sample, which may be caught
        mid-movement and would then look like a lasting step for ever after."""
        self.fast = self.slow = None
        if rest_hz is not None:
            r = np.log(np.asarray(rest_hz, dtype=float))
            self.fast, self.slow = r.copy(), r.copy()
        self.over_n = 0
        self.before = None

    def dismiss(self) -> None:
        """The last report was no shift (a posture held by the gate also holds a step): go
        back to the reference from before it, so the posture's end is not taken for one."""
        if self.before is not None:
            self.slow = self.before
        self.before = None
        self.over_n = 0
        self.dismissed += 1

    def step(self, freq_hz: np.ndarray, stop: bool = False) -> tuple[int, ...]:
        x = np.log(np.asarray(freq_hz, dtype=float))
        self.fired_at = None
        if x.shape[0] == 0:
            return ()
        if self.fast is None:
            self.fast, self.slow = x[0].copy(), x[0].copy()
        af = float(np.exp(-1.0 / (self.fast_tau_s * self.rate_hz)))
        as_ = float(np.exp(-1.0 / (self.slow_tau_s * self.rate_hz)))
        need = int(round(self.sustain_s * self.rate_hz))
        found: tuple[int, ...] = ()
        for i, row in enumerate(x):  # per sample: a few channels, cheap next to the classifier
            self.fast = af * self.fast + (1 - af) * row
            if self.over_n == 0:  # the reference follows drift only while nothing stands out
                self.slow = as_ * self.slow + (1 - as_) * row
            # hysteresis: a step counts from ``threshold`` on, and goes on counting while it
            # stays above ``release`` of it (a step near the threshold does not flicker out)
            over = np.abs(self.fast - self.slow) > (self.threshold * self.release if self.over_n else self.threshold)
            self.over_n = self.over_n + 1 if over.any() else 0
            if self.over_n >= need and not found:
                found = tuple(int(i) for i in np.flatnonzero(over))
                self.shifts += 1
                self.before = self.slow.copy()
                self.slow = self.fast.copy()  # the new rest: report once
                self.over_n = 0
                self.fired_at = i
                if stop:
                    break
        return found
