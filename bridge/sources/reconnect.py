"""A source that survives its device going away: report, retry with backoff, resume.

No thread: each ``read`` either reads the device, or (while it is away) waits a little,
tries to open it again when the backoff says so, and returns an empty block. The loop
above sees ``connected`` go False and holds its outputs safe meanwhile.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable

from .base import Block, Source, SourceGone, empty_block


@dataclass(frozen=True)
class Backoff:
    """Delays between attempts to reopen, s: first_s, then times factor, at most max_s."""

    first_s: float = 0.05
    factor: float = 2.0
    max_s: float = 1.0

    def delay_s(self, attempt: int) -> float:
        return min(self.max_s, self.first_s * self.factor ** max(0, attempt))


class ReconnectingSource(Source):
    """Wraps ``open_source()`` (a callable returning a Source or raising SourceGone).

    rate_hz and channel_names are what the consumer expects (the model's); a reopened
    device must give the same channel count. on_change(connected, message) is called when
    the device goes or comes back. Counters add up over every connection.
    """

    def __init__(self, open_source: Callable[[], Source], rate_hz: float, channel_names,
                 backoff: Backoff = Backoff(), idle_s: float = 0.02, on_change=None,
                 clock=time.monotonic, sleep=time.sleep, open_now: bool = True):
        self.open_source = open_source
        self.rate_hz = float(rate_hz)
        self._names = tuple(channel_names)
        self.backoff = backoff
        self.idle_s = idle_s
        self.on_change = on_change
        self.clock, self.sleep = clock, sleep
        self.inner: Source | None = None
        self.connected = False
        self.attempts = 0
        self.reconnects = 0
        self.outages = 0
        self.last_error = ""
        self.gone_at_s: float | None = None
        self.back_after_s: list[float] = []  # how long each outage lasted, s
        self._next_try_s = 0.0
        self._carried: dict = {}
        self._opened_once = False
        if open_now:  # the first attempt at once, so a caller can tell the user where things stand
            self._try_open()

    @property
    def channel_names(self) -> tuple[str, ...]:
        if self.inner is not None and self.inner.channel_names:
            return tuple(self.inner.channel_names)
        return self._names

    def read(self) -> Block:
        if self.inner is None and not self._try_open():
            return empty_block(len(self._names), self.clock())
        try:
            return self.inner.read()
        except SourceGone as exc:
            self._lose(str(exc))
            return empty_block(len(self._names), self.clock())

    def _try_open(self) -> bool:
        now = self.clock()
        if now < self._next_try_s:
            self.sleep(min(self.idle_s, self._next_try_s - now))
            return False
        try:
            self.inner = self.open_source()
        except SourceGone as exc:
            self.last_error = str(exc)
            self._next_try_s = self.clock() + self.backoff.delay_s(self.attempts)
            self.attempts += 1
            if self.gone_at_s is None:
                self.gone_at_s = now
            return False
        self.connected, self.attempts = True, 0
        if self._opened_once:
            self.reconnects += 1
            if self.gone_at_s is not None:
                self.back_after_s.append(self.clock() - self.gone_at_s)
        self._opened_once = True
        self.gone_at_s = None
        if self.on_change:
            self.on_change(True, "device connected" if self.reconnects == 0 else "device back")
        return True

    def _lose(self, why: str) -> None:
        self._carry(self.inner)
        try:
            self.inner.close()
        except Exception:  # noqa: BLE001 - the device is gone; closing may fail any way it likes
            pass
        self.inner = None
        self.connected = False
        self.outages += 1
        self.last_error = why
        self.gone_at_s = self.clock()
        self._next_try_s = self.gone_at_s + self.backoff.delay_s(0)
        self.attempts = 1
        if self.on_change:
            self.on_change(False, why)

    def _carry(self, src: Source) -> None:
        for k, v in src.counters().items():
            if isinstance(v, int):
                self._carried[k] = self._carried.get(k, 0) + v
            else:
                self._carried[k] = v

    def counters(self) -> dict:
        c = dict(self._carried)
        if self.inner is not None:
            for k, v in self.inner.counters().items():
                c[k] = c.get(k, 0) + v if isinstance(v, int) else v
        c.update(reconnects=self.reconnects, outages=self.outages)
        return c

    def close(self) -> None:
        if self.inner is not None:
            self._carry(self.inner)  # keep its counts for the closing report
            self.inner.close()
            self.inner = None
            self.connected = False
