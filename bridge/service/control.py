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

from pythonosc.osc_message import OscMessage, ParseError

LOOPBACK = ("127.0.0.1", "::1", "localhost")


class TokenMissing(ValueError):
    """A control port reachable from the network without a shared token."""


COMMANDS = {"/drape/arm": "arm", "/drape/disarm": "disarm", "/drape/panic": "panic", "/drape/layer": "layer"}


def parse_host_port(text: str) -> tuple[str, int]:
    host, _, port = text.rpartition(":")
    if not host or not port.isdigit() or not 1 <= int(port) <= 65535:
        raise ValueError(f'write HOST:PORT with a port 1 to 65535, e.g. "127.0.0.1:9100" (got {text!r})')
    return host, int(port)


class ControlInbox:
    """Receives command messages on a UDP port; ``poll`` returns [(command, detail)].

    It has no token, so it listens on loopback only (TokenMissing otherwise): a control port
    reachable from the network is the service's ``ControlPort`` with ``[control] token``.
    """

    def __init__(self, host: str, port: int):
        if host not in LOOPBACK:
            raise TokenMissing(f"--listen {host}:{port} would take commands from the network without a token: "
                               "listen on 127.0.0.1, or use a service config with [control] listen and token")
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.bind((host, port))
        self.sock.setblocking(False)
        self.address = self.sock.getsockname()
        self.ignored = 0
        self.last_ignored = ""

    def poll(self, max_messages: int = 64) -> list[tuple[str, str]]:
        out = []
        for _ in range(max_messages):
            try:
                data, _peer = self.sock.recvfrom(65536)
            except (BlockingIOError, InterruptedError):
                break
            try:
                msg = OscMessage(data)
            except (ParseError, IndexError, ValueError):
                self.ignored += 1
                self.last_ignored = "not an OSC message"
                continue
            cmd = COMMANDS.get(msg.address)
            if cmd is None:
                self.ignored += 1
                self.last_ignored = f"unknown address {msg.address}; use {', '.join(COMMANDS)}"
                continue
            args = list(msg.params)
            if cmd == "layer":
                if len(args) != 1 or not isinstance(args[0], str):
                    self.ignored += 1
                    self.last_ignored = "/drape/layer takes one string, the layer's name"
                    continue
                out.append((cmd, args[0]))
            else:
                out.append((cmd, ""))
        return out

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
        if host not in LOOPBACK and not token:
            raise TokenMissing(f"the control port would listen on {host}, reachable from the network: "
                               "set [control] token in the config (or listen on 127.0.0.1)")
        self.token = token
        self.sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.bind((host, port))
        self.sock.setblocking(False)
        self.address = self.sock.getsockname()
        self.ignored = 0
        self.last_ignored = ""

    def _bad(self, why: str) -> None:
        self.ignored += 1
        self.last_ignored = why

    def poll(self, max_messages: int = 64) -> list[tuple[str, str, str, tuple]]:
        out = []
        for _ in range(max_messages):
            try:
                data, peer = self.sock.recvfrom(65536)
            except (BlockingIOError, InterruptedError):
                break
            except OSError as exc:  # e.g. an ICMP error from an earlier reply
                self._bad(str(exc))
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
            self._bad("not an OSC message")
            return None
        cmd = PORT_COMMANDS.get(msg.address)
        if cmd is None:
            self._bad(f"unknown address {msg.address[:64]!r}; use {', '.join(PORT_COMMANDS)}")
            return None
        args = params
        if self.token:
            given = args.pop(0) if args and isinstance(args[0], str) else ""
            if not hmac.compare_digest(given.encode("utf-8", "surrogatepass"), self.token.encode("utf-8")):
                self._bad(f"{msg.address} from {peer[0]} without the right token")
                return None
        if not all(isinstance(a, str) for a in args):
            self._bad(f"{msg.address} takes only strings")
            return None
        detail = ""
        if cmd == "layer":
            if not args:
                self._bad("/drape/layer needs the layer's name")
                return None
            detail = args.pop(0)
        if len(args) > 1:
            self._bad(f"{msg.address}: too many arguments")
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
