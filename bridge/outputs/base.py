"""The output base class and the error for a missing system (backends by name: ``registry``).

An output is one destination. Subclasses override ``_send(message)`` and ``close()``;
outputs that change over time (fades, keep-alive, reconnects) also override ``tick``.
Outputs see only message values from ``bridge.mapping.messages``.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class OutputStats:
    """Counts since the output opened. ``overflowed`` is the part of ``dropped`` lost to a full queue."""

    sent: int = 0
    dropped: int = 0
    last_error: str = ""
    overflowed: int = 0
    on_close: str = ""   # what closing let go of, in words for the operator


def closing_summary(output) -> str:
    """What a closed output did, for the operator: 'sent N, dropped M[; last error: ...][; on
    stop: what closing let go of]' (a queued output's own output says what it let go)."""
    s = output.stats
    let_go = getattr(getattr(output, "inner", output), "stats", s).on_close
    return (f"sent {s.sent}, dropped {s.dropped}" + (f"; last error: {s.last_error}" if s.last_error else "")
            + (f"; on stop: {let_go}" if let_go else ""))


class OutputUnavailable(RuntimeError):
    """The system this output needs is missing; the message says what to install or start."""


class Output:
    """One destination. ``send`` counts and never raises for a network problem."""

    def __init__(self, name: str):
        self.name = name
        self.stats = OutputStats()

    def send(self, message) -> bool:
        """Send one message now; False (and counted as dropped) when it could not go out."""
        try:
            self._send(message)
        except OSError as exc:  # a network hiccup must not stop gesture processing
            self.stats.dropped += 1
            self.stats.last_error = f"{type(exc).__name__}: {exc}"
            return False
        self.stats.sent += 1
        return True

    def _send(self, message) -> None:
        raise NotImplementedError

    def tick(self, now_s: float) -> float | None:
        """Periodic work (fades, keep-alive, reconnect). Returns seconds until the next call
        is wanted, or None when nothing is pending. ``now_s`` is ``time.monotonic()``."""
        return None

    def close(self) -> None:
        """Release anything held (sockets, keys, notes, lights to safe) and let go of the device."""


def _refuse(name: str, message) -> None:
    raise TypeError(f"output {name!r} cannot send {type(message).__name__}")
