"""Stage lighting levels as sACN (ANSI E1.31, streaming DMX over UDP), written from the standard.

``sacn_packet`` builds one E1.31 data packet; ``SacnOutput`` owns per-universe state:
the level of each of the 512 slots, fades in progress, and the sequence number. The
queue's worker thread calls ``tick``, which steps fades (at most ``frame_s`` apart) and
repeats steady levels every ``keepalive_s`` so receivers know the source is alive.

Safety: on ``Release`` and on close the lights go to the configured safe levels at once
(no fade); close then sends three packets with the stream-terminated option set. What a
receiver does after that (hold the look, fade out, fall back to a desk) is its own
setting: check it before the show. Follow the venue's rules and local codes.
"""

from __future__ import annotations

import socket
import struct
import time
import uuid

import numpy as np

from ..mapping.messages import DMX_SLOTS, Arm, LightLevels, Release
from .base import Output, _refuse

SACN_PORT = 5568                          # ANSI E1.31: the ACN SDT multicast port
ACN_PACKET_IDENTIFIER = b"ASC-E1.17\x00\x00\x00"
VECTOR_ROOT_E131_DATA = 0x00000004
VECTOR_E131_DATA_PACKET = 0x00000002
VECTOR_DMP_SET_PROPERTY = 0x02
DMP_ADDRESS_AND_DATA_TYPE = 0xA1
OPTION_PREVIEW = 0x80                     # bit 7
OPTION_STREAM_TERMINATED = 0x40           # bit 6
OPTION_FORCE_SYNC = 0x20                  # bit 5
DEFAULT_PRIORITY = 100
MAX_PRIORITY = 200
UNIVERSES = (1, 63999)
TERMINATION_PACKETS = 3
_SLOP_S = 1e-3  # a tick this close to its due time counts as due (wake-up jitter)


def multicast_group(universe: int) -> str:
    """E1.31's multicast address for a universe: 239.255.{high byte}.{low byte}."""
    return f"239.255.{universe >> 8}.{universe & 0xFF}"


def _flags_and_length(length: int) -> bytes:
    return struct.pack(">H", 0x7000 | length)


def _source_name(label: str) -> bytes:
    raw = label.encode("utf-8")[:63]
    while raw:  # do not cut a UTF-8 character in half
        try:
            raw.decode("utf-8")
            break
        except UnicodeDecodeError:
            raw = raw[:-1]
    return raw.ljust(64, b"\x00")


def sacn_packet(universe: int, slots: bytes, sequence: int, cid: bytes, source_label: str = "drape",
                priority: int = DEFAULT_PRIORITY, options: int = 0, sync_universe: int = 0) -> bytes:
    """One E1.31 data packet: root layer, framing layer, DMP layer, start code 0, then slots."""
    if not UNIVERSES[0] <= universe <= UNIVERSES[1]:
        raise ValueError(f"sACN universe must be {UNIVERSES[0]} to {UNIVERSES[1]} (got {universe})")
    if not 0 <= priority <= MAX_PRIORITY:
        raise ValueError(f"sACN priority must be 0 to {MAX_PRIORITY} (got {priority})")
    if len(cid) != 16:
        raise ValueError("the CID is 16 bytes (a UUID)")
    if len(slots) > DMX_SLOTS:
        raise ValueError(f"at most {DMX_SLOTS} slots")
    dmp = _flags_and_length(11 + len(slots)) + struct.pack(
        ">BBHHHB", VECTOR_DMP_SET_PROPERTY, DMP_ADDRESS_AND_DATA_TYPE, 0, 1, len(slots) + 1, 0) + bytes(slots)
    framing_body = struct.pack(">I", VECTOR_E131_DATA_PACKET) + _source_name(source_label) + struct.pack(
        ">BHBBH", priority, sync_universe, sequence & 0xFF, options, universe)
    framing = _flags_and_length(2 + len(framing_body) + len(dmp)) + framing_body + dmp
    root_body = struct.pack(">I", VECTOR_ROOT_E131_DATA) + bytes(cid)
    root = _flags_and_length(2 + len(root_body) + len(framing)) + root_body + framing
    return struct.pack(">HH", 0x0010, 0x0000) + ACN_PACKET_IDENTIFIER + root


class _Universe:
    """Levels of one universe: per-slot fades from ``start`` to ``target`` between two times (s)."""

    def __init__(self, now_s: float, safe: np.ndarray):
        self.start = safe.copy()
        self.target = safe.copy()
        self.t0 = np.full(DMX_SLOTS, now_s)
        self.t1 = np.full(DMX_SLOTS, now_s)
        self.sequence = 0
        self.last_sent_s = -1e9

    def levels_at(self, now_s: float) -> np.ndarray:
        span = self.t1 - self.t0
        frac = np.where(span > 0, np.clip((now_s - self.t0) / np.where(span > 0, span, 1.0), 0.0, 1.0), 1.0)
        return self.start + (self.target - self.start) * frac

    def fading(self, now_s: float) -> bool:
        return bool(np.any(self.t1 > now_s))

    def set(self, now_s: float, slots: dict[int, int], fade_s: float) -> None:
        current = self.levels_at(now_s)
        idx = np.fromiter((s - 1 for s in slots), dtype=int, count=len(slots))
        self.start[idx] = current[idx]
        self.target[idx] = np.fromiter(slots.values(), dtype=float, count=len(slots))
        self.t0[idx] = now_s
        self.t1[idx] = now_s + fade_s

    def jump(self, now_s: float, levels: np.ndarray) -> None:
        self.start[:] = levels
        self.target[:] = levels
        self.t0[:] = now_s
        self.t1[:] = now_s


class SacnOutput(Output):
    """Streams universes over sACN, multicast (host None) or unicast to ``host``.

    ``safe_levels`` {slot: level} is the look for stop and panic (slots not named: 0).
    ``frame_s`` is the shortest time between two packets of a fading universe (25 ms, 40
    per second, under DMX512's refresh ceiling of about 44 per second). ``keepalive_s``
    repeats steady levels; E1.31 receivers give up on a source after 2.5 s of silence.
    """

    def __init__(self, name: str, universe: int = 1, host: str | None = None, port: int = SACN_PORT,
                 priority: int = DEFAULT_PRIORITY, source_label: str = "drape", safe_levels: dict | None = None,
                 interface: str | None = None, keepalive_s: float = 0.8, frame_s: float = 0.025,
                 multicast_ttl: int = 1, cid: bytes | None = None, clock=time.monotonic):
        super().__init__(name)
        sacn_packet(universe, b"", 0, b"\x00" * 16, source_label, priority)  # checks universe and priority
        if not 0.1 <= keepalive_s <= 2.0:
            raise ValueError("keepalive_s must be 0.1 to 2.0 s (receivers drop a source after 2.5 s)")
        self.default_universe = universe
        self.host = host
        self.port = port
        self.priority = priority
        self.source_label = source_label
        self.keepalive_s = keepalive_s
        self.frame_s = frame_s
        self.cid = cid or uuid.uuid4().bytes
        self._clock = clock
        self.safe = np.zeros(DMX_SLOTS)
        for slot, level in (safe_levels or {}).items():
            LightLevels(universe, {slot: level})  # checks slot and level ranges
            self.safe[slot - 1] = level
        self.universes: dict[int, _Universe] = {}
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.setblocking(False)
        if host is None:
            self.sock.setsockopt(socket.IPPROTO_IP, socket.IP_MULTICAST_TTL, multicast_ttl)
            if interface:
                self.sock.setsockopt(socket.IPPROTO_IP, socket.IP_MULTICAST_IF, socket.inet_aton(interface))
        self._closed = False

    def _address(self, universe: int) -> tuple[str, int]:
        return (self.host or multicast_group(universe), self.port)

    def _transmit(self, number: int, u: _Universe, now_s: float, options: int = 0) -> None:
        slots = np.rint(u.levels_at(now_s)).astype(np.uint8).tobytes()
        data = sacn_packet(number, slots, u.sequence, self.cid, self.source_label, self.priority, options)
        u.sequence = (u.sequence + 1) & 0xFF  # E1.31: the sequence number wraps 255 → 0
        u.last_sent_s = now_s
        self.sock.sendto(data, self._address(number))

    def _universe(self, number: int, now_s: float) -> _Universe:
        if number not in self.universes:
            self.universes[number] = _Universe(now_s, self.safe)
        return self.universes[number]

    def _send(self, message) -> None:
        now = self._clock()
        if isinstance(message, Release):
            self.to_safe(now)
        elif isinstance(message, Arm):
            pass
        elif isinstance(message, LightLevels):
            u = self._universe(message.universe, now)
            u.set(now, dict(message.levels), message.fade_s)
            self._transmit(message.universe, u, now)
        else:
            _refuse(self.name, message)

    def to_safe(self, now_s: float | None = None) -> None:
        """Every universe used goes to the safe levels at once, and is sent."""
        now = self._clock() if now_s is None else now_s
        if not self.universes:
            self._universe(self.default_universe, now)
        for number, u in self.universes.items():
            u.jump(now, self.safe)
            self._transmit(number, u, now)

    def tick(self, now_s: float) -> float | None:
        if self._closed or not self.universes:
            return None
        waits = []
        for number, u in self.universes.items():
            since = now_s - u.last_sent_s
            # Fading: a frame every frame_s (the last step of a fade lands exactly); else keep-alive.
            fading = u.fading(now_s) or u.fading(u.last_sent_s)
            interval = self.frame_s if fading else self.keepalive_s
            if since >= interval - _SLOP_S:
                try:
                    self._transmit(number, u, now_s)
                except OSError as exc:
                    self.stats.last_error = f"{type(exc).__name__}: {exc}"
                since = 0.0
            waits.append(interval - since)
        return max(0.0, min(waits))

    def close(self) -> None:
        """Safe levels first, then three stream-terminated packets per universe, then the socket."""
        if self._closed:
            return
        self._closed = True
        try:
            now = self._clock()
            self.to_safe(now)
            for _ in range(TERMINATION_PACKETS):
                for number, u in self.universes.items():
                    self._transmit(number, u, now, OPTION_STREAM_TERMINATED)
            numbers = ", ".join(str(n) for n in sorted(self.universes))
            self.stats.on_close = (f"universe{'s' if len(self.universes) > 1 else ''} {numbers} set to the safe look, "
                                   "then the stream terminated")
        finally:
            self.sock.close()
