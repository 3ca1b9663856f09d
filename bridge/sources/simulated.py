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
    first: a script performed before the random part (e.g. ``tour_script``: each gesture once).
    on_read: called with the stream time reached (s) after each block, e.g. to say what is
    being performed. ``truth`` collects the performed intervals, for checking what was recognised.
    """

    def __init__(self, seed: int = 0, wearer: int = 0, session: int = 0, realtime: bool = True,
                 block_s: float = 0.02, duration_s: float | None = None, chunk_s: float = 30.0,
                 gestures=None, clock=time.monotonic, sleep=time.sleep, first=None, on_read=None):
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
        self._first = list(first) if first else None
        self.on_read = on_read

    def read(self) -> Block:
        if self._start is None:
            self._start = self._clock()
        limit = None if self.duration_s is None else int(round(self.duration_s * self.rate_hz))
        while self._t.size < self.block_n:
            script, self._first = self._first or random_script(self.rng, self.chunk_s, self.gestures), None
            take = self.jacket.perform(script)
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
        if self.on_read:
            self.on_read(self._emitted / self.rate_hz)
        return Block(t, f, self._clock())


class PromptedSimulatedSource(Source):
    """A simulated wearer who follows prompts, for trying guided capture without a garment.

    ``prompt(label, within_s)`` asks for a gesture or posture: after a human-like reaction
    delay (drawn from ``reaction_s``) the wearer performs it (a posture is held until shortly
    before ``within_s`` runs out); the rest of the time the wearer stands or fidgets (null
    activity). The stream is rendered in small pieces so a prompt takes effect at once.
    ``truth`` collects the performed intervals (stream time, s). ``take`` (see ``Jacket``)
    makes it a further performance in the ``session`` dressing, as a check-in take is.
    """

    def __init__(self, seed: int = 0, wearer: int = 0, session: int = 0, realtime: bool = True,
                 block_s: float = 0.1, reaction_s=(0.3, 0.8), null_chunk_s: float | None = None,
                 clock=time.monotonic, sleep=time.sleep, take: int | None = None):
        from ..garment import GESTURES as kinds

        self.jacket = Jacket(seed=seed, wearer=wearer, session=session, take=take)
        self.kinds = kinds
        self.rng = np.random.default_rng([seed, wearer, session, 17] + ([] if take is None else [int(take)]))
        self.rate_hz = self.jacket.rate_hz
        self.channel_names = tuple(self.jacket.channel_names)
        self.realtime = realtime
        self.block_s = block_s
        self.reaction_s = reaction_s
        # Null activity is rendered ahead in pieces of this length (longer is cheaper; a prompt
        # then waits for the piece under way, a longer reaction). Real time: one block.
        self.null_chunk_s = null_chunk_s or (block_s if realtime else 0.5)
        self.truth = []
        self._todo: list = []
        self._null = "standing"
        self._null_left_s = 0.0
        self._clock, self._sleep = clock, sleep
        self._start = None
        self._emitted = 0
        self._t = np.empty(0)
        self._f = np.empty((0, len(self.channel_names)))

    def prompt(self, label: str, within_s: float) -> None:
        if label not in self.kinds:
            raise ValueError(f"the simulated wearer does not know {label!r}")
        react = float(self.rng.uniform(*self.reaction_s))
        hold = max(1.0, within_s - react - 0.6) if self.kinds[label] == "posture" else None
        self._todo = [(self._null, react), (label, hold)]

    def read(self) -> Block:
        if self._start is None:
            self._start = self._clock()
        n = max(1, int(round(self.block_s * self.rate_hz)))
        if self._todo:  # a prompt: the wearer finishes any movement under way, then reacts
            take = self.jacket.perform(self._todo)
            self._todo = []
            self.truth.extend(take.intervals)
            self._t = np.concatenate([self._t, take.t_s])
            self._f = np.concatenate([self._f, take.freq_hz])
        elif self._t.size == 0:
            if self._null_left_s <= 0:  # a new stretch of standing or fidgeting
                self._null = "fidgeting" if self.rng.random() < 0.3 else "standing"
                self._null_left_s = float(self.rng.uniform(1.0, 4.0))
            take = self.jacket.perform([(self._null, self.null_chunk_s)])
            self._null_left_s -= self.null_chunk_s
            self._t, self._f = take.t_s, take.freq_hz
        t, f = self._t[:n], self._f[:n]
        self._t, self._f = self._t[n:], self._f[n:]
        self._emitted += t.size
        if self.realtime:
            delay = self._start + self._emitted / self.rate_hz - self._clock()
            if delay > 0:
                self._sleep(delay)
        return Block(t, f, self._clock())
