"""The live loop: read a source, run the pipeline, send to outputs, until told to stop."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from ..decisions import Event
from ..outputs import Output
from ..sources.base import Source
from .pipeline import Pipeline


@dataclass
class Timing:
    """Per-event latency figures, ms: sample arrival → decision → all messages handed to outputs."""

    decide_ms: float
    send_ms: float


@dataclass
class StopFlag:
    """Set from a signal handler or another thread to end ``run`` after the current block."""

    stopped: bool = False
    reason: str = ""

    def set(self, reason: str = "") -> None:
        self.stopped, self.reason = True, reason


@dataclass
class RunStats:
    blocks: int = 0
    samples: int = 0
    events: int = 0
    hop_ms: list = field(default_factory=list)


def run(source: Source, pipeline: Pipeline, outputs: dict[str, Output], stop: StopFlag | None = None,
        on_event=None, clock=time.monotonic) -> RunStats:
    """Process until the source ends or ``stop`` is set; held postures are released on the way out.

    on_event(event, timing) is called for every event after its messages are sent.
    """
    stop = stop or StopFlag()
    stats = RunStats()

    def deliver(events: list[Event], arrived: float) -> None:
        decided = clock()
        for d in pipeline.dispatches(events):
            out = outputs.get(d.destination)
            if out is not None:
                out.send(d.message)
        sent = clock()
        for e in events:
            stats.events += 1
            if on_event:
                on_event(e, Timing((decided - arrived) * 1e3, (sent - arrived) * 1e3))

    try:
        while not stop.stopped and not source.ended:
            block = source.read()
            if len(block) == 0:
                continue
            events = pipeline.feed(block.freq_hz)
            stats.blocks += 1
            stats.samples += len(block)
            deliver(events, block.arrived_s)
    finally:
        deliver(pipeline.stop(), clock())
    return stats
