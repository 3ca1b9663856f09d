"""A garment on a serial port: finding the port, reading either protocol, keeping time.

A config names a port by its path (``/dev/ttyACM0``, ``COM4``), or by its USB identity so a
garment plugged into another socket is still found:

    usb:f00d:0001             vendor id : product id (hex), the first such device
    usb:f00d:0001:5A3F2B11    ... with this USB serial number
    serial:5A3F2B11           any device with this USB serial number

pyserial URLs (``loop://``, ``socket://host:port``) are passed through.
"""

from __future__ import annotations

import os
import select
import time
from dataclasses import dataclass

import numpy as np
import serial
from serial.tools import list_ports

from .base import Block, Source, SourceGone, channels_differ, empty_block
from .protocols import StreamDecoder
from .textline import ProtocolUndecided
from .timebase import DeviceClock, Resampler

MISMATCH_SAMPLES = 50  # samples of another channel count, and none good, before giving up
CHUNK_BYTES = 65536    # asked of one read of a device's descriptor
TTY_HANDOVER_BYTES = 4095  # Linux terminals (USB serial, pty) hand over at most this much per read
BLOCK_BYTES = 1 << 20  # at most this much per block, so a flood of input still yields blocks to the loop
_POSIX_PORT = serial.Serial if os.name == "posix" else None  # a device or pty: its descriptor is read directly


class ChannelMismatch(ProtocolUndecided):
    """The garment sends another number of channels than the model (or config) says."""


@dataclass(frozen=True)
class PortInfo:
    """One serial port as the system lists it. vid/pid are None for non-USB ports."""

    device: str
    vid: int | None
    pid: int | None
    serial_number: str | None
    description: str
    manufacturer: str | None

    @property
    def usb_id(self) -> str:
        """The spec a config can use to find this device again ("" for non-USB ports)."""
        if self.vid is None or self.pid is None:
            return ""
        base = f"usb:{self.vid:04x}:{self.pid:04x}"
        return f"{base}:{self.serial_number}" if self.serial_number else base


def list_serial_ports() -> list[PortInfo]:
    return [PortInfo(p.device, p.vid, p.pid, p.serial_number, p.description or "", p.manufacturer)
            for p in sorted(list_ports.comports(), key=lambda p: p.device)]


def resolve_port(spec: str, ports: list[PortInfo] | None = None) -> str:
    """The device path for a port spec (see the module docstring); SourceGone when absent."""
    spec = spec.strip()
    if "://" in spec or not (spec.startswith("usb:") or spec.startswith("serial:")):
        return spec
    ports = list_serial_ports() if ports is None else ports
    kind, _, rest = spec.partition(":")
    if kind == "serial":
        found = [p for p in ports if p.serial_number and p.serial_number == rest]
    else:
        parts = rest.split(":", 2)
        try:
            vid, pid = int(parts[0], 16), int(parts[1], 16)
        except (ValueError, IndexError):
            raise ValueError(f"port {spec!r}: expected usb:VID:PID or usb:VID:PID:SERIAL with hex ids") from None
        found = [p for p in ports if p.vid == vid and p.pid == pid
                 and (len(parts) < 3 or p.serial_number == parts[2])]
    if not found:
        raise SourceGone(f"no serial device matches {spec} (see `drape ports`)")
    return found[0].device


class SerialSource(Source):
    """Reads a garment's samples from a serial device (or a pseudo-terminal) as they arrive.

    protocol: "auto", "text" or "frames". n_channels: None to detect it (text header or the
    first lines; frames say it). rate_hz: the rate the consumer wants, Hz (the model's).
    With device times (frames, or text lines that carry one) the stream is resampled onto a
    grid at rate_hz unless ``resample`` is False; samples without device time get
    t = sample count / rate_hz. Raises SourceGone when the port cannot be opened or fails,
    ProtocolUndecided (from ``read``) when the stream's layout cannot be told.
    """

    def __init__(self, port: str, n_channels: int | None = None, rate_hz: float = 100.0, baud: int = 115200,
                 channel_names=None, protocol: str = "auto", timestamp: bool | None = None,
                 resample: bool = True, timeout_s: float = 0.02, clock=time.monotonic):
        self.port = port
        self.rate_hz = float(rate_hz)
        self._names = tuple(channel_names) if channel_names else None
        if self._names and n_channels is None:
            n_channels = len(self._names)
        self.decoder = StreamDecoder(protocol, n_channels, timestamp)
        self.resample = resample
        self.clock = clock
        self.device_clock = DeviceClock(1.0 / self.rate_hz)
        self.resampler = Resampler(self.rate_hz)
        self.count = 0
        self._timed = 0  # samples that came with a device time (for _check_time)
        try:
            self.device = resolve_port(port)
            if "://" in self.device:
                self.serial = serial.serial_for_url(self.device, baud, timeout=timeout_s)
            else:   # exclusive: a second reader would take every other line (two daemons, a serial monitor)
                self.serial = serial.Serial(self.device, baud, timeout=timeout_s, exclusive=True)
        except (serial.SerialException, OSError) as exc:
            device = getattr(self, "device", port)
            if "exclusively lock" in str(exc):
                raise SourceGone(f"cannot open serial port {port}: another program has it open (another drape, "
                                 "a capture, a serial monitor?); it is tried again until it is free") from None
            gone = "://" not in device and not os.path.exists(device) and "drape ports" not in str(exc)
            hint = " (no such device here; `drape ports` lists the serial ports)" if gone else ""
            raise SourceGone(f"cannot open serial port {port}: {exc}{hint}") from None

    @property
    def channel_names(self) -> tuple[str, ...]:
        n = self.decoder.decided_channels
        if self._names:
            return self._names
        header = self.decoder.header_names
        if header and (n is None or len(header) == n):
            return tuple(header)
        return tuple(f"ch{i + 1}" for i in range(n or 0))

    def read(self) -> Block:
        """Everything that has arrived, as one block: waits up to the port's timeout for
        the first byte, then takes every byte waiting (and what arrives while those are
        decoded) into one block of all the whole samples in them; while a line or frame is
        still under way (bytes but no whole sample yet) it waits on, up to the timeout, so
        that blocks hold whole samples instead of one empty block per fragment."""
        start = self.clock()
        timeout_s = self.serial.timeout or 0.0
        samples: list = []
        taken = 0
        try:
            data = self._take(timeout_s)
            while data:
                taken += len(data)
                samples += self.decoder.feed(data)
                if samples:  # then only what is already here, without waiting
                    data = self._take(0.0, len(data)) if taken < BLOCK_BYTES else b""
                    continue
                left_s = timeout_s - (self.clock() - start)
                data = self._take(left_s) if left_s > 0 else b""
        except (serial.SerialException, OSError, TypeError) as exc:
            # pyserial raises TypeError from in_waiting on a port closed under it
            raise SourceGone(f"serial port {self.port} failed: {exc}") from None
        now = self.clock()
        self._check_channels()
        n_ch = self.decoder.decided_channels or 0
        if not samples:
            return empty_block(n_ch, now)
        f = np.array([s[1] for s in samples], dtype=float)
        if all(s[0] is not None for s in samples):
            t = np.array([s[0] for s in samples], dtype=float)
            self.device_clock.update(t, now)
            self._check_time(len(t))
            if self.resample:
                t, f = self.resampler.process(t, f)
        else:
            t = (self.count + np.arange(len(samples))) / self.rate_hz
        self.count += len(t)
        return Block(t, f, now)

    def _take(self, wait_s: float, last: int | None = None) -> bytes:
        """The bytes waiting, after waiting up to ``wait_s`` for the first (0: only those
        already here). A device or pseudo-terminal is read through its descriptor: one
        ``select`` and one ``read`` for all that is there; other ports (pyserial URLs) through
        pyserial, whose wait is the port's timeout. ``last``: the size of the read just
        before, when only more of the same is asked: a descriptor read that came short of a
        terminal's hand-over size took all there was, so it is not asked again (a syscall
        saved per block; bytes that came meanwhile are the next read's, without a wait)."""
        port = self.serial
        if type(port) is _POSIX_PORT and port.fd is not None:
            if last is not None and last < TTY_HANDOVER_BYTES:
                return b""
            if not select.select([port.fd], [], [], max(wait_s, 0.0))[0]:
                return b""
            try:
                data = os.read(port.fd, CHUNK_BYTES)
            except BlockingIOError:
                return b""
            if not data:  # ready but empty: on Linux, a device that went away
                raise serial.SerialException("device reports readiness to read but returned no data "
                                             "(device disconnected or multiple access on port?)")
            return data
        waiting = port.in_waiting
        if waiting:
            return port.read(waiting)
        return port.read(1) if wait_s > 0 else b""

    def _check_channels(self) -> None:
        """A garment whose samples never have the stated channel count is refused, saying so,
        rather than read as a stream of bad lines: usually the model is not this garment's."""
        header = self.decoder.header_names
        if header and self._names and channels_differ(header, self._names):
            same = " (the same names in another order)" if sorted(header) == sorted(self._names) else ""
            raise ChannelMismatch(
                f"serial port {self.port}: the garment's header line names its channels {', '.join(header)}, "
                f"the model's are {', '.join(self._names)}{same}; is the model made for this garment? "
                "(a model reads channels by position)")
        p = self.decoder.parser
        if p is None or p.stats.good or p.stats.wrong_count < MISMATCH_SAMPLES:
            return
        raise ChannelMismatch(
            f"serial port {self.port}: none of the first {p.stats.wrong_count} samples has the expected "
            f"channels ({p.last_problem}); is the model made for this garment? Its channels are "
            f"{', '.join(self.channel_names) or 'unknown'}")

    def _check_time(self, n: int) -> None:
        """A "device time" that jumps on most of the first samples is not one: most likely a
        garment with one channel more than the model, its first frequency read as the time."""
        self._timed += n
        if self._timed > 4 * MISMATCH_SAMPLES or self.device_clock.jumps < MISMATCH_SAMPLES // 2:
            return
        if 2 * self.device_clock.jumps >= self._timed:
            n_ch = self.decoder.decided_channels
            raise ChannelMismatch(
                f"serial port {self.port}: the first of the {n_ch + 1} numbers per line does not behave like a "
                f"device time in seconds ({self.device_clock.jumps} jumps in {self._timed} samples). If the garment "
                f"has {n_ch + 1} channels, the model is not made for it (its channels are "
                f"{', '.join(self.channel_names)}); if the first number is a time, send it in seconds; "
                "or state timestamp = false in the config")

    def counters(self) -> dict:
        c = self.decoder.counters()
        c.update(gaps=self.device_clock.gaps, missing=self.device_clock.missing, jumps=self.device_clock.jumps)
        return c

    def close(self) -> None:
        self.serial.close()


class SerialTextSource(SerialSource):
    """The text-line protocol with a stated channel count (kept for existing callers)."""

    def __init__(self, port: str, n_channels: int, rate_hz: float, baud: int = 115200,
                 channel_names=None, timeout_s: float = 0.02):
        super().__init__(port, n_channels, rate_hz, baud, channel_names, "text", None, True, timeout_s)
