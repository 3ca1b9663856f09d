"""OSC over UDP and TCP with python-osc: building the bytes is separate from sending them.

UDP: one datagram per message or bundle (OSC 1.0). TCP: a stream of packets framed as
OSC 1.1 does (SLIP, RFC 1055, an END byte before and after each packet) or as OSC 1.0
does (a big-endian int32 length before each packet).
"""

from __future__ import annotations

import select
import socket
import struct
import time

from pythonosc import slip
from pythonosc.osc_bundle_builder import IMMEDIATELY, OscBundleBuilder
from pythonosc.osc_message_builder import OscMessageBuilder

from ..mapping.messages import Arm, OscBundle, OscMessage, Release
from .base import Output, _refuse


def _build_message(message: OscMessage):
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
    return b.build()


def _build(packet):
    if isinstance(packet, OscMessage):
        return _build_message(packet)
    b = OscBundleBuilder(IMMEDIATELY if packet.timetag is None else packet.timetag)
    for m in packet.messages:
        b.add_content(_build(m))
    return b.build()


def encode_osc(packet: OscMessage | OscBundle) -> bytes:
    """The OSC 1.0 packet of a message or bundle (int → i, float → f, str → s, bool → T/F)."""
    if not isinstance(packet, (OscMessage, OscBundle)):
        raise TypeError(f"OSC packets are OscMessage or OscBundle values (got {type(packet).__name__})")
    return _build(packet).dgram


def frame_osc_stream(packet: bytes, framing: str = "1.1") -> bytes:
    """One packet framed for a TCP stream: "1.1" SLIP (RFC 1055), "1.0" int32 length prefix."""
    if framing == "1.1":
        return slip.encode(packet)
    if framing == "1.0":
        return struct.pack(">i", len(packet)) + packet
    raise ValueError(f"OSC stream framing is '1.0' or '1.1' (got {framing!r})")


class OscUdpOutput(Output):
    """Sends each message or bundle as one UDP datagram to host:port.

    ``broadcast=True`` allows a broadcast address such as 255.255.255.255 or a subnet's.
    """

    def __init__(self, name: str, host: str, port: int, broadcast: bool = False):
        super().__init__(name)
        self.address = (host, port)
        self.sock = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_DGRAM)
        if broadcast:
            self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_BROADCAST, 1)
        self.sock.setblocking(False)

    def _send(self, message) -> None:
        if isinstance(message, (Release, Arm)):
            return  # OSC holds nothing
        if not isinstance(message, (OscMessage, OscBundle)):
            _refuse(self.name, message)
        self.sock.sendto(encode_osc(message), self.address)

    def close(self) -> None:
        self.sock.close()


class OscTcpOutput(Output):
    """A TCP connection to host:port, reconnected with growing waits when it fails.

    While disconnected, messages are dropped (counted), not stored: a late cue is worse
    than a missing one. A peer that stops reading makes a send time out after
    ``send_timeout_s``; the connection is then dropped and made again.
    """

    def __init__(self, name: str, host: str, port: int, framing: str = "1.1",
                 connect_timeout_s: float = 1.0, send_timeout_s: float = 1.0,
                 first_wait_s: float = 0.1, longest_wait_s: float = 5.0, clock=time.monotonic):
        super().__init__(name)
        frame_osc_stream(b"", framing)  # checks the framing name
        self.address = (host, port)
        self.framing = framing
        self.connect_timeout_s = connect_timeout_s
        self.send_timeout_s = send_timeout_s
        self.first_wait_s = first_wait_s
        self.longest_wait_s = longest_wait_s
        self._clock = clock
        self._sock: socket.socket | None = None
        self._wait_s = first_wait_s
        self._retry_at_s = 0.0
        self.connects = 0

    @property
    def connected(self) -> bool:
        return self._sock is not None

    def _connect(self) -> None:
        try:
            sock = socket.create_connection(self.address, timeout=self.connect_timeout_s)
        except OSError:
            self._retry_at_s = self._clock() + self._wait_s
            self._wait_s = min(self._wait_s * 2, self.longest_wait_s)
            raise
        sock.settimeout(self.send_timeout_s)
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self._sock = sock
        self._wait_s = self.first_wait_s
        self.connects += 1

    def _disconnect(self) -> None:
        if self._sock is not None:
            try:
                self._sock.close()
            finally:
                self._sock = None
            self._retry_at_s = self._clock() + self._wait_s
            self._wait_s = min(self._wait_s * 2, self.longest_wait_s)

    def _peer_closed(self) -> bool:
        """True when the peer has closed its end (replies it sent are read and ignored)."""
        readable, _, _ = select.select([self._sock], [], [], 0)
        if not readable:
            return False
        try:
            return self._sock.recv(65536, socket.MSG_DONTWAIT) == b""
        except BlockingIOError:
            return False

    def _send(self, message) -> None:
        if isinstance(message, (Release, Arm)):
            return
        if not isinstance(message, (OscMessage, OscBundle)):
            _refuse(self.name, message)
        data = frame_osc_stream(encode_osc(message), self.framing)
        if self._sock is None:
            left = self._retry_at_s - self._clock()
            if left > 0:
                raise ConnectionError(f"not connected to {self.address[0]}:{self.address[1]}; next try in {left:.1f} s")
            self._connect()
        try:
            if self._peer_closed():
                raise ConnectionResetError("peer closed the connection")
            self._sock.sendall(data)
        except OSError:
            self._disconnect()  # a partly sent packet leaves the stream unusable
            raise

    def tick(self, now_s: float) -> float | None:
        if self._sock is not None:
            return None
        if now_s >= self._retry_at_s:
            try:
                self._connect()
                return None
            except OSError as exc:
                self.stats.last_error = f"{type(exc).__name__}: {exc}"
        return max(0.0, self._retry_at_s - now_s)

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None
