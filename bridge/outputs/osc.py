"""OSC 1.0 over UDP with python-osc: building a datagram is separate from sending it."""

from __future__ import annotations

import socket

from pythonosc.osc_message_builder import OscMessageBuilder

from ..mapping import OscMessage
from .base import Output


def encode_osc(message: OscMessage) -> bytes:
    """The OSC 1.0 datagram of a message (int → i, float → f, str → s, bool → T/F)."""
    b = OscMessageBuilder(address=message.address)
    for a in message.args:
        if isinstance(a, bool):
            b.add_arg(a, OscMessageBuilder.ARG_TYPE_TRUE if a else OscMessageBuilder.ARG_TYPE_FALSE)
        elif isinstance(a, int):
            b.add_arg(a, OscMessageBuilder.ARG_TYPE_INT)
        elif isinstance(a, float):
            b.add_arg(a, OscMessageBuilder.ARG_TYPE_FLOAT)
        else:
            b.add_arg(str(a), OscMessageBuilder.ARG_TYPE_STRING)
    return b.build().dgram


class OscUdpOutput(Output):
    """Sends each message as one UDP datagram to host:port."""

    def __init__(self, name: str, host: str, port: int):
        super().__init__(name)
        self.address = (host, port)
        self.sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.setblocking(False)

    def _send(self, message: OscMessage) -> None:
        self.sock.sendto(encode_osc(message), self.address)

    def close(self) -> None:
        self.sock.close()
