"""Samples arriving as OSC messages over UDP, for garments with a wireless board.

One message is one sample. The config says which address carries samples and what each
argument is, in order::

    [garment]
    input = "osc"
    listen = "127.0.0.1:9100"       # another address than loopback needs senders or a token
    address = "/jacket/antennas"
    arguments = ["t_s", "left_sleeve", "right_sleeve", "left_front", "right_front"]
    # senders = ["10.0.0.21"]       # only samples from these addresses
    # token = "..."                 # or: each message starts with this string (16+ characters)

"t_s" is the device time in seconds (optional), "-" an argument to ignore; every other name
is a channel, in the model's channel order or not (they are matched by name). Messages may
come alone or inside bundles; a bundle's time tag is ignored (samples are used as they come).

Samples from the network drive recognition like any other source, but keys are never
pressed because of network input: that rule is kept where keys are sent, not here.
"""

from __future__ import annotations

import math
import select
import socket
import time
from dataclasses import dataclass

import numpy as np
from pythonosc import osc_packet
from pythonosc.dispatcher import Dispatcher

from .base import Block, Source, SourceGone, empty_block
from .timebase import DeviceClock, Resampler

TIME_ARG = "t_s"
SKIP_ARG = "-"
MAX_DATAGRAM = 65535
MAX_FREQ_HZ = 1e9


@dataclass
class OscInputStats:
    good: int = 0
    malformed: int = 0       # not an OSC packet
    other_address: int = 0   # a message for another address (ignored)
    wrong_count: int = 0     # another number of arguments than the layout names
    out_of_range: int = 0    # not numbers, NaN, inf, zero or negative frequencies
    not_allowed: int = 0     # from an address not in ``senders``
    wrong_token: int = 0     # without the token as first argument


def parse_listen(spec: str) -> tuple[str, int]:
    host, _, port = spec.rpartition(":")
    try:
        p = int(port)
    except ValueError:
        raise ValueError(f"listen address {spec!r}: expected HOST:PORT") from None
    if not 0 <= p <= 65535:
        raise ValueError(f"listen address {spec!r}: port out of range")
    return host or "0.0.0.0", p


class OscUdpSource(Source):
    """Listens on a UDP port for OSC sample messages (see the module docstring).

    arguments: the layout of each message's arguments. channel_names: the channels wanted, in
    order (the model's); default: the layout's channel names in their order. rate_hz: the
    rate wanted, Hz; with a device time the stream is resampled onto it.
    """

    def __init__(self, listen: str, address: str, arguments, rate_hz: float, channel_names=None,
                 resample: bool = True, wait_s: float = 0.02, clock=time.monotonic, senders=(), token: str = ""):
        from .addresses import is_loopback
        host, port = parse_listen(listen)
        if not is_loopback(host) and not senders and not token:
            raise ValueError(f"OSC input on {listen} would take samples (and so fire cues) from anyone on the "
                             "network: give senders or a token, or listen on 127.0.0.1")
        self.senders = frozenset(senders)
        self.token = token
        self.address = address
        self.arguments = tuple(arguments)
        names = [a for a in self.arguments if a not in (TIME_ARG, SKIP_ARG)]
        if not names:
            raise ValueError("the OSC argument layout names no channel")
        if len(set(names)) != len(names):
            raise ValueError("the OSC argument layout names a channel twice")
        self.channel_names = tuple(channel_names) if channel_names else tuple(names)
        missing = [c for c in self.channel_names if c not in names]
        if missing:
            raise ValueError(f"the OSC argument layout lacks channel(s) {', '.join(missing)}")
        self._columns = [self.arguments.index(c) for c in self.channel_names]
        self._time_col = self.arguments.index(TIME_ARG) if TIME_ARG in self.arguments else None
        self.rate_hz = float(rate_hz)
        self.resample = resample
        self.wait_s = wait_s
        self.clock = clock
        self.stats = OscInputStats()
        self.device_clock = DeviceClock(1.0 / self.rate_hz)
        self.resampler = Resampler(self.rate_hz)
        self.count = 0
        self._got: list = []
        self.dispatcher = Dispatcher()
        self.dispatcher.map(address, self._on_sample)
        self.dispatcher.set_default_handler(self._on_other)
        try:
            self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
            self.sock.bind((host, port))
        except OSError as exc:
            raise SourceGone(f"cannot listen for OSC on {listen}: {exc}") from None
        self.sock.setblocking(False)

    @property
    def port(self) -> int:
        return self.sock.getsockname()[1]

    def _on_other(self, address, *args) -> None:
        self.stats.other_address += 1

    def _on_sample(self, address, *args) -> None:
        if self.token:
            import hmac
            given = args[0] if args and isinstance(args[0], str) else ""
            if not hmac.compare_digest(given.encode("utf-8", "surrogatepass"), self.token.encode("utf-8")):
                self.stats.wrong_token += 1
                return
            args = args[1:]
        if len(args) != len(self.arguments):
            self.stats.wrong_count += 1
            return
        try:
            vals = [float(args[c]) for c in self._columns]
            t = float(args[self._time_col]) if self._time_col is not None else None
        except (TypeError, ValueError):
            self.stats.out_of_range += 1
            return
        if not all(math.isfinite(v) and 0 < v < MAX_FREQ_HZ for v in vals) or (t is not None and not math.isfinite(t)):
            self.stats.out_of_range += 1
            return
        self.stats.good += 1
        self._got.append((t, vals))

    def feed_datagram(self, data: bytes) -> None:
        """Route one datagram's messages to the handlers (python-osc decodes the packet)."""
        try:
            packet = osc_packet.OscPacket(data)
        except Exception:  # noqa: BLE001 - python-osc raises several kinds on bad bytes
            self.stats.malformed += 1
            return
        for timed in packet.messages:
            for handler in self.dispatcher.handlers_for_address(timed.message.address):
                handler.invoke(None, timed.message)

    def read(self) -> Block:
        try:
            ready, _, _ = select.select([self.sock], [], [], self.wait_s)
            while ready:
                try:
                    data, peer = self.sock.recvfrom(MAX_DATAGRAM)
                except BlockingIOError:
                    break
                if self.senders and peer[0] not in self.senders:
                    self.stats.not_allowed += 1
                else:
                    self.feed_datagram(data)
        except OSError as exc:
            raise SourceGone(f"OSC input failed: {exc}") from None
        now = self.clock()
        got, self._got = self._got, []
        if not got:
            return empty_block(self.n_channels, now)
        f = np.array([g[1] for g in got], dtype=float)
        if self._time_col is not None:
            t = np.array([g[0] for g in got], dtype=float)
            self.device_clock.update(t, now)
            if self.resample:
                t, f = self.resampler.process(t, f)
        else:
            t = (self.count + np.arange(len(got))) / self.rate_hz
        self.count += len(t)
        return Block(t, f, now)

    def counters(self) -> dict:
        c = dict(self.stats.__dict__)
        c.update(protocol="osc", gaps=self.device_clock.gaps, jumps=self.device_clock.jumps)
        return c

    def close(self) -> None:
        self.sock.close()
