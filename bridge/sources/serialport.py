"""A garment on a serial port speaking the text-line protocol."""

from __future__ import annotations

import time

import numpy as np
import serial

from .base import Block, Source, SourceGone, empty_block
from .textline import TextLineParser


class SerialTextSource(Source):
    """Reads protocol lines from a serial device (or a pseudo-terminal) as they arrive.

    Samples without a device time get t = sample count / rate_hz.
    """

    def __init__(self, port: str, n_channels: int, rate_hz: float, baud: int = 115200,
                 channel_names=None, timeout_s: float = 0.02):
        self.port = port
        self.rate_hz = float(rate_hz)
        self.channel_names = tuple(channel_names or (f"ch{i + 1}" for i in range(n_channels)))
        self.parser = TextLineParser(n_channels)
        try:
            self.serial = serial.Serial(port, baud, timeout=timeout_s)
        except (serial.SerialException, OSError) as exc:
            raise SourceGone(f"cannot open serial port {port}: {exc}") from None
        self.count = 0

    def read(self) -> Block:
        try:
            data = self.serial.read(max(1, self.serial.in_waiting))
        except (serial.SerialException, OSError) as exc:
            raise SourceGone(f"serial port {self.port} failed: {exc}") from None
        now = time.monotonic()
        samples = self.parser.feed(data) if data else []
        if not samples:
            return empty_block(self.n_channels, now)
        t = np.array([s[0] if s[0] is not None else (self.count + i) / self.rate_hz for i, s in enumerate(samples)])
        self.count += len(samples)
        return Block(t, np.array([s[1] for s in samples], dtype=float), now)

    def counters(self) -> dict:
        st = self.parser.stats
        return {"good": st.good, "malformed": st.malformed, "wrong_count": st.wrong_count,
                "out_of_range": st.out_of_range}

    def close(self) -> None:
        self.serial.close()
