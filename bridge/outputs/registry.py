"""Output backends picked by name: the one place that knows every concrete output.

``open_backend(destination)`` makes the bare output for ``destination.kind``;
``open_output`` puts it behind its own queue and worker thread. The base class
(``base.Output``) knows none of them; MIDI, keys and sACN are imported only when used,
so their optional packages are needed only by those who send to them.
"""

from __future__ import annotations

from ..mapping import Destination
from .base import Output


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
        return KeyOutput(d.name, open_keyboard(d.key_backend), reopen=lambda: open_keyboard(d.key_backend))

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
