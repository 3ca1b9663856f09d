"""The binary frame protocol: COBS-framed packets with a sequence counter, a device time and a CRC.

For fast sampling or long cables, where a text line costs too many bytes and a flipped bit
would go unnoticed. Layout of one packet before framing (version 1; all integers little-endian
except the CRC)::

    offset  size  field
    0       1     kind: 0xD1 = one sample, layout version 1
    1       1     n: how many values follow (1 to MAX_VALUES)
    2       2     sequence: u16, +1 per packet, wraps 65535 -> 0
    4       4     device time: u32 microseconds, wraps every 2**32 us (about 71.6 minutes)
    8       4n    values: float32 each, counted frequency in Hz
    8+4n    2     CRC-16/CCITT-FALSE of bytes 0 .. 8+4n-1, most significant byte first

The packet is then COBS-encoded (Consistent Overhead Byte Stuffing: no 0x00 byte inside) and
followed by one 0x00 byte, the frame delimiter. A receiver that joins mid-stream, or meets a
damaged frame, resynchronises at the next 0x00. Missing sequence numbers are counted as dropped
frames; frames whose COBS, length, kind or CRC is wrong are counted as corrupt and skipped.

CRC-16/CCITT-FALSE: polynomial 0x1021, initial value 0xFFFF, no reflection, no final XOR
(check value 0x29B1 for the ASCII bytes "123456789").
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass, field

KIND_SAMPLE_V1 = 0xD1
MAX_VALUES = 32
HEADER = struct.Struct("<BBHI")
MAX_FRAME = 2 * (HEADER.size + 4 * MAX_VALUES + 2)  # longer without a delimiter: not a frame
MAX_FREQ_HZ = 1e9
TIME_WRAP_US = 1 << 32


class CobsError(ValueError):
    """Bytes that are not a valid COBS encoding."""


def cobs_encode(data: bytes) -> bytes:
    """COBS-encode ``data``: the result holds no 0x00 byte (the delimiter is not appended)."""
    out = bytearray()
    segments = bytes(data).split(b"\x00")  # every segment but the last is followed by a zero
    for k, seg in enumerate(segments):
        last = k == len(segments) - 1
        full = False
        while len(seg) >= 254:  # a full block: code 0xFF, 254 data bytes, no implied zero
            out.append(0xFF)
            out += seg[:254]
            seg = seg[254:]
            full = True
        if seg or not last or not full:
            out.append(len(seg) + 1)
            out += seg
    return bytes(out)


def cobs_decode(enc: bytes) -> bytes:
    """Undo ``cobs_encode`` (without the delimiter). Raises CobsError on a malformed block."""
    out = bytearray()
    i, n = 0, len(enc)
    while i < n:
        code = enc[i]
        if code == 0:
            raise CobsError("zero byte inside a frame")
        j = i + code
        if j > n:
            raise CobsError("block runs past the end of the frame")
        block = enc[i + 1:j]
        if 0 in block:
            raise CobsError("zero byte inside a frame")
        out += block
        i = j
        if code < 0xFF and i < n:
            out.append(0)
    return bytes(out)


def _crc_table() -> tuple[int, ...]:
    table = []
    for b in range(256):
        c = b << 8
        for _ in range(8):
            c = ((c << 1) ^ 0x1021) if c & 0x8000 else (c << 1)
        table.append(c & 0xFFFF)
    return tuple(table)


_CRC_TABLE = _crc_table()


def crc16_ccitt_false(data: bytes, crc: int = 0xFFFF) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (pass a previous result as ``crc`` to continue it)."""
    t = _CRC_TABLE
    for b in data:
        crc = ((crc << 8) & 0xFFFF) ^ t[((crc >> 8) ^ b) & 0xFF]
    return crc


def encode_packet(seq: int, device_time_s: float, values) -> bytes:
    """One packet before framing (header, float32 values, CRC). device_time_s wraps at 2**32 us."""
    vals = [float(v) for v in values]
    if not 1 <= len(vals) <= MAX_VALUES:
        raise ValueError(f"a frame carries 1 to {MAX_VALUES} values, not {len(vals)}")
    time_us = int(round(device_time_s * 1e6)) % TIME_WRAP_US
    body = HEADER.pack(KIND_SAMPLE_V1, len(vals), seq & 0xFFFF, time_us) + struct.pack(f"<{len(vals)}f", *vals)
    return body + crc16_ccitt_false(body).to_bytes(2, "big")


def encode_frame(seq: int, device_time_s: float, values) -> bytes:
    """One sample as it goes on the wire: COBS-encoded packet and the 0x00 delimiter.

    seq: sequence number (taken modulo 65536); device_time_s: device clock, s (sent as
    microseconds modulo 2**32); values: 1 to 32 frequencies, Hz (sent as float32).
    """
    return cobs_encode(encode_packet(seq, device_time_s, values)) + b"\x00"


@dataclass
class FrameStats:
    good: int = 0
    corrupt: int = 0        # bad COBS, bad length or kind, CRC mismatch, or no delimiter in time
    dropped: int = 0        # frames missing from the sequence
    duplicate: int = 0      # a sequence number repeated at once (skipped)
    wrong_count: int = 0    # a good frame with another number of values than stated
    out_of_range: int = 0   # NaN, inf, zero or negative, or absurdly large values
    restarts: int = 0       # the board started again: its device time went backwards (not a wrap)

    @property
    def bad(self) -> int:
        return self.corrupt + self.duplicate + self.wrong_count + self.out_of_range


@dataclass
class FrameParser:
    """Splits a byte stream into samples; owns the partial frame, the sequence and time state.

    n_channels: values per frame, or None to take it from the first good frame.
    ``feed`` returns (device time s, values) for each good frame; device time is unwrapped
    across the u32 microsecond wrap, so it keeps increasing over long sessions.
    """

    n_channels: int | None = None
    stats: FrameStats = field(default_factory=FrameStats)
    pending: bytes = b""
    last_seq: int | None = None
    last_time_us: int | None = None
    wraps: int = 0
    last_problem: str = ""

    def feed(self, data: bytes) -> list[tuple[float, list[float]]]:
        self.pending += data
        *frames, self.pending = self.pending.split(b"\x00")
        if len(self.pending) > MAX_FRAME:  # no delimiter for too long: not our frames
            self.pending = b""
            self._bad("corrupt", "no frame delimiter within the longest frame")
        out = []
        for enc in frames:
            if enc:
                s = self.parse_frame(enc)
                if s is not None:
                    out.append(s)
        return out

    def parse_frame(self, enc: bytes) -> tuple[float, list[float]] | None:
        """One frame without its delimiter."""
        if len(enc) > MAX_FRAME:
            return self._bad("corrupt", "frame too long")
        try:
            pkt = cobs_decode(enc)
        except CobsError as exc:
            return self._bad("corrupt", str(exc))
        if len(pkt) < HEADER.size + 4 + 2:
            return self._bad("corrupt", f"frame of {len(pkt)} bytes is too short")
        kind, n, seq, time_us = HEADER.unpack_from(pkt)
        if kind != KIND_SAMPLE_V1:
            return self._bad("corrupt", f"unknown frame kind 0x{kind:02x}")
        if len(pkt) != HEADER.size + 4 * n + 2:
            return self._bad("corrupt", f"frame of {len(pkt)} bytes does not hold {n} values")
        if crc16_ccitt_false(pkt[:-2]) != int.from_bytes(pkt[-2:], "big"):
            return self._bad("corrupt", "CRC mismatch")
        # The frame is intact: account for the sequence before judging its contents.
        restarted = (self.last_time_us is not None and time_us < self.last_time_us
                     and self.last_time_us - time_us <= TIME_WRAP_US // 2)
        if restarted:
            # A board that restarts counts its sequence from 0 again: the step is not tens of
            # thousands of lost frames (the device clock's jump is counted by the timebase).
            self.stats.restarts += 1
        elif self.last_seq is not None:
            step = (seq - self.last_seq) & 0xFFFF
            if step == 0:
                return self._bad("duplicate", f"sequence {seq} repeated")
            self.stats.dropped += step - 1
        self.last_seq = seq
        if self.last_time_us is not None and time_us < self.last_time_us and self.last_time_us - time_us > TIME_WRAP_US // 2:
            self.wraps += 1
        self.last_time_us = time_us
        if self.n_channels is None:
            self.n_channels = n
        if n != self.n_channels:
            return self._bad("wrong_count", f"{n} values where {self.n_channels} were expected")
        values = list(struct.unpack_from(f"<{n}f", pkt, HEADER.size))
        if not all(math.isfinite(v) and 0 < v < MAX_FREQ_HZ for v in values):
            return self._bad("out_of_range", "frequency not a positive finite number")
        self.stats.good += 1
        return (self.wraps * TIME_WRAP_US + time_us) / 1e6, values

    def _bad(self, kind: str, why: str):
        setattr(self.stats, kind, getattr(self.stats, kind) + 1)
        self.last_problem = why
        return None


def looks_like_frames(data: bytes, needed: int = 2) -> bool:
    """True when ``data`` holds at least ``needed`` intact frames (used to tell the protocols apart)."""
    p = FrameParser()
    p.feed(data)
    return p.stats.good >= needed
