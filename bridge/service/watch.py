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
    events: list = field(default_factory=list)  # (kind, gesture, confidence, send_ms, sent), newest last
    notices: list = field(default_factory=list)
    heard_s: float = 0.0                        # host time of its last state message
    implausible: int = 0                        # of dropped: skipped as far from rest


@dataclass
class StatusView:
    """What the stream said so far. ``take(address, args)`` applies one message."""

    garments: dict = field(default_factory=dict)
    uptime_s: float = 0.0
    pid: int = 0
    heard_alive: bool = False
    expected: int = 0          # garments the daemon runs (from its heartbeat)
    alive_s: float = 0.0       # host time the last heartbeat came in

    def take(self, address: str, args: list, now_s: float = 0.0) -> None:
        parts = address.split("/")
        if address == "/drape/alive" and len(args) >= 3:
            self.uptime_s, self.pid, self.heard_alive = float(args[0]), int(args[2]), True
            self.expected = int(args[1])
            self.alive_s = now_s
            return
        if len(parts) != 5 or parts[1] != "drape" or parts[2] != "g":
            return
        g = self.garments.setdefault(parts[3], GarmentView())
        what = parts[4]
        if what == "state" and len(args) >= 8:
            g.state, g.armed, g.layer, g.flowing = str(args[0]), bool(args[1]), str(args[2]), bool(args[3])
            g.rate_hz, g.dropped, g.samples, g.note = float(args[4]), int(args[5]), int(args[6]), str(args[7])
            g.heard_s = now_s
            g.implausible = int(args[8]) if len(args) >= 9 else 0
        elif what == "channels":
            g.channels = tuple(str(a) for a in args)
        elif what == "levels":
            g.levels = tuple(float(a) for a in args)
        elif what == "top":
            g.top = [(str(args[i]), float(args[i + 1])) for i in range(0, len(args) - 1, 2)]
        elif what == "event" and len(args) >= 7:
            sent = bool(args[7]) if len(args) >= 8 else True
            why_not = "" if sent else (str(args[8]) if len(args) >= 9 and args[8] else "disarmed")
            g.events = (g.events + [(str(args[0]), str(args[1]), float(args[2]), float(args[6]), sent, why_not)])[-6:]
        elif what == "notice" and args:
            g.notices = (g.notices + [str(args[0])])[-2:]


def bar(value: float, full: float, width: int = 24) -> str:
    k = int(round(width * min(1.0, abs(value) / full))) if full > 0 else 0
    return "#" * k + "." * (width - k)


STALE_S = 3.0  # the daemon sends a heartbeat every second: three missed is silence


def shown_state(g: GarmentView) -> str:
    """The state word a person reads. The stream keeps "running" for a garment whose data has
    stopped (it is still set up: outputs open, mapping loaded, and it carries on when data
    comes back; a reader of the stream has its data flag), but the head line must not tell
    an operator "running" for a garment that delivers nothing."""
    if g.state == "running" and not g.flowing:
        return "data stopped" if g.samples else "no data yet"
    return g.state


def render(view: StatusView, width: int = 78, now_s: float | None = None, stale_s: float = STALE_S) -> str:
    """One frame of plain text (no escape codes). With ``now_s``, a daemon silent for more
    than ``stale_s`` is said to be so at the top, and every value shown is marked stale."""
    from .control import printable
    silent = None
    if now_s is not None and view.heard_alive and now_s - view.alive_s > stale_s:
        silent = now_s - view.alive_s
    if silent is not None:
        lines = [f"!! NO HEARTBEAT FOR {silent:.0f} s: the daemon (pid {view.pid}) stopped or cannot be heard; "
                 "everything below is STALE, from when it was last heard"]
    else:
        lines = [f"drape daemon pid {view.pid}, up {view.uptime_s:.0f} s" if view.heard_alive else "waiting for the daemon's heartbeat ..."]
    mark = "STALE " if silent is not None else ""
    for name in sorted(view.garments):
        g = view.garments[name]
        g_stale = mark or ("STALE " if now_s is not None and g.heard_s and now_s - g.heard_s > stale_s else "")
        # levels and scores are the last the garment gave: stale while its data has stopped
        d_stale = g_stale or ("STALE " if not g.flowing and g.state != "failed" else "")
        if g.state == "?":
            # Levels and events can come before the first state message (twice a second): until
            # it does, whether data flows, its rate and arming are unknown, so none is drawn.
            lines.append(f"{g_stale}[{printable(name, 32)}] state not heard yet: arming, data and rate unknown"[:width])
            lines += _events_and_notices(g, width)
            continue
        head = (f"{g_stale}[{printable(name, 32)}] {printable(shown_state(g), 20)}  {'ARMED' if g.armed else 'disarmed'}  "
                f"layer {printable(g.layer, 32) or '-'}  "
                f"{'data' if g.flowing else 'NO DATA'} {g.rate_hz:5.1f} Hz  dropped {g.dropped}"
                + (f" (implausible {g.implausible})" if g.implausible else ""))
        lines.append(head[:width])
        if g.note:
            lines.append(f"  {g_stale}note: {printable(g.note, 400)}"[:width])
        full = max([0.02] + [abs(v) for v in g.levels])
        if g.levels and not g.channels:
            # Levels come 20 times a second, the names only with the state (twice a second):
            # a view just started shows no bars until it knows which channel each one is.
            lines.append(f"  {d_stale}levels of {len(g.levels)} channels: their names not heard yet"[:width])
        for ch, v in zip(g.channels, g.levels):
            lines.append(f"  {d_stale}{printable(ch, 14):<14} {bar(v, full)} {v:+.4f}"[:width])
        if g.top:
            lines.append(f"  {d_stale}top: " + "  ".join(f"{printable(c, 20)} {p:.2f}" for c, p in g.top))
        lines += _events_and_notices(g, width)
    return "\n".join(lines)


def _events_and_notices(g: GarmentView, width: int) -> list[str]:
    """A garment's last four decisions (sent or not) and its notices, one line each."""
    from .control import printable
    lines = []
    for kind, gesture, conf, send_ms, *rest in g.events[-4:]:
        sent = rest[0] if rest else True
        why_not = rest[1] if len(rest) > 1 and rest[1] else "disarmed"
        how = f"sent {send_ms:6.2f} ms after arrival" if sent else f"{printable(why_not, 32)}: not sent"
        lines.append(f"  {kind:<9} {printable(gesture, 32):<16} conf {conf:.2f}  {how}"[:width])
    for n in g.notices:
        lines.append(f"  ! {printable(n, 1000)}"[:width])
    return lines


def _width(out) -> int:
    """The terminal's width (COLUMNS, else the terminal's, else 78) for cutting lines."""
    import shutil
    return max(40, shutil.get_terminal_size((78, 24)).columns)


class PortBusy(OSError):
    """Another program (another `drape watch`?) listens on the status port."""


def listen_socket(host: str, port: int) -> socket.socket:
    sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
    try:
        sock.bind((host, port))
    except OSError as exc:
        sock.close()
        import errno
        if exc.errno == errno.EADDRINUSE:
            raise PortBusy(f"port {port} on {host} is busy: another program (another drape watch?) listens there. "
                           f"Pick another with --port N and add \"{host}:N\" to the daemon's [status] to = [...] "
                           "list (each watcher needs its own port)") from None
        raise
    return sock


def watch(host: str, port: int, once: bool = False, wait_s: float = 5.0, out=None, refresh_hz: float = 15.0,
          stale_s: float = STALE_S) -> int:
    """Listen for the stream and redraw; ``once``: print one frame when every garment named
    so far has sent its state and levels (or after wait_s), then return. A daemon not heard
    for ``stale_s`` is shown as silent, its values as stale."""
    out = out or sys.stdout
    sock = listen_socket(host, port)
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
                    view.take(m.address, list(m.params), time.monotonic())
                except (ParseError, IndexError, ValueError, TypeError):
                    pass
                ready, _, _ = select.select([sock], [], [], 0)
            now = time.monotonic()
            if once:
                # A garment's channel names come in their own datagram after its state: a frame
                # drawn between the two would have bars without names.
                complete = view.heard_alive and len(view.garments) >= max(1, view.expected) and all(
                    g.state != "?" and (g.channels or g.state == "failed") and (g.levels or g.state != "running")
                    for g in view.garments.values())
                if complete or now - started > wait_s:
                    out.write(render(view, _width(out), now, stale_s) + "\n")
                    out.flush()
                    if not complete:
                        why = (f"nothing arrived on {host}:{port} in {wait_s:g} s: is the daemon running, with "
                               f"this address in its [status] to = [...] list?" if not view.heard_alive else
                               f"not every garment had sent its state, channel names and levels within {wait_s:g} s")
                        print(f"drape: {why}", file=sys.stderr, flush=True)
                    return 0 if complete else 1
                continue
            if now >= next_draw:
                next_draw = now + 1.0 / refresh_hz
                out.write("\x1b[H\x1b[2J" + render(view, _width(out), now, stale_s).replace("\n", "\x1b[K\n") + "\n")
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
    """What the daemon said to one command: ``ok`` True (done), False (refused, or done on
    only some garments: ``outcome`` "partly") or None (no answer within the wait), and the
    lines to print."""

    ok: bool | None
    lines: list
    outcome: str = ""    # the acknowledgement's word: "done", "partly", "refused" ("" without one)


ANSWER_WIDTH = 10_000   # a command's answer is read whole, not cut to a terminal's width


def send_command(to: str, what: str, layer: str = "", garment: str = "", token: str = "",
                 wait_s: float = 1.0) -> Answer:
    """Send one command and wait up to ``wait_s`` for the daemon's acknowledgement
    (``/drape/ack``: done, partly or refused, and what it did or why); for "status" the reply is
    the daemon's state, drawn as `drape watch` does."""
    from .control import ACK, ACK_TEXT, DONE, PARTLY, REFUSED, parse_host_port, printable
    host, port = parse_host_port(to)
    try:  # IPv4 first: "localhost" may also name ::1, where a daemon on 127.0.0.1 is not
        infos = socket.getaddrinfo(host, port, socket.AF_INET, socket.SOCK_DGRAM)
    except socket.gaierror:
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
                outcome = printable(args[0], 20)
                head = {DONE: "", PARTLY: "partly done: ", REFUSED: "refused: "}.get(outcome, f"{outcome}: ")
                return Answer(outcome == DONE, [head + printable(args[2], ACK_TEXT)], outcome)
            view.take(m.address, args)
            if what == "status" and view.heard_alive and len(view.garments) >= view.expected and all(
                    g.channels or g.state == "failed" for g in view.garments.values()):
                return Answer(True, render(view, width=ANSWER_WIDTH).splitlines())
        if what == "status" and view.heard_alive:
            return Answer(True, render(view, width=ANSWER_WIDTH).splitlines())
        return Answer(None, [f"no answer from {to} within {wait_s:g} s: nothing was confirmed (is the daemon "
                             "running and listening there? with a token, is it the right one?)"])
    finally:
        sock.close()
