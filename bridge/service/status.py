"""The status stream: what the daemon sees, as OSC over UDP, for show software and `drape watch`.

Addresses (our own design; the table in docs/service.md is the reference):

    /drape/alive                  f uptime_s, i garments, i pid                 1 per second
    /drape/g/NAME/state           s state, i armed, s layer, i flowing, f rate_hz,
                                  i dropped, i samples, s note, i implausible  2 per second
    /drape/g/NAME/channels        s channel names ...                           with state
    /drape/g/NAME/levels          f level per channel (ΔC/C0 above baseline)    levels_hz
    /drape/g/NAME/top             s class, f probability (three pairs)          levels_hz
    /drape/g/NAME/event           s kind, s gesture, f confidence, f t_s (stream), f arrived_s
                                  (host monotonic), f decide_ms, f send_ms,
                                  i sent (0: nothing went out), s why not
                                  ("disarmed", "no mapping"; "" when sent)     each event
    /drape/g/NAME/notice          s text (shift found, reload, failure)         when it happens

Building a message is separate from sending it (python-osc style): the functions here return
datagrams; ``StatusStream.send`` puts them on the wire, never blocking the loop.
"""

from __future__ import annotations

import socket

from pythonosc.osc_message_builder import OscMessageBuilder


def message(address: str, *args) -> bytes:
    b = OscMessageBuilder(address)
    for a in args:
        if isinstance(a, bool):
            a = int(a)
        b.add_arg(float(a) if hasattr(a, "dtype") else a)
    return b.build().dgram


def alive(uptime_s: float, garments: int, pid: int) -> bytes:
    return message("/drape/alive", float(uptime_s), int(garments), int(pid))


def garment_state(name, state, armed, layer, flowing, rate_hz, dropped, samples, note, channels,
                  implausible: int = 0) -> list[bytes]:
    """``dropped`` counts every sample lost or skipped; ``implausible`` is the part of it the
    pipeline skipped as far from the resting frequency (a counter glitch)."""
    return [message(f"/drape/g/{name}/state", str(state), int(bool(armed)), str(layer or ""), int(bool(flowing)),
                    float(rate_hz), int(dropped), int(samples), str(note or ""), int(implausible)),
            message(f"/drape/g/{name}/channels", *[str(c) for c in channels])]


def levels(name, values) -> bytes:
    return message(f"/drape/g/{name}/levels", *[float(v) for v in values])


def top(name, classes, probabilities, n: int = 3) -> bytes:
    order = sorted(range(len(classes)), key=lambda i: -float(probabilities[i]))[:n]
    args = []
    for i in order:
        args += [str(classes[i]), float(probabilities[i])]
    return message(f"/drape/g/{name}/top", *args)


def event(name, e, arrived_s: float, decide_ms: float, send_ms: float, sent: bool = True,
          why_not: str = "") -> bytes:
    """``sent`` False: nothing went out for this event; ``why_not`` says why ("disarmed": the
    garment was disarmed, "no mapping": it runs without one)."""
    from .control import printable  # a layer name from the network is forwarded escaped
    return message(f"/drape/g/{name}/event", str(e.kind), printable(e.gesture or e.detail), float(e.confidence),
                   float(e.t_s), float(arrived_s), float(decide_ms), float(send_ms), int(bool(sent)),
                   "" if sent else str(why_not or "disarmed"))


def notice(name, text: str) -> bytes:
    from .control import printable
    return message(f"/drape/g/{name}/notice", printable(text, 1000))


class StatusStream:
    """Sends datagrams to each "HOST:PORT" destination from one non-blocking UDP socket.
    A destination that is not listening costs nothing: errors are counted, never raised."""

    def __init__(self, destinations=()):
        from .control import parse_host_port
        self.to = [parse_host_port(d) for d in destinations]
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.setblocking(False)
        self.errors = 0
        self.sent = 0

    def send(self, dgrams) -> None:
        if not self.to:
            return
        for d in dgrams:
            for addr in self.to:
                try:
                    self.sock.sendto(d, addr)
                    self.sent += 1
                except OSError:  # full buffer or nobody listening: status is best effort
                    self.errors += 1

    def close(self) -> None:
        self.sock.close()
