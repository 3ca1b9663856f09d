"""The text-line protocol: one sample per line.

    [device_time_s] f1 f2 ... fN      numbers separated by commas, spaces or tabs
    # a comment                        ignored
    left_sleeve,right_sleeve,...       an optional header naming the channels

Frequencies are in Hz. A line with N numbers has no timestamp; with N + 1 the first
is the device time in seconds. Anything else is counted as bad and skipped.

When N is not stated, it is detected: from a header (its names are the channels; a first
name ``t_s``/``time`` marks the device time), else from the first lines (a first column that
strictly increases in steps of at most a second is a device time; one that does not is a
channel). When neither tells, the parser refuses to guess and says what to state.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

_SPLIT = re.compile(r"[,\s]+")
MAX_LINE = 4096
MAX_FREQ_HZ = 1e9
SNIFF_LINES = 8  # number lines looked at before deciding the layout (when not stated)
TIME_NAMES = ("t", "t_s", "time", "time_s", "timestamp")  # a header's first name saying "device time, s"


class ProtocolUndecided(ValueError):
    """The stream's layout cannot be told from what arrived; the message says what to state."""


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
    """Splits a byte stream into samples; owns the partial line, the counters and what it detected.

    n_channels: values per sample, or None to detect it. timestamp: whether each line starts
    with the device time, or None to detect it. With n_channels stated and timestamp None, a
    line of N numbers has no time and a line of N + 1 numbers starts with one. With
    n_channels None the parser holds the first lines until it can tell (at the first number
    line after a header, else after SNIFF_LINES lines) and raises ProtocolUndecided when it
    cannot, saying what to state; the held lines are then released, none is lost.
    """

    n_channels: int | None = None
    timestamp: bool | None = None
    stats: LineStats = field(default_factory=LineStats)
    channel_names: tuple[str, ...] | None = None
    pending: bytes = b""
    last_problem: str = ""
    header: tuple[str, ...] | None = None
    held: list = field(default_factory=list)
    discarding: bool = False  # inside a line already counted as too long: drop up to its newline

    @property
    def decided(self) -> bool:
        return self.n_channels is not None

    def feed(self, data: bytes) -> list[tuple[float | None, list[float]]]:
        """Parse bytes; returns the complete good samples as (device time or None, values)."""
        if self.discarding:  # the rest of a line counted once already
            end = data.find(b"\n")
            if end < 0:
                return []
            data, self.discarding = data[end + 1:], False
        self.pending += data
        *lines, self.pending = self.pending.split(b"\n")
        if len(self.pending) > MAX_LINE:  # a line that never ends: drop it, count it once
            self.pending = b""
            self.discarding = True
            self._bad("malformed", "line longer than 4096 bytes")
        out: list = []
        for raw in lines:
            self._line(raw, out)
        return out

    def _line(self, raw: bytes, out: list) -> None:
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
            if self.stats.good == 0 and not self.held and self.header is None and all(p[0].isalpha() for p in parts):
                self._header(tuple(parts))
                return None
            return self._bad("malformed", f"not numbers: {line[:60]!r}")
        if self.decided:
            return self._accept(values, out)
        self.held.append(values)
        if self.header is not None or len(self.held) >= SNIFF_LINES:
            self._decide()
            held, self.held = self.held, []
            for v in held:
                self._accept(v, out)
        return None

    def _header(self, names: tuple[str, ...]) -> None:
        self.header = names
        n = self.n_channels
        if n is None:
            return
        if len(names) == n + 1 and names[0].lower() in TIME_NAMES:
            self.channel_names = names[1:]
        elif len(names) == n:
            self.channel_names = names
        else:
            self.stats.malformed += 1
            self.last_problem = f"header names {len(names)} columns for {n} channels"

    def _decide(self) -> None:
        """Channel count and timestamp from the header and the held lines, or ProtocolUndecided."""
        counts = [len(v) for v in self.held]
        k = max(set(counts), key=counts.count)
        how = ("state it: the config's [garment] channels = N and timestamp = true or false "
               "(drape capture: --channels N --timestamp yes/no), or have the firmware send a header "
               "line naming the columns (a first column named t_s is the device time in seconds)")
        h = self.header
        ts = self.timestamp
        if h is not None:
            if ts is None:
                if len(h) == k:
                    ts = h[0].lower() in TIME_NAMES
                elif len(h) + 1 == k:
                    ts = True
                else:
                    raise ProtocolUndecided(f"the header names {len(h)} columns but lines carry {k} numbers; {how}")
            names = h[1:] if ts and len(h) == k else h
        else:
            names = None
            if ts is None:
                first = [v[0] for v in self.held if len(v) == k]
                steps = [b - a for a, b in zip(first, first[1:])]
                if k == 1 or not steps or not all(s > 0 for s in steps):
                    ts = False  # a device time only ever increases
                elif all(s <= 1.0 for s in steps):
                    ts = True   # steps of a second or less; counted frequencies move in whole counts
                else:
                    raise ProtocolUndecided(
                        f"cannot tell whether the first of the {k} numbers per line is a device time; {how}")
        n = k - int(ts)
        if n < 1:
            raise ProtocolUndecided(f"lines carry {k} numbers: no room for a device time and a channel; {how}")
        self.n_channels, self.timestamp = n, bool(ts)
        if names is not None and len(names) == n:
            self.channel_names = tuple(names)

    def _accept(self, values: list[float], out: list) -> None:
        n = self.n_channels
        if len(values) == n and not self.timestamp:
            t = None
        elif len(values) == n + 1 and self.timestamp is not False:
            t, values = values[0], values[1:]
            if not math.isfinite(t):
                return self._bad("out_of_range", "device time not finite")
        else:
            want = (f"a time and {n}" if self.timestamp else
                    f"{n}" if self.timestamp is False else f"{n} (or a time and {n})")
            return self._bad("wrong_count", f"{len(values)} numbers where {want} were expected")
        if not all(math.isfinite(v) and 0 < v < MAX_FREQ_HZ for v in values):
            return self._bad("out_of_range", "frequency not a positive finite number")
        self.stats.good += 1
        out.append((t, values))
        return None

    def _bad(self, kind: str, why: str):
        setattr(self.stats, kind, getattr(self.stats, kind) + 1)
        self.last_problem = why
        return None


def format_line(values, t_s: float | None = None) -> bytes:
    """One sample as a protocol line (what a garment's firmware sends)."""
    nums = ([f"{t_s:.4f}"] if t_s is not None else []) + [f"{v:.1f}" for v in values]
    return (",".join(nums) + "\n").encode("ascii")
