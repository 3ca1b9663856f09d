"""The output base class, the error for a missing system, and picking a backend by name.

An output is one destination. Subclasses override ``_send(message)`` and ``close()``;
outputs that change over time (fades, keep-alive, reconnects) also override ``tick``.
Outputs see only message values from ``bridge.mapping.messages``.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..mapping import Destination


@dataclass
class OutputStats:
    """Counts since the output opened. ``overflowed`` is the part of ``dropped`` lost to a full queue."""

    sent: int = 0
    dropped: int = 0
    last_error: str = ""
    overflowed: int = 0


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


def open_backend(dest: Destination) -> Output:
    """The bare output for a destination, picked by ``dest.kind`` (no queue, no thread)."""

    def osc(d):
        from .osc import OscUdpOutput
        return OscUdpOutput(d.name, d.host, d.port, broadcast=d.broadcast)

    def osc_tcp(d):
        from .osc import OscTcpOutput
        return OscTcpOutput(d.name, d.host, d.port, framing=d.osc_framing)

    def midi(d):
        from .midi import MidiPortOutput
        return MidiPortOutput(d.name, d.port_name, virtual=d.virtual, api=d.midi_api)

    def midi_file(d):
        from .midi import MidiFileOutput
        return MidiFileOutput(d.name, d.path)

    def keys(d):
        from .keys import open_keyboard, KeyOutput
        return KeyOutput(d.name, open_keyboard(d.key_backend))

    def sacn(d):
        from .sacn import SacnOutput
        return SacnOutput(d.name, universe=d.universe, host=d.host or None, port=d.port or 5568,
                          priority=d.priority, source_label=d.source_label,
                          safe_levels=dict(d.safe_levels), interface=d.interface or None,
                          keepalive_s=d.keepalive_s)

    backends = {"osc": osc, "osc-tcp": osc_tcp, "midi": midi, "midi-file": midi_file, "keys": keys, "sacn": sacn}
    if dest.kind not in backends:
        raise ValueError(f"no output backend for {dest.kind!r}; known: {', '.join(backends)}")
    return backends[dest.kind](dest)


def open_output(dest: Destination, queue_size: int = 256) -> Output:
    """The output for a destination behind its own bounded queue and worker thread.

    Raises OutputUnavailable when the system it needs is missing (no MIDI system, no
    display); the caller can carry on with its other destinations.
    """
    from .queued import QueuedOutput
    out = QueuedOutput(open_backend(dest), capacity=queue_size)
    if dest.kind == "sacn" and dest.safe_at_start:
        from ..mapping.messages import Release
        out.send(Release())  # the safe look now (and kept alive), not only from the first cue
    return out
