"""Offline replay: a take through the live pipeline, block by block, as fast as possible."""

from __future__ import annotations

from ..sources.replay import ReplaySource
from .pipeline import Pipeline


def replay_events(rec, model, mapping=None, block_s: float = 0.1) -> list:
    """Events the live chain decides over a whole take, fed in blocks like a live source.

    The pipeline's decisions do not depend on the block size (``Windower`` emits windows
    at the same samples whatever the blocks), so a long block only saves per-call work.
    """
    pipe = Pipeline(model, mapping)
    src = ReplaySource(rec, block_s)
    events = []
    while not src.ended:
        events += pipe.feed(src.read().freq_hz)
    return events + pipe.stop()
