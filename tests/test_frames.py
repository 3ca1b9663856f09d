"""Binary frames: COBS against published examples, the CRC against its check value, the parser's counting."""

import struct

import pytest
from hypothesis import given, settings, strategies as st

from bridge.sources.frames import (FrameParser, cobs_decode, cobs_encode, crc16_ccitt_false, encode_frame,
                                   encode_packet, looks_like_frames)
from bridge.sources.protocols import StreamDecoder, sniff_protocol

H = bytes.fromhex

# COBS: Cheshire & Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM Transactions on
# Networking 7(2), 1999. The first two pairs are the worked examples as the brief quotes them;
# the rest follow from the paper's rules (a code byte gives the distance to the next zero; 0xFF
# marks 254 data bytes with no zero after them) and are the examples commonly tabulated with
# it, written here from memory. Each encoded form ends with the 0x00 frame delimiter.
LONG = bytes(range(1, 255))  # 01 .. FE, 254 non-zero bytes
COBS_EXAMPLES = [
    (H("00"), H("010100")),
    (H("11220033"), H("031122023300")),
    (H("0000"), H("01010100")),
    (H("11223344"), H("051122334400")),
    (H("11000000"), H("021101010100")),
    (LONG, b"\xff" + LONG + b"\x00"),
    (b"\x00" + LONG, b"\x01\xff" + LONG + b"\x00"),
    (LONG + b"\xff", b"\xff" + LONG + b"\x02\xff\x00"),
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01\x00"),
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01\x00"),
]


@pytest.mark.parametrize("raw,wire", COBS_EXAMPLES)
def test_cobs_published_examples(raw, wire):
    assert cobs_encode(raw) + b"\x00" == wire
    assert cobs_decode(wire[:-1]) == raw


@given(st.binary(max_size=1200))
def test_cobs_round_trip_has_no_zero_and_bounded_overhead(data):
    enc = cobs_encode(data)
    assert 0 not in enc and cobs_decode(enc) == data
    # Cheshire & Baker 1999: at most one byte of overhead per 254 bytes (rounded up), at least one.
    assert len(enc) <= len(data) + max(1, -(-len(data) // 254))


def test_crc16_ccitt_false_check_value():
    # CRC-16/CCITT-FALSE (width 16, poly 0x1021, init 0xFFFF, no reflection, xorout 0):
    # check value 0x29B1 for ASCII "123456789" per Greg Cook's catalogue of parametrised CRC
    # algorithms (CRC RevEng), from memory.
    assert crc16_ccitt_false(b"123456789") == 0x29B1
    assert crc16_ccitt_false(b"56789", crc16_ccitt_false(b"1234")) == 0x29B1


@given(st.binary(max_size=300))
def test_crc_agrees_with_crcmod(data):
    # Reference implementation from the registry: crcmod's predefined 'crc-ccitt-false' (test-only).
    crcmod = pytest.importorskip("crcmod.predefined")
    assert crc16_ccitt_false(data) == crcmod.mkPredefinedCrcFun("crc-ccitt-false")(data)


def test_frame_layout_is_as_documented():
    pkt = encode_packet(0x1234, 1.5, [1000.0, 2000.0])
    assert pkt[0] == 0xD1 and pkt[1] == 2
    assert struct.unpack_from("<HI", pkt, 2) == (0x1234, 1_500_000)
    assert struct.unpack_from("<2f", pkt, 8) == (1000.0, 2000.0)
    assert int.from_bytes(pkt[-2:], "big") == crc16_ccitt_false(pkt[:-2]) and len(pkt) == 18
    wire = encode_frame(0x1234, 1.5, [1000.0, 2000.0])
    assert wire.endswith(b"\x00") and 0 not in wire[:-1] and cobs_decode(wire[:-1]) == pkt


def test_round_trip_dropped_duplicate_and_time_wrap():
    p = FrameParser(2)
    seqs = [65534, 65535, 0, 3, 3, 4]   # wraps, then 1 and 2 are missing, then a repeat
    times = [4294.9, 4294.96, 0.02, 0.05, 0.05, 0.06]  # the u32 microsecond clock wraps at 4294.967296 s
    out = p.feed(b"".join(encode_frame(s, t, [1e5 + s, 2e5]) for s, t in zip(seqs, times)))
    assert [round(o[0], 6) for o in out] == [4294.9, 4294.96, 4294.987296, 4295.017296, 4295.027296]
    assert out[0][1] == [1e5 + 65534, 2e5]
    assert p.stats.good == 5 and p.stats.dropped == 2 and p.stats.duplicate == 1


def test_bad_frames_are_counted_and_skipped():
    p = FrameParser(2)
    good = [encode_frame(i, i / 100, [1e5, 2e5]) for i in range(6)]
    flipped = bytearray(good[1]); flipped[5] ^= 0x40            # a bit error: CRC catches it
    cut = good[3][:-5] + b"\x00"                                 # a truncated frame
    nan = encode_frame(4, 0.04, [float("nan"), 2e5])             # intact, but no frequency
    three = encode_frame(5, 0.05, [1e5, 2e5, 3e5])               # intact, wrong channel count
    data = b"\x07\x08junk" + b"\x00" + good[0] + bytes(flipped) + good[2] + cut + nan + three
    out = p.feed(data)
    assert len(out) == 2
    assert p.stats.corrupt == 3 and p.stats.out_of_range == 1 and p.stats.wrong_count == 1
    assert p.stats.dropped == 2  # sequences 1 and 3 never arrived intact


@st.composite
def damaged_streams(draw):
    n = draw(st.integers(1, 25))
    frames, damaged = [], []
    for i in range(n):
        f = bytearray(encode_frame(i, i / 100, [1e5 + i, 2e5, 3e5]))
        how = draw(st.sampled_from(["ok", "ok", "flip", "cut"]))
        if how == "flip":
            k = draw(st.integers(0, len(f) - 2))
            mask = draw(st.integers(1, 255).filter(lambda m, b=f[k]: b ^ m != 0))
            f[k] ^= mask
        elif how == "cut":
            f = f[: draw(st.integers(1, len(f) - 2))] + b"\x00"
        frames.append(bytes(f))
        damaged.append(how != "ok")
    chunk = draw(st.integers(1, 64))
    return frames, damaged, chunk


@settings(max_examples=150, deadline=None)
@given(damaged_streams())
def test_every_damaged_frame_is_counted(case):
    frames, damaged, chunk = case
    p = FrameParser(3)
    data = b"".join(frames)
    got = []
    for i in range(0, len(data), chunk):  # arbitrary read boundaries
        got += p.feed(data[i:i + chunk])
    assert len(got) == damaged.count(False) == p.stats.good
    assert p.stats.corrupt == damaged.count(True)
    last_good = max((i for i, d in enumerate(damaged) if not d), default=None)
    first_good = min((i for i, d in enumerate(damaged) if not d), default=None)
    if last_good is not None:
        assert p.stats.dropped == sum(damaged[first_good:last_good])


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=2000), st.sampled_from(["frames", "text", "auto"]))
def test_random_bytes_never_raise_from_a_stated_decoder(data, protocol):
    d = StreamDecoder(protocol if protocol != "auto" else "frames", 4, None)
    d.feed(data)
    c = d.counters()
    assert c["good"] >= 0
    if protocol == "auto":
        assert sniff_protocol(data) in (None, "text", "frames")


def test_protocol_sniffing():
    frames = b"".join(encode_frame(i, i / 100, [1e5, 2e5]) for i in range(3))
    assert sniff_protocol(b"\x13\x37" + frames) == "frames" and looks_like_frames(frames)
    assert sniff_protocol(b"ial junk\n1,2\n3,4\n") == "text"
    assert sniff_protocol(b"1,2\n") is None
