"""Control messages from the network: arm, disarm, panic and layer switches over OSC/UDP.

A technician's desk or a phone can send

    /drape/arm   /drape/disarm   /drape/panic   /drape/layer "NAME"

to the address given with ``--listen``. The inbox is a non-blocking socket polled by the
live loop between blocks (no thread). It can only produce these four commands: nothing
that arrives over the network can press a key or send a note (keys are pressed only by
rules the garment's own gestures trigger).
"""

from __future__ import annotations

import socket

from pythonosc.osc_message import OscMessage, ParseError

COMMANDS = {"/drape/arm": "arm", "/drape/disarm": "disarm", "/drape/panic": "panic", "/drape/layer": "layer"}


def parse_host_port(text: str) -> tuple[str, int]:
    host, _, port = text.rpartition(":")
    if not host or not port.isdigit() or not 1 <= int(port) <= 65535:
        raise ValueError(f'write HOST:PORT with a port 1 to 65535, e.g. "127.0.0.1:9100" (got {text!r})')
    return host, int(port)


class ControlInbox:
    """Receives command messages on a UDP port; ``poll`` returns [(command, detail)]."""

    def __init__(self, host: str, port: int):
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
