"""Offline replay: a take through the live pipeline, block by block, as fast as possible."""

from __future__ import annotations

from ..sources.replay import ReplaySource
from .pipeline import Pipeline, Settling


def replay_events(rec, model, mapping=None, block_s: float = 0.1, settle: Settling | None = None) -> list:
    """Events the live chain decides over a whole take, fed in blocks like a live source.

    The pipeline's decisions do not depend on the block size (``Windower`` emits windows
    at the same samples whatever the blocks, and hold-still captures take the same samples),
    so a long block only saves per-call work. ``settle``: the ``Settling`` the live chain
    ran with (a service garment: its ``[calibration]``; see ``Service.settling``), None for
    none (the demo); `drape start` with one [garment] runs with ``Settling()``.
    """
    return replay_take(rec, model, mapping, block_s, settle)[0]


def replay_take(rec, model, mapping=None, block_s: float = 0.1,
                settle: Settling | None = None) -> tuple[list, list, int]:
    """``replay_events`` that also keeps each hop's class probabilities.

    Returns (events, hops [(t_s, probabilities)], rows skipped as unreadable).
    """
    pipe = Pipeline(model, mapping, record_hops=True, settle=settle)
    src = ReplaySource(rec, block_s)
    events = []
    while not src.ended:
        events += pipe.feed(src.read().freq_hz)
    return events + pipe.stop(), pipe.hops, pipe.skipped
