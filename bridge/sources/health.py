"""Is the stream alive? A watchdog over sample arrival, as a plain state object."""

from __future__ import annotations

from dataclasses import dataclass

STREAMING = "streaming"
NO_DATA = "no data"


@dataclass
class Watchdog:
    """Tells "streaming" from "no data" (device away, or no sample for ``stall_s``).

    ``step(now_s, n_samples, connected)`` is called after every read with the host time (s),
    the number of samples that read gave and whether the device is present; it returns
    (status, reason) where reason says why there is no data ("" while streaming). Before the
    first sample the stream counts as stalled from the moment the watchdog was first stepped.
    """

    stall_s: float = 1.0
    status: str = NO_DATA
    reason: str = "waiting for the first sample"
    last_sample_s: float | None = None
    stalls: int = 0
    outages: int = 0
    was_connected: bool = False   # a device that was never there is not "gone"

    def step(self, now_s: float, n_samples: int, connected: bool = True) -> tuple[str, str]:
        if self.last_sample_s is None:
            self.last_sample_s = now_s
        if not connected:
            gone = "device gone" if self.was_connected else "no device yet"
            if self.reason != gone:
                self.outages += 1
            self.status, self.reason = NO_DATA, gone
            return self.status, self.reason
        self.was_connected = True
        if n_samples > 0:
            self.last_sample_s = now_s
            self.status, self.reason = STREAMING, ""
        elif now_s - self.last_sample_s >= self.stall_s and self.status == STREAMING:
            self.stalls += 1
            self.status, self.reason = NO_DATA, f"no sample for {self.stall_s:g} s"
        return self.status, self.reason
