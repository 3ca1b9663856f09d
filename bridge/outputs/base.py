"""The output base class: override ``send``, optionally ``close``."""

from __future__ import annotations

from dataclasses import dataclass

from ..mapping import Destination


@dataclass
class OutputStats:
    sent: int = 0
    dropped: int = 0
    last_error: str = ""


class Output:
    """One destination. Subclasses override ``_send``; ``send`` counts and never raises."""

    def __init__(self, name: str):
        self.name = name
        self.stats = OutputStats()

    def send(self, message) -> bool:
        try:
            self._send(message)
        except OSError as exc:  # a network hiccup must not stop gesture processing
            self.stats.dropped += 1
            self.stats.last_error = str(exc)
            return False
        self.stats.sent += 1
        return True

    def _send(self, message) -> None:
        raise NotImplementedError

    def close(self) -> None:
        """Release anything held (sockets, keys, notes)."""


def open_output(dest: Destination) -> Output:
    """Pick the output backend for a destination by its kind."""
    from .osc import OscUdpOutput

    backends = {"osc": OscUdpOutput}
    if dest.kind not in backends:
        raise ValueError(f"no output backend for {dest.kind!r}; known: {', '.join(backends)}")
    return backends[dest.kind](dest.name, dest.host, dest.port)
