"""Replay of a take file as a source (as fast as possible, or paced in real time)."""

from __future__ import annotations

import time

from .base import Block, Source
from .recording import Recording


class ReplaySource(Source):
    def __init__(self, rec: Recording, block_s: float = 0.1, realtime: bool = False):
        self.rec = rec
        self.rate_hz = rec.rate_hz
        self.channel_names = tuple(rec.channel_names)
        self.block_n = max(1, int(round(block_s * rec.rate_hz)))
        self.realtime = realtime
        self.pos = 0
        self._start = None

    def read(self) -> Block:
        if self._start is None:
            self._start = time.monotonic()
        a, b = self.pos, min(self.pos + self.block_n, self.rec.freq_hz.shape[0])
        self.pos = b
        self.ended = b >= self.rec.freq_hz.shape[0]
        if self.realtime:
            delay = self._start + b / self.rate_hz - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        return Block(self.rec.t_s[a:b], self.rec.freq_hz[a:b], time.monotonic())
