"""The text-line protocol: one sample per line.

    [device_time_s] f1 f2 ... fN      numbers separated by commas, spaces or tabs
    # a comment                        ignored
    left_sleeve,right_sleeve,...       an optional header naming the channels

Frequencies are in Hz. A line with N numbers has no timestamp; with N + 1 the first
is the device time in seconds. Anything else is counted as bad and skipped.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

_SPLIT = re.compile(r"[,\s]+")
MAX_LINE = 4096
MAX_FREQ_HZ = 1e9


@dataclass
class LineStats:
    good: int = 0
    malformed: int = 0      # not numbers, or too long
    wrong_count: int = 0    # a number count other than N or N + 1
    out_of_range: int = 0   # NaN, inf, zero or negative, or absurdly large
    comments: int = 0

    @property
    def bad(self) -> int:
        return self.malformed + self.wrong_count + self.out_of_range


@dataclass
class TextLineParser:
    """Splits a byte stream into samples; owns the partial line and the counters."""

    n_channels: int
    stats: LineStats = field(default_factory=LineStats)
    channel_names: tuple[str, ...] | None = None
    pending: bytes = b""
    last_problem: str = ""

    def feed(self, data: bytes) -> list[tuple[float | None, list[float]]]:
        """Parse bytes; returns the complete good samples as (device time or None, values)."""
        self.pending += data
        *lines, self.pending = self.pending.split(b"\n")
        if len(self.pending) > MAX_LINE:  # a line that never ends: drop it, count it
            self.pending = b""
            self._bad("malformed", "line longer than 4096 bytes")
        out = []
        for raw in lines:
            s = self.parse_line(raw)
            if s is not None:
                out.append(s)
        return out

    def parse_line(self, raw: bytes) -> tuple[float | None, list[float]] | None:
        try:
            line = raw.decode("ascii").strip()
        except UnicodeDecodeError:
            return self._bad("malformed", "non-ASCII bytes")
        if not line:
            return None
        if line.startswith("#"):
            self.stats.comments += 1
            return None
        parts = [p for p in _SPLIT.split(line) if p]
        try:
            values = [float(p) for p in parts]
        except ValueError:
            if self.stats.good == 0 and len(parts) == self.n_channels and all(p[0].isalpha() for p in parts):
                self.channel_names = tuple(parts)
                return None
            return self._bad("malformed", f"not numbers: {line[:60]!r}")
        if len(values) == self.n_channels:
            t = None
        elif len(values) == self.n_channels + 1:
            t, values = values[0], values[1:]
            if not math.isfinite(t):
                return self._bad("out_of_range", "device time not finite")
        else:
            return self._bad("wrong_count", f"{len(values)} numbers where {self.n_channels} (or a time and {self.n_channels}) were expected")
        if not all(math.isfinite(v) and 0 < v < MAX_FREQ_HZ for v in values):
            return self._bad("out_of_range", f"frequency not a positive finite number: {line[:60]!r}")
        self.stats.good += 1
        return t, values

    def _bad(self, kind: str, why: str):
        setattr(self.stats, kind, getattr(self.stats, kind) + 1)
        self.last_problem = why
        return None


def format_line(values, t_s: float | None = None) -> bytes:
    """One sample as a protocol line (what a garment's firmware sends)."""
    nums = ([f"{t_s:.4f}"] if t_s is not None else []) + [f"{v:.1f}" for v in values]
    return (",".join(nums) + "\n").encode("ascii")
