"""`drape watch` and `drape send`: the daemon seen and steered from another terminal.

The view listens to the status stream (see status.py) on a UDP port and redraws plain ANSI
text ten times or more a second: it works over SSH and in any terminal, and costs the daemon
nothing (the daemon sends its stream whether anyone listens or not).
"""

from __future__ import annotations

import select
import socket
import sys
import time
from dataclasses import dataclass, field

from pythonosc.osc_message import OscMessage, ParseError
from pythonosc.osc_message_builder import OscMessageBuilder


@dataclass
class GarmentView:
    state: str = "?"
    armed: bool = False
    layer: str = ""
    flowing: bool = False
    rate_hz: float = 0.0
    dropped: int = 0
    samples: int = 0
    note: str = ""
    channels: tuple = ()
    levels: tuple = ()
    top: list = field(default_factory=list)
    events: list = field(default_factory=list)  # (kind, gesture, confidence, send_ms), newest last
    notices: list = field(default_factory=list)


@dataclass
class StatusView:
    """What the stream said so far. ``take(address, args)`` applies one message."""

    garments: dict = field(default_factory=dict)
    uptime_s: float = 0.0
    pid: int = 0
    heard_alive: bool = False
    expected: int = 0          # garments the daemon runs (from its heartbeat)

    def take(self, address: str, args: list) -> None:
        parts = address.split("/")
        if address == "/drape/alive" and len(args) >= 3:
            self.uptime_s, self.pid, self.heard_alive = float(args[0]), int(args[2]), True
            self.expected = int(args[1])
            return
        if len(parts) != 5 or parts[1] != "drape" or parts[2] != "g":
            return
        g = self.garments.setdefault(parts[3], GarmentView())
        what = parts[4]
        if what == "state" and len(args) >= 8:
            g.state, g.armed, g.layer, g.flowing = str(args[0]), bool(args[1]), str(args[2]), bool(args[3])
            g.rate_hz, g.dropped, g.samples, g.note = float(args[4]), int(args[5]), int(args[6]), str(args[7])
        elif what == "channels":
            g.channels = tuple(str(a) for a in args)
        elif what == "levels":
            g.levels = tuple(float(a) for a in args)
        elif what == "top":
            g.top = [(str(args[i]), float(args[i + 1])) for i in range(0, len(args) - 1, 2)]
        elif what == "event" and len(args) >= 7:
            g.events = (g.events + [(str(args[0]), str(args[1]), float(args[2]), float(args[6]))])[-6:]
        elif what == "notice" and args:
            g.notices = (g.notices + [str(args[0])])[-2:]


def bar(value: float, full: float, width: int = 24) -> str:
    k = int(round(width * min(1.0, abs(value) / full))) if full > 0 else 0
    return "#" * k + "." * (width - k)


def render(view: StatusView, width: int = 78) -> str:
    """One frame of plain text (no escape codes)."""
    lines = [f"drape daemon pid {view.pid}, up {view.uptime_s:.0f} s" if view.heard_alive else "waiting for the daemon's heartbeat ..."]
    for name in sorted(view.garments):
        g = view.garments[name]
        head = (f"[{name}] {g.state}  {'ARMED' if g.armed else 'disarmed'}  layer {g.layer or '-'}  "
                f"{'data' if g.flowing else 'NO DATA'} {g.rate_hz:5.1f} Hz  dropped {g.dropped}")
        lines.append(head[:width])
        if g.note:
            lines.append(f"  note: {g.note}"[:width])
        full = max([0.02] + [abs(v) for v in g.levels])
        for ch, v in zip(g.channels or [f"ch{i}" for i in range(len(g.levels))], g.levels):
            lines.append(f"  {ch[:14]:<14} {bar(v, full)} {v:+.4f}")
        if g.top:
            lines.append("  top: " + "  ".join(f"{c} {p:.2f}" for c, p in g.top))
        for kind, gesture, conf, send_ms in g.events[-4:]:
            lines.append(f"  {kind:<9} {gesture:<16} conf {conf:.2f}  sent {send_ms:6.2f} ms after arrival")
        for n in g.notices:
            lines.append(f"  ! {n}"[:width])
    return "\n".join(lines)


def watch(host: str, port: int, once: bool = False, wait_s: float = 5.0, out=None, refresh_hz: float = 15.0) -> int:
    """Listen for the stream and redraw; ``once``: print one frame when every garment named
    so far has sent its state and levels (or after wait_s), then return."""
    out = out or sys.stdout
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind((host, port))
    view = StatusView()
    started = time.monotonic()
    next_draw = started
    try:
        while True:
            ready, _, _ = select.select([sock], [], [], 1.0 / refresh_hz)
            while ready:
                data, _ = sock.recvfrom(65536)
                try:
                    m = OscMessage(data)
                    view.take(m.address, list(m.params))
                except (ParseError, IndexError, ValueError):
                    pass
                ready, _, _ = select.select([sock], [], [], 0)
            now = time.monotonic()
            if once:
                complete = view.heard_alive and len(view.garments) >= max(1, view.expected) and all(
                    g.state != "?" and (g.levels or g.state != "running") for g in view.garments.values())
                if complete or now - started > wait_s:
                    out.write(render(view) + "\n")
                    out.flush()
                    return 0 if complete else 1
                continue
            if now >= next_draw:
                next_draw = now + 1.0 / refresh_hz
                out.write("\x1b[H\x1b[2J" + render(view).replace("\n", "\x1b[K\n") + "\n")
                out.flush()
    except KeyboardInterrupt:
        return 0
    finally:
        sock.close()


def command_message(what: str, layer: str = "", garment: str = "", token: str = "") -> bytes:
    b = OscMessageBuilder(f"/drape/{what}")
    for a in ([token] if token else []) + ([layer] if what == "layer" else []) + ([garment] if garment else []):
        b.add_arg(a)
    return b.build().dgram


TOKEN_ENV = "DRAPE_TOKEN"


@dataclass
class Answer:
    """What the daemon said to one command: ``ok`` True (done), False (refused) or None (no
    answer within the wait), and the lines to print."""

    ok: bool | None
    lines: list


def send_command(to: str, what: str, layer: str = "", garment: str = "", token: str = "",
                 wait_s: float = 1.0) -> Answer:
    """Send one command and wait up to ``wait_s`` for the daemon's acknowledgement
    (``/drape/ack``: done or refused, and what it did or why); for "status" the reply is
    the daemon's state, drawn as `drape watch` does."""
    from .control import ACK, parse_host_port, printable
    host, port = parse_host_port(to)
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_DGRAM)
    except socket.gaierror as exc:
        raise ValueError(f"cannot resolve {host!r}: {exc}") from None
    family, _, _, _, addr = infos[0]
    sock = socket.socket(family, socket.SOCK_DGRAM)
    try:
        sock.sendto(command_message(what, layer, garment, token), addr)
        view = StatusView()
        end = time.monotonic() + wait_s
        while time.monotonic() < end:
            ready, _, _ = select.select([sock], [], [], max(0.0, end - time.monotonic()))
            if not ready:
                break
            try:
                data, _ = sock.recvfrom(65536)
                m = OscMessage(data)
            except ConnectionRefusedError:  # ICMP port unreachable: nothing listens there
                return Answer(None, [f"nothing is listening on {to} (is the daemon running? is it the right port?)"])
            except (OSError, ParseError, IndexError, ValueError):
                continue
            args = list(m.params)
            if m.address == ACK and len(args) >= 3:
                return Answer(args[0] == "done", [("" if args[0] == "done" else "refused: ") + printable(args[2], 400)])
            view.take(m.address, args)
            if what == "status" and view.heard_alive and len(view.garments) >= view.expected and all(
                    g.channels or g.state == "failed" for g in view.garments.values()):
                return Answer(True, render(view).splitlines())
        if what == "status" and view.heard_alive:
            return Answer(True, render(view).splitlines())
        return Answer(None, [f"no answer from {to} within {wait_s:g} s: nothing was confirmed (is the daemon "
                             "running and listening there? with a token, is it the right one?)"])
    finally:
        sock.close()
