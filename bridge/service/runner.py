"""The live loop: read a source, run the pipeline, send to outputs, until told to stop."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from ..decisions import Event
from ..outputs import Output
from ..sources.base import Source
from ..sources.health import NO_DATA, STREAMING, Watchdog
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
    holds: int = 0  # times the outputs were held safe because data stopped
    hop_ms: list = field(default_factory=list)


def run(source: Source, pipeline: Pipeline, outputs: dict[str, Output], stop: StopFlag | None = None,
        on_event=None, clock=time.monotonic, stall_s: float | None = None, on_status=None) -> RunStats:
    """Process until the source ends or ``stop`` is set; held postures are released on the way out.

    on_event(event, timing) is called for every event after its messages are sent.
    stall_s: when set, a watchdog declares "no data" once the source is disconnected or has
    given no sample for this long (s); held postures are then released (once) and the loop
    keeps reading, resuming when samples come back. on_status(status, reason) hears each change.
    """
    stop = stop or StopFlag()
    stats = RunStats()
    watchdog = Watchdog(stall_s) if stall_s else None
    reported = None

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
            if watchdog is not None:
                now = watchdog.step(clock(), len(block), getattr(source, "connected", True))
                if now != reported:
                    if reported is not None and reported[0] == STREAMING and now[0] == NO_DATA:
                        stats.holds += 1  # hold outputs safe: let go of every posture, once
                        deliver(pipeline.stop(), clock())
                    if on_status and (reported is not None or now[0] == STREAMING or now[1] == "device gone"):
                        on_status(*now)
                    reported = now
            if len(block) == 0:
                continue
            events = pipeline.feed(block.freq_hz)
            stats.blocks += 1
            stats.samples += len(block)
            deliver(events, block.arrived_s)
    finally:
        deliver(pipeline.stop(), clock())
    return stats
