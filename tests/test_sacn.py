"""sACN packets against the layout of ANSI E1.31-2018, the `sacn` package's encoder, and
Wireshark's ACN dissector (tshark); the output's fades, keep-alive, sequence and stop."""

import shutil
import signal
import socket
import struct
import subprocess
import time

import pytest

from bridge.mapping.messages import Destination, LightLevels, Release
from bridge.outputs import open_output
from bridge.outputs.sacn import SacnOutput, multicast_group, sacn_packet

CID = bytes(range(0x10, 0x20))


def test_packet_layout_matches_e131_offsets():
    # ANSI E1.31-2018, section 4 (Table 4-1, E1.31 Data Packet): byte offsets and values below.
    slots = bytes(i % 256 for i in range(512))
    p = sacn_packet(258, slots, 17, CID, "rain jacket", priority=150)
    assert len(p) == 638                                        # 126 header bytes + 512 slots
    assert p[0:2] == b"\x00\x10"                                # preamble size 0x0010
    assert p[2:4] == b"\x00\x00"                                # postamble size 0
    assert p[4:16] == bytes.fromhex("4153432d45312e3137000000")  # ACN packet identifier
    assert struct.unpack(">H", p[16:18])[0] == 0x7000 | (638 - 16)   # flags 0x7, length from offset 16
    assert p[18:22] == b"\x00\x00\x00\x04"                      # VECTOR_ROOT_E131_DATA
    assert p[22:38] == CID
    assert struct.unpack(">H", p[38:40])[0] == 0x7000 | (638 - 38)
    assert p[40:44] == b"\x00\x00\x00\x02"                      # VECTOR_E131_DATA_PACKET
    assert p[44:108] == b"rain jacket".ljust(64, b"\x00")       # UTF-8, NUL padded to 64
    assert p[108] == 150                                        # priority
    assert p[109:111] == b"\x00\x00"                            # synchronization address (none)
    assert p[111] == 17                                         # sequence number
    assert p[112] == 0                                          # options
    assert p[113:115] == b"\x01\x02"                            # universe 258, big-endian
    assert struct.unpack(">H", p[115:117])[0] == 0x7000 | (638 - 115)
    assert p[117] == 0x02                                       # VECTOR_DMP_SET_PROPERTY
    assert p[118] == 0xA1                                       # address type and data type
    assert p[119:121] == b"\x00\x00"                            # first property address
    assert p[121:123] == b"\x00\x01"                            # address increment
    assert p[123:125] == struct.pack(">H", 513)                 # property value count = slots + 1
    assert p[125] == 0                                          # DMX512 start code (null)
    assert p[126:] == slots


def test_multicast_address_of_a_universe():
    # ANSI E1.31-2018, section 9.3.1: 239.255.{universe high byte}.{universe low byte}.
    assert multicast_group(1) == "239.255.0.1"
    assert multicast_group(63999) == "239.255.249.255"


def test_long_source_names_are_cut_on_a_character_boundary():
    # ANSI E1.31-2018: source name is a NUL-terminated UTF-8 string in 64 bytes.
    p = sacn_packet(1, b"", 0, CID, "é" * 40)
    name = p[44:108]
    assert name[-1] == 0 and name.rstrip(b"\x00").decode("utf-8") == "é" * 31


@pytest.mark.parametrize("bad", [dict(universe=0), dict(universe=64000), dict(priority=201)])
def test_out_of_range_universe_and_priority_are_refused(bad):
    # ANSI E1.31-2018: universes 1–63999 carry data; priority 0–200.
    args = dict(universe=1, slots=b"", sequence=0, cid=CID, priority=100) | bad
    with pytest.raises(ValueError):
        sacn_packet(**args)


@pytest.mark.parametrize("universe, seq, prio, terminated", [(1, 0, 100, False), (300, 255, 0, True), (63999, 9, 200, False)])
def test_packet_equals_the_sacn_package_encoder(universe, seq, prio, terminated):
    # Reference library: the `sacn` package (PyPI) builds the same E1.31 data packet.
    data_packet = pytest.importorskip("sacn.messages.data_packet", reason="the sacn package is not installed")
    levels = tuple((7 * i) % 256 for i in range(512))
    ref = data_packet.DataPacket(cid=tuple(CID), sourceName="drape", universe=universe, dmxData=levels,
                                 priority=prio, sequence=seq, streamTerminated=terminated)
    ours = sacn_packet(universe, bytes(levels), seq, CID, "drape", prio, 0x40 if terminated else 0)
    assert ours == bytes(ref.getBytes())


class FakeClock:
    def __init__(self):
        self.t = 50.0

    def __call__(self):
        return self.t


def _receiver():
    r = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    r.bind(("127.0.0.1", 0))
    r.settimeout(2)
    return r


def test_fade_keepalive_sequence_and_stop():
    clock = FakeClock()
    r = _receiver()
    out = SacnOutput("rig", universe=2, host="127.0.0.1", port=r.getsockname()[1], cid=CID,
                     safe_levels={10: 200}, keepalive_s=0.8, frame_s=0.025, clock=clock)
    out.send(LightLevels(2, {1: 255, 2: 100}, fade_s=1.0))
    first = r.recv(2000)
    assert first[126:128] == b"\x00\x00" and first[135] == 200   # fade starts from the safe look
    clock.t += 0.5
    assert out.tick(clock.t) == pytest.approx(0.025)
    half = r.recv(2000)
    assert half[126] == 128 and half[127] == 50                   # halfway: round(127.5), 50
    clock.t += 0.6
    out.tick(clock.t)
    assert r.recv(2000)[126:128] == bytes((255, 100))             # the fade has landed
    assert out.tick(clock.t + 0.01) == pytest.approx(0.79)        # now steady: only keep-alive
    clock.t += 0.8
    out.tick(clock.t)
    keep = r.recv(2000)
    assert keep[126:128] == bytes((255, 100)) and [first[111], half[111], keep[111]] == [0, 1, 3]
    seqs = []
    for _ in range(300):                                          # sequence wraps 255 → 0
        out.send(LightLevels(2, {3: 1}))
        seqs.append(r.recv(2000)[111])
    assert seqs[:2] == [4, 5] and seqs[251:254] == [255, 0, 1]
    out.send(Release())                                           # panic: safe look at once
    safe = r.recv(2000)
    assert safe[126:128] == b"\x00\x00" and safe[135] == 200
    out.close()
    last = [r.recv(2000) for _ in range(4)]
    # ANSI E1.31-2018, 6.2.6: a source that stops sends three packets with Stream_Terminated (bit 6).
    assert [p[112] for p in last] == [0, 0x40, 0x40, 0x40]
    assert all(p[135] == 200 and p[126] == 0 for p in last)
    r.close()


def test_dict_levels_leave_other_slots_alone_and_tuples_start_at_slot_1():
    clock = FakeClock()
    r = _receiver()
    out = SacnOutput("rig", host="127.0.0.1", port=r.getsockname()[1], clock=clock)
    out.send(LightLevels(1, (10, 20, 30)))
    out.send(LightLevels(1, {2: 99}))
    assert r.recv(2000)[126:130] == bytes((10, 20, 30, 0))
    assert r.recv(2000)[126:130] == bytes((10, 99, 30, 0))
    out.close()
    r.close()


def _tshark_capture(tmp_path, send, ours):
    """Rows (ip.dst, source name, priority, sequence, universe, slot count, options) that Wireshark's
    dissector decodes from a capture on lo around ``send()``, kept where ``ours(row)``: other
    sACN senders on this machine (a daemon someone is running) must not count as ours."""
    if shutil.which("tshark") is None:
        pytest.skip("tshark is not installed (Debian package tshark); no independent dissector")
    cap = tmp_path / "cap.pcap"
    proc = subprocess.Popen(["tshark", "-i", "lo", "-f", "udp port 5568", "-a", "duration:30",
                             "-w", str(cap)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    seen = ""
    end = time.monotonic() + 15
    while "Capturing on" not in seen and time.monotonic() < end and proc.poll() is None:
        seen += proc.stderr.readline()
    if "Capturing on" not in seen:
        proc.kill()
        pytest.skip(f"tshark cannot capture on lo here: {seen.strip()[-200:]}")
    time.sleep(0.3)
    send()
    time.sleep(1.0)                      # the last packets reach the capture
    proc.send_signal(signal.SIGINT)      # tshark closes the file on SIGINT
    proc.wait(20)
    fields = subprocess.run(
        ["tshark", "-r", str(cap), "--enable-heuristic", "acn", "-o", "acn.dmx_enable:TRUE", "-T", "fields",
         "-E", "separator=|", "-e", "ip.dst", "-e", "acn.dmx.source_name", "-e", "acn.dmx.priority",
         "-e", "acn.dmx.seq_number", "-e", "acn.dmx.universe", "-e", "acn.dmx.count", "-e", "acn.dmx.options"],
        capture_output=True, text=True, timeout=30)
    rows = [line.split("|") for line in fields.stdout.splitlines() if line.strip()]
    return [r for r in rows if ours(r)]


def test_wireshark_decodes_our_unicast_stream(tmp_path):
    # Independent dissector: Wireshark's ACN/E1.31 dissector (tshark) reads what we sent.
    def send():
        out = open_output(Destination("rig", "sacn", host="127.0.0.1", universe=5, priority=120,
                                      source_label="rain jacket rig"))
        out.send(LightLevels(5, {1: 255}))
        out.send(LightLevels(5, {2: 128}))
        out.close()
    rows = _tshark_capture(tmp_path, send, lambda r: r[1] == "rain jacket rig")
    # the safe look at start (safe_at_start), the two levels, the safe look at close, then three
    # packets with Stream_Terminated (options bit 6, 0x40: ANSI E1.31-2018 6.2.6), nothing after
    assert [r[6] for r in rows] == ["0", "0", "0", "0", "64", "64", "64"], rows
    for i, (dst, name, prio, seq, universe, count, _) in enumerate(rows):
        assert (dst, name, prio, universe, count) == ("127.0.0.1", "rain jacket rig", "120", "5", "513")
        assert int(seq) == i


def test_wireshark_decodes_our_multicast_stream(tmp_path):
    # ANSI E1.31-2018 9.3.1 multicast address, port 5568; decoded by Wireshark (tshark).
    probe = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        probe.setsockopt(socket.IPPROTO_IP, socket.IP_ADD_MEMBERSHIP,
                         socket.inet_aton("239.255.1.44") + socket.inet_aton("127.0.0.1"))
    except OSError as exc:
        pytest.skip(f"multicast on the loopback interface is off here ({exc}); try: ip link set lo multicast on")
    finally:
        probe.close()

    def send():
        out = open_output(Destination("rig", "sacn", universe=300, interface="127.0.0.1"))
        out.send(LightLevels(300, {1: 255}))
        out.close()
    rows = _tshark_capture(tmp_path, send, lambda r: r[0] == "239.255.1.44")
    assert [(r[0], r[4]) for r in rows] == [("239.255.1.44", "300")] * 6   # safe, level, safe, 3 terminated
    assert [r[2] for r in rows] == ["100"] * 6
    assert [r[6] for r in rows] == ["0", "0", "0", "64", "64", "64"]
