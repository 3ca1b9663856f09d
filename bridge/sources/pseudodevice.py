"""The simulated jacket as a serial device: a pseudo-terminal speaking the text-line protocol.

``PseudoGarment`` opens a pseudo-terminal pair and, in the caller's own loop
(``step``), writes one protocol line per gate when its arrival time comes,
in real time: ``drape start`` (or any serial terminal) opens ``path`` as if a
garment were plugged in.  Dropped and late samples come from ``delivery``.
Nothing runs behind the caller's back: no threads; the caller paces ``step``.

POSIX only (pseudo-terminals).  While nobody has the port open, lines are
discarded, as a real board's USB serial discards them with no host listening.
When a host opens the port, the device starts over as a board does when its port is
opened: nothing for ``BOOT_S``, then the channel-name header (``t_s,left_sleeve,...``)
first, so a capture names the channels as ``drape simulate`` does. (The wait matters: a
host's serial library clears its input right after opening the port, which would take a
header sent at once with it.)
"""

from __future__ import annotations

import os
import time

import numpy as np

from ..garment.delivery import DROP_PROBABILITY, LATE_PROBABILITY, deliver
from ..garment.jacket import Jacket, random_script
from .textline import format_line

BOOT_S = 0.25  # s from a host opening the port to the header, as a board restarting


class PseudoGarment:
    """A simulated wearer performing at random, readable at ``path``.

    ``gestures`` / ``null_activities`` name what the wearer performs;
    ``performed`` collects the labelled intervals as they are rendered.
    """

    def __init__(self, jacket: Jacket, rng: np.random.Generator, gestures, null_activities, chunk_s: float = 10.0,
                 drop_probability: float = DROP_PROBABILITY, late_probability: float = LATE_PROBABILITY,
                 with_time: bool = True):
        if not hasattr(os, "openpty"):
            raise OSError("pseudo-terminals are not available on this system")
        self._format = format_line
        self.jacket, self.rng = jacket, rng
        self.gestures, self.null_activities = list(gestures), tuple(null_activities)
        self.chunk_s = chunk_s
        self.drop_probability, self.late_probability = drop_probability, late_probability
        self.with_time = with_time
        self._master, slave = os.openpty()
        self.path = os.ttyname(slave)
        try:
            import tty
            tty.setraw(slave)  # no echo, no line editing: bytes pass as a serial line's would
        finally:
            os.close(slave)  # the client opens the path itself
        os.set_blocking(self._master, False)
        self.performed: list = []
        self.sent_lines = 0
        self.discarded_lines = 0
        self.dropped_samples = 0
        self._pending: list[tuple[float, bytes]] = []
        self._next = 0
        self._start: float | None = None
        self._host = False  # a host has the port open (the header goes first when one comes)
        self._boot_until = -1.0  # s since the first step: lines due before then are not sent
        names = ",".join(jacket.channel_names)
        self.header = (f"t_s,{names}" if with_time else names).encode() + b"\n"

    def _refill(self) -> None:
        take = self.jacket.perform(random_script(self.rng, self.chunk_s, self.gestures,
                                                 null_activities=self.null_activities))
        self.performed.extend(take.intervals)
        d = deliver(take.t_s, take.freq_hz, take.rate_hz, self.rng, self.drop_probability, self.late_probability)
        self.dropped_samples += d.dropped
        lines = [(float(a), self._format(f, t if self.with_time else None))
                 for a, t, f in zip(d.arrival_s, d.t_s, d.freq_hz)]
        self._pending = self._pending[self._next:] + lines
        self._next = 0

    def step(self, now_s: float) -> float:
        """Write every line due by ``now_s`` (seconds since the first step); returns seconds until the next."""
        if self._start is None:
            self._start = now_s
        t = now_s - self._start
        while self._next >= len(self._pending) or self._pending[-1][0] <= t:
            self._refill()
        chunk = []
        while self._pending[self._next][0] <= t:
            chunk.append(self._pending[self._next][1])
            self._next += 1
        host = self._host_present()
        if host and not self._host:  # a host has just opened the port: start over
            self._boot_until = t + BOOT_S
        self._host = host
        if host and t < self._boot_until:  # booting: these lines are lost, as on a board
            self.discarded_lines += len(chunk)
            return max(0.0, min(self._pending[self._next][0], self._boot_until) - t)
        if host and self._boot_until >= 0:  # booted: the header first
            chunk.insert(0, self.header)
            self._boot_until = -1.0
        if chunk:
            self._write(b"".join(chunk), len(chunk))
        return max(0.0, self._pending[self._next][0] - t)

    def _host_present(self) -> bool:
        """Read and ignore what the host sends; with no host holding the port open, the read fails (EIO)."""
        try:
            os.read(self._master, 4096)
        except BlockingIOError:
            return True
        except OSError:
            return False
        return True

    def _write(self, data: bytes, n_lines: int) -> None:
        try:
            written = os.write(self._master, data)
        except (BlockingIOError, OSError):
            written = 0
        if written < len(data):  # nobody reading: the rest is lost, as on a real port
            lost = data[:written].count(b"\n")
            self.discarded_lines += n_lines - lost
            self.sent_lines += lost
        else:
            self.sent_lines += n_lines

    def run(self, stop, duration_s: float | None = None, clock=time.monotonic, sleep=time.sleep,
            on_performed=None) -> None:
        """Serve in real time until ``stop.stopped`` or ``duration_s`` have passed."""
        start = clock()
        reported = 0
        while not stop.stopped:
            now = clock()
            if duration_s is not None and now - start >= duration_s:
                break
            wait = self.step(now)
            if on_performed:
                done = now - (self._start or now)
                while reported < len(self.performed) and self.performed[reported].end_s <= done:
                    on_performed(self.performed[reported])
                    reported += 1
            sleep(min(wait, 0.05))

    def close(self) -> None:
        if self._master is not None:
            os.close(self._master)
            self._master = None
