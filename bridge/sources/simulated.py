"""The built-in simulated jacket as a source, in real time or as fast as possible."""

from __future__ import annotations

import time

import numpy as np

from ..garment import GESTURES, Jacket, random_script
from .base import Block, Source


class SimulatedSource(Source):
    """A simulated wearer performing gestures at random between idle stretches.

    realtime: pace blocks to the wall clock (live demo) or return them at once (tests,
    benchmarks). duration_s: stop after this much stream time (None: endless).
    ``truth`` collects the performed intervals, for checking what was recognised.
    """

    def __init__(self, seed: int = 0, wearer: int = 0, session: int = 0, realtime: bool = True,
                 block_s: float = 0.02, duration_s: float | None = None, chunk_s: float = 30.0,
                 gestures=None, clock=time.monotonic, sleep=time.sleep):
        self.jacket = Jacket(seed=seed, wearer=wearer, session=session)
        self.rng = np.random.default_rng([seed, wearer, session, 7])
        self.rate_hz = self.jacket.rate_hz
        self.channel_names = tuple(self.jacket.channel_names)
        self.realtime = realtime
        self.block_n = max(1, int(round(block_s * self.rate_hz)))
        self.duration_s = duration_s
        self.chunk_s = chunk_s
        self.gestures = list(gestures) if gestures else list(GESTURES)
        self.truth = []
        self._clock, self._sleep = clock, sleep
        self._t = np.empty(0)
        self._f = np.empty((0, len(self.channel_names)))
        self._start = None
        self._emitted = 0

    def read(self) -> Block:
        if self._start is None:
            self._start = self._clock()
        limit = None if self.duration_s is None else int(round(self.duration_s * self.rate_hz))
        while self._t.size < self.block_n:
            take = self.jacket.perform(random_script(self.rng, self.chunk_s, self.gestures))
            self.truth.extend(take.intervals)
            self._t = np.concatenate([self._t, take.t_s])
            self._f = np.concatenate([self._f, take.freq_hz])
        n = self.block_n
        if limit is not None:
            n = max(0, min(n, limit - self._emitted))
            if n == 0:
                self.ended = True
        t, f = self._t[:n], self._f[:n]
        self._t, self._f = self._t[n:], self._f[n:]
        self._emitted += n
        if self.realtime and n:
            due = self._start + self._emitted / self.rate_hz
            delay = due - self._clock()
            if delay > 0:
                self._sleep(delay)
        return Block(t, f, self._clock())
