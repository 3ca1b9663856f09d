"""OSC bundles, TCP framing and delivery to python-osc servers (a peer we did not write)."""

import socket
import struct
import threading
import time

import pytest
from pythonosc.dispatcher import Dispatcher
from pythonosc.osc_server import ThreadingOSCUDPServer
from pythonosc.osc_tcp_server import ThreadingOSCTCPServer

from bridge.mapping.messages import Destination, OscBundle, OscMessage
from bridge.outputs import OscTcpOutput, OscUdpOutput, QueuedOutput, encode_osc, frame_osc_stream, open_output

FREQ = bytes.fromhex("2f6f7363696c6c61746f722f342f6672657175656e6379002c66000043dc0000")


def test_bundle_layout_matches_the_osc_spec():
    # OSC 1.0 specification, "OSC Bundles": "#bundle" string, 64-bit time tag, then for each
    # element an int32 size and the element; time tag 0x00000000 00000001 means "immediately".
    data = encode_osc(OscBundle((OscMessage("/oscillator/4/frequency", (440.0,)),)))
    assert data == b"#bundle\x00" + bytes.fromhex("0000000000000001") + struct.pack(">i", 32) + FREQ


def test_bundle_time_tag_is_ntp_time():
    # OSC 1.0 specification: time tags are NTP format (RFC 5905): 32-bit seconds since
    # 1900-01-01, 32-bit fraction. 1970-01-01 is NTP second 2208988800 (RFC 868 / RFC 5905).
    data = encode_osc(OscBundle((OscMessage("/a"),), timetag=1.5))
    seconds, fraction = struct.unpack(">II", data[8:16])
    assert seconds == 2208988800 + 1 and fraction == 0x80000000


def test_slip_framing_escapes_as_rfc_1055():
    # RFC 1055: END 0xC0, ESC 0xDB; END in data → DB DC, ESC in data → DB DD. OSC 1.1 frames
    # each packet with END on both sides (double-ended SLIP).
    assert frame_osc_stream(b"\xc0\xdb\x01") == bytes.fromhex("c0dbdcdbdd01c0")


def test_length_prefix_framing_of_osc_1_0_streams():
    # OSC 1.0 specification, "OSC Packets": over a stream, an int32 size precedes each packet.
    assert frame_osc_stream(FREQ, "1.0") == bytes.fromhex("00000020") + FREQ


def _collector():
    got = []
    d = Dispatcher()
    d.set_default_handler(lambda address, *args: got.append((address, args)))
    return got, d


def _wait_for(cond, timeout_s=5.0):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if cond():
            return True
        time.sleep(0.01)
    return False


def test_udp_to_two_python_osc_servers_with_a_bundle():
    # Reference peer: python-osc's UDP server parses what we send.
    servers, boxes = [], []
    for _ in range(2):
        got, d = _collector()
        s = ThreadingOSCUDPServer(("127.0.0.1", 0), d)
        threading.Thread(target=s.serve_forever, daemon=True).start()
        servers.append(s)
        boxes.append(got)
    outs = [open_output(Destination(f"d{i}", "osc", "127.0.0.1", s.server_address[1])) for i, s in enumerate(servers)]
    try:
        for o in outs:
            o.send(OscMessage("/drape/cue/next", ("raise_right", 0.5)))
            o.send(OscBundle((OscMessage("/drape/light/warm", (1,)), OscMessage("/drape/sound/rain", (True,)))))
        assert _wait_for(lambda: all(len(b) == 3 for b in boxes))
    finally:
        for o in outs:
            o.close()
        for s in servers:
            s.shutdown()
            s.server_close()
    for b in boxes:
        assert b == [("/drape/cue/next", ("raise_right", 0.5)), ("/drape/light/warm", (1,)),
                     ("/drape/sound/rain", (True,))]


def test_broadcast_option_sets_the_socket_option():
    # POSIX socket API: SO_BROADCAST must be set before sending to a broadcast address.
    out = OscUdpOutput("b", "127.255.255.255", 9, broadcast=True)
    plain = OscUdpOutput("p", "127.0.0.1", 9)
    try:
        assert out.sock.getsockopt(socket.SOL_SOCKET, socket.SO_BROADCAST) == 1
        assert plain.sock.getsockopt(socket.SOL_SOCKET, socket.SO_BROADCAST) == 0
    finally:
        out.close()
        plain.close()


class _Server(ThreadingOSCTCPServer):
    allow_reuse_address = True
    daemon_threads = True


def _tcp_server(mode, port=0):
    got, d = _collector()
    s = _Server(("127.0.0.1", port), d, mode=mode)
    threading.Thread(target=s.serve_forever, daemon=True).start()
    return s, got


@pytest.mark.parametrize("framing", ["1.1", "1.0"])
def test_tcp_to_python_osc_server(framing):
    # Reference peer: python-osc's TCP server in the matching mode ("1.1" SLIP, "1.0" length).
    server, got = _tcp_server(framing)
    out = open_output(Destination("t", "osc-tcp", "127.0.0.1", server.server_address[1], osc_framing=framing))
    try:
        out.send(OscMessage("/drape/cue/next", (1,)))
        # an escaped byte inside the packet: 0xC0 within a float (SLIP must escape it)
        out.send(OscMessage("/drape/level", (-2.0,)))
        assert _wait_for(lambda: len(got) == 2)
    finally:
        out.close()
        server.shutdown()
        server.server_close()
    assert got == [("/drape/cue/next", (1,)), ("/drape/level", (-2.0,))]
    assert out.stats.sent == 2 and out.stats.dropped == 0


class _RawPeer:
    """A TCP peer that accepts one connection at a time and keeps the bytes; ``kill`` drops
    the listener and every connection. Frames are decoded with python-osc (slip, OscMessage)."""

    def __init__(self, port=0):
        self.listener = socket.socket()
        self.listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.listener.bind(("127.0.0.1", port))
        self.listener.listen(4)
        self.port = self.listener.getsockname()[1]
        self.data = b""
        self.conns = []
        threading.Thread(target=self._serve, daemon=True).start()

    def _serve(self):
        try:
            while True:
                c, _ = self.listener.accept()
                self.conns.append(c)
                threading.Thread(target=self._read, args=(c,), daemon=True).start()
        except OSError:
            pass

    def _read(self, c):
        try:
            while chunk := c.recv(4096):
                self.data += chunk
        except OSError:
            pass

    def addresses(self):
        from pythonosc import slip
        from pythonosc.osc_message import OscMessage as Parsed
        frames = [f for f in self.data.split(b"\xc0") if f]
        return [Parsed(slip.decode(b"\xc0" + f + b"\xc0")).address for f in frames]

    def kill(self):
        for c in self.conns:
            try:
                c.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass  # already closed
            c.close()
        try:
            self.listener.shutdown(socket.SHUT_RDWR)  # wakes the thread blocked in accept()
        except OSError:
            pass
        self.listener.close()


def test_tcp_reconnects_after_the_peer_restarts():
    peer = _RawPeer()
    inner = OscTcpOutput("t", "127.0.0.1", peer.port, first_wait_s=0.05, longest_wait_s=0.2)
    out = QueuedOutput(inner)
    try:
        out.send(OscMessage("/one"))
        assert _wait_for(lambda: peer.addresses() == ["/one"])
        peer.kill()
        # the peer is gone: messages are dropped and counted, the sender never waits
        assert _wait_for(lambda: (out.send(OscMessage("/lost")), out.stats.dropped > 0)[1])
        assert not inner.connected
        peer = _RawPeer(peer.port)
        assert _wait_for(lambda: inner.connected and inner.connects >= 2)
        out.send(OscMessage("/two"))
        assert _wait_for(lambda: peer.addresses() == ["/two"])
    finally:
        out.close()
        peer.kill()


def test_a_peer_that_never_reads_costs_drops_not_waiting():
    # A TCP server that accepts and never reads: the socket buffers fill, sends time out.
    listener = socket.socket()
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    listener.bind(("127.0.0.1", 0))
    listener.listen(8)
    held = []
    stop = threading.Event()

    def accept():
        listener.settimeout(0.1)
        while not stop.is_set():
            try:
                held.append(listener.accept()[0])
            except OSError:
                pass

    threading.Thread(target=accept, daemon=True).start()
    inner = OscTcpOutput("t", "127.0.0.1", listener.getsockname()[1], send_timeout_s=0.2, first_wait_s=0.05)
    out = QueuedOutput(inner, capacity=64)
    big = OscMessage("/drape/blob", ("x" * 4000,))
    results = []
    sender = threading.Thread(target=lambda: results.extend(out.send(big) for _ in range(5000)))
    sender.start()
    sender.join(10)
    try:
        assert not sender.is_alive(), "send waited for the destination"
        assert results.count(False) > 0 and out.stats.overflowed == results.count(False)
        assert _wait_for(lambda: "timed out" in out.stats.last_error or "queue full" in out.stats.last_error)
    finally:
        out.close(drain_s=0.1)
        stop.set()
        for c in held:
            c.close()
        listener.close()
    assert not out._thread.is_alive()
