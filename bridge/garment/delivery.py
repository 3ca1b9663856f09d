"""How samples reach the computer: now and then one is lost, or held back and sent late.

A garment's microcontroller is busy with its radio or USB stack at times: a
gate's reading may be dropped (never sent) or delayed and then sent together
with the next ones.  ``deliver`` applies that to a rendered stream, as a plain
function of its inputs and a random generator.  The device time of every
delivered sample stays its gate time, so a receiver sees a drop as a gap in
the device time and a late sample as a burst of lines.

Rates are modelling choices (from memory of USB CDC boards under load, no source):
by default 1 sample in 2000 dropped and 1 in 500 late by 20-150 ms.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DROP_PROBABILITY = 5e-4
LATE_PROBABILITY = 2e-3
LATE_S = (0.02, 0.15)


@dataclass(frozen=True, eq=False)
class Delivery:
    """Samples as they reach the computer, in order of arrival."""

    t_s: np.ndarray  # (m,) device time of each delivered sample, s
    freq_hz: np.ndarray  # (m, channels)
    arrival_s: np.ndarray  # (m,) when each sample arrives, s on the device's clock; non-decreasing
    dropped: int  # how many samples were lost


def deliver(t_s: np.ndarray, freq_hz: np.ndarray, rate_hz: float, rng: np.random.Generator,
            drop_probability: float = DROP_PROBABILITY, late_probability: float = LATE_PROBABILITY,
            late_s: tuple[float, float] = LATE_S) -> Delivery:
    """Drop and delay samples of a stream (device times ``t_s``, gates of 1 / ``rate_hz``).

    A sample is ready at the end of its gate; a late one arrives ``late_s`` later,
    and a serial line keeps order, so the samples after it wait for it.
    """
    if not (0.0 <= drop_probability < 1.0 and 0.0 <= late_probability < 1.0):
        raise ValueError("probabilities must be in [0, 1)")
    t_s = np.asarray(t_s, float)
    freq_hz = np.asarray(freq_hz, float)
    n = t_s.shape[0]
    keep = rng.random(n) >= drop_probability
    delay = np.where(rng.random(n) < late_probability, rng.uniform(*late_s, n), 0.0)
    arrival = np.maximum.accumulate(t_s[keep] + 1.0 / rate_hz + delay[keep]) if keep.any() else np.empty(0)
    return Delivery(t_s[keep], freq_hz[keep], arrival, int(n - keep.sum()))
