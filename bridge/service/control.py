"""Control messages from the network: arm, disarm, panic and layer switches over OSC/UDP.

A technician's desk or a phone can send

    /drape/arm   /drape/disarm   /drape/panic   /drape/layer "NAME"

to the address given with ``--listen``. The inbox is a non-blocking socket polled by the
live loop between blocks (no thread). It can only produce these four commands: nothing
that arrives over the network can press a key or send a note (keys are pressed only by
rules the garment's own gestures trigger).
"""

from __future__ import annotations

import hmac
import socket
from collections import Counter

from pythonosc.osc_message import OscMessage, ParseError
from pythonosc.osc_message_builder import OscMessageBuilder

from ..sources.addresses import is_loopback  # noqa: F401  (also this module's name for it)

LOOPBACK = ("127.0.0.1", "::1", "localhost")
MIN_TOKEN = 16       # characters: a short token can be guessed from the network
ACK = "/drape/ack"   # the reply to every command: s outcome (DONE | PARTLY | REFUSED), s command, s text
ACK_TEXT = 1000      # characters of an answer's text: room for several garments' file:line reasons
DONE = "done"        # the command took effect everywhere it was meant to
PARTLY = "partly"    # it took effect on some garments, not on others (the text names both)
REFUSED = "refused"  # it took effect nowhere


class TokenMissing(ValueError):
    """A control port reachable from the network without a shared token."""


def printable(text, limit: int = 200) -> str:
    """``text`` from the network, safe to log or forward: control characters (a newline
    would forge a log line of its own, an escape sequence would repaint a terminal) are
    written as escapes, and the text is cut to ``limit`` characters."""
    s = str(text)
    out = "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in s[:limit])
    return out + ("..." if len(s) > limit else "")


def check_token(token: str, where: str) -> None:
    if token and len(token) < MIN_TOKEN:
        raise TokenMissing(f"{where}: the token has {len(token)} characters; use at least {MIN_TOKEN} "
                           "(random text, e.g. from `python -c \"import secrets; print(secrets.token_urlsafe(24))\"`)")


def outcome_word(outcome) -> str:
    """An acknowledgement's outcome: True is DONE, False is REFUSED, a word is kept."""
    if outcome is True or outcome is False:
        return DONE if outcome else REFUSED
    if outcome not in (DONE, PARTLY, REFUSED):
        raise ValueError(f"an acknowledgement's outcome is {DONE!r}, {PARTLY!r} or {REFUSED!r} (got {outcome!r})")
    return outcome


def ack_message(outcome, command: str, text: str) -> bytes:
    """``outcome``: DONE, PARTLY or REFUSED (or True / False for done / refused)."""
    outcome = outcome_word(outcome)
    b = OscMessageBuilder(ACK)
    for a in (outcome, command, printable(text, ACK_TEXT)):
        b.add_arg(a)
    return b.build().dgram


# Commands that make the stage safe. A control surface's button sends its value with the
# address (commonly 1.0 on press, 0.0 on release): for these the value is not a reason to
# refuse, the command goes to every garment (or the one named by a string).
SAFE_COMMANDS = ("panic", "disarm")


def without_button_values(cmd: str, args: list) -> list:
    """``args`` of a command, without the numbers and booleans a button adds to a panic or a disarm."""
    if cmd not in SAFE_COMMANDS:
        return args
    return [a for a in args if not isinstance(a, (int, float, bool))]


COMMANDS = {"/drape/arm": "arm", "/drape/disarm": "disarm", "/drape/panic": "panic", "/drape/layer": "layer"}
INBOX_COMMANDS = dict(COMMANDS, **{"/drape/reload": "reload", "/drape/status": "status", "/drape/rebaseline": "rebaseline"})


def parse_host_port(text: str) -> tuple[str, int]:
    host, _, port = text.rpartition(":")
    if not host or not port.isdigit() or not 1 <= int(port) <= 65535:
        raise ValueError(f'write HOST:PORT with a port 1 to 65535, e.g. "127.0.0.1:9100" (got {text!r})')
    return host, int(port)


def _bind(sock, host: str, port: int) -> None:
    """Bind a control socket; a port already taken says who is likely to hold it."""
    import errno
    try:
        sock.bind((host, port))
    except OSError as exc:
        sock.close()
        if exc.errno == errno.EADDRINUSE:
            raise OSError(exc.errno, f"{host}:{port} is already taken (another drape? `drape send status --to "
                          f"{host}:{port}` asks it; or choose another port with --listen HOST:PORT)") from None
        raise


class ControlInbox:
    """Receives command messages on a UDP port; ``poll`` returns [(command, detail)].

    It has no token, so it listens on loopback only (TokenMissing otherwise): a control port
    reachable from the network is the service's ``ControlPort`` with ``[control] token``.
    ``receive`` returns [(command, detail, garment, sender)] and answers what it refused;
    the loop answers the rest with ``acknowledge``. ``ignored_by`` counts refusals by reason.
    """

    def __init__(self, host: str, port: int):
        if not is_loopback(host):
            raise TokenMissing(f"--listen {host}:{port} would take commands from the network without a token: "
                               "listen on 127.0.0.1, or use a service config with [control] listen and token")
        self.sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
        _bind(self.sock, host, port)
        self.sock.setblocking(False)
        self.address = self.sock.getsockname()
        self.ignored = 0
        self.last_ignored = ""
        self.ignored_by: Counter = Counter()

    def _bad(self, why: str, reason: str, peer=None, address: str = "") -> None:
        self.ignored += 1
        self.last_ignored = why
        self.ignored_by[reason] += 1
        if peer is not None and address.startswith("/drape/"):  # only our own kind of sender gets an answer
            self.acknowledge(peer, False, address.rsplit("/", 1)[-1], why)

    def poll(self, max_messages: int = 64) -> list[tuple[str, str]]:
        return [(c, d) for c, d, _, _ in self.receive(max_messages)]

    def receive(self, max_messages: int = 64) -> list[tuple[str, str, str, tuple]]:
        out = []
        for _ in range(max_messages):
            try:
                data, peer = self.sock.recvfrom(65536)
            except (BlockingIOError, InterruptedError):
                break
            except OSError:  # e.g. an ICMP error from an earlier answer
                continue
            try:
                msg = OscMessage(data)
                args = list(msg.params)
            except Exception:  # noqa: BLE001 - python-osc raises several kinds on hostile bytes
                self._bad("not an OSC message", "not OSC")
                continue
            cmd = INBOX_COMMANDS.get(msg.address)
            if cmd is None:
                self._bad(f"unknown address {printable(msg.address, 64)}; use {', '.join(INBOX_COMMANDS)}",
                          "unknown address", peer, msg.address)
                continue
            args = without_button_values(cmd, args)
            if not all(isinstance(a, str) for a in args):
                self._bad(f"{msg.address} takes only strings", "bad arguments", peer, msg.address)
                continue
            detail = ""
            if cmd == "layer":
                if not args:
                    self._bad("/drape/layer takes one string, the layer's name", "bad arguments", peer, msg.address)
                    continue
                detail = args.pop(0)
            if len(args) > 1:
                self._bad(f"{msg.address}: too many arguments", "bad arguments", peer, msg.address)
                continue
            out.append((cmd, detail, args[0] if args else "", peer))
        return out

    def acknowledge(self, peer, ok: bool, command: str, text: str) -> None:
        try:
            self.sock.sendto(ack_message(ok, command, text), peer)
        except OSError:
            pass

    def take_ignored(self) -> str:
        """What was ignored since the last call, by reason ("" when nothing was)."""
        text = ", ".join(f"{n} {why}" for why, n in self.ignored_by.most_common())
        self.ignored_by.clear()
        return text

    def close(self) -> None:
        self.sock.close()


# ---- the daemon's control port: several garments, a token off loopback, replies ----

PORT_COMMANDS = {"/drape/arm": "arm", "/drape/disarm": "disarm", "/drape/panic": "panic",
                 "/drape/layer": "layer", "/drape/reload": "reload", "/drape/rebaseline": "rebaseline",
                 "/drape/status": "status"}
class ControlPort:
    """The daemon's command port (OSC over UDP, polled by the loop; no thread).

    Messages (arguments in brackets are optional):

        /drape/arm [GARMENT]          /drape/disarm [GARMENT]      /drape/panic [GARMENT]
        /drape/layer NAME [GARMENT]   /drape/reload [GARMENT]      /drape/rebaseline [GARMENT]
        /drape/status                 (the state is sent back to the sender's address)

    No GARMENT: every garment. When the port has a token, every message starts with it as its
    first argument. Binding another address than loopback without a token raises TokenMissing:
    anyone on the network could otherwise disarm a show or trigger a panic. None of these
    commands can press a key: keys are pressed only by rules the garment's gestures trigger.
    ``poll`` returns [(command, detail, garment, sender)].
    """

    def __init__(self, host: str, port: int, token: str = ""):
        if not is_loopback(host) and not token:
            raise TokenMissing(f"the control port would listen on {host}, reachable from the network: "
                               "set [control] token in the config (or listen on 127.0.0.1)")
        check_token(token, "[control] token")
        self.token = token
        self.sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
        _bind(self.sock, host, port)
        self.sock.setblocking(False)
        self.address = self.sock.getsockname()
        self.ignored = 0
        self.last_ignored = ""
        self.ignored_by: Counter = Counter()

    def _bad(self, why: str, reason: str = "other", peer=None, address: str = "") -> None:
        self.ignored += 1
        self.last_ignored = why
        self.ignored_by[reason] += 1
        if peer is not None and address.startswith("/drape/"):  # only our own kind of sender gets an answer
            self.acknowledge(peer, False, address.rsplit("/", 1)[-1], why)

    def acknowledge(self, peer, outcome, command: str, text: str) -> None:
        """``outcome``: DONE, PARTLY or REFUSED (True / False: done / refused)."""
        self.reply(peer, [ack_message(outcome, command, text)])

    def take_ignored(self) -> str:
        """What was ignored since the last call, by reason ("" when nothing was)."""
        text = ", ".join(f"{n} {why}" for why, n in self.ignored_by.most_common())
        self.ignored_by.clear()
        self.ignored = 0
        return text

    def poll(self, max_messages: int = 64) -> list[tuple[str, str, str, tuple]]:
        out = []
        for _ in range(max_messages):
            try:
                data, peer = self.sock.recvfrom(65536)
            except (BlockingIOError, InterruptedError):
                break
            except OSError:  # e.g. an ICMP error from an earlier reply: not a message
                continue
            got = self.handle(data, peer)
            if got is not None:
                out.append(got)
        return out

    def handle(self, data: bytes, peer) -> tuple[str, str, str, tuple] | None:
        """One datagram: (command, detail, garment, sender), or None (counted in ``ignored``).

        With a token, the first argument must be it (compared in constant time); anything
        python-osc cannot decode is ignored, whatever it raises.
        """
        try:
            msg = OscMessage(data)
            params = list(msg.params)
        except Exception:  # noqa: BLE001 - python-osc raises several kinds on hostile bytes
            self._bad("not an OSC message", "not OSC")
            return None
        cmd = PORT_COMMANDS.get(msg.address)
        if cmd is None:
            self._bad(f"unknown address {printable(msg.address, 64)}; use {', '.join(PORT_COMMANDS)}",
                      "unknown address", peer, msg.address)
            return None
        args = params
        if self.token:
            given = args.pop(0) if args and isinstance(args[0], str) else ""
            if not hmac.compare_digest(given.encode("utf-8", "surrogatepass"), self.token.encode("utf-8")):
                self._bad(f"{msg.address} from {printable(peer[0])} without the right token", "wrong or missing token",
                          peer, msg.address)
                return None
        args = without_button_values(cmd, args)
        if not all(isinstance(a, str) for a in args):
            self._bad(f"{msg.address} takes only strings", "bad arguments", peer, msg.address)
            return None
        detail = ""
        if cmd == "layer":
            if not args:
                self._bad("/drape/layer needs the layer's name", "bad arguments", peer, msg.address)
                return None
            detail = args.pop(0)
        if len(args) > 1:
            self._bad(f"{msg.address}: too many arguments", "bad arguments", peer, msg.address)
            return None
        return (cmd, detail, args[0] if args else "", peer)

    def reply(self, peer, dgrams) -> None:
        for d in dgrams:
            try:
                self.sock.sendto(d, peer)
            except OSError:
                pass

    def close(self) -> None:
        self.sock.close()
