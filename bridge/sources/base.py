"""Sources: where samples come from. A source is a tiny class: override ``read``."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Block:
    """Samples that arrived together.

    t_s: (n,) device time, s (sample count / rate when the device sends none);
    freq_hz: (n, channels) counted frequencies, Hz; arrived_s: host monotonic time of arrival, s.
    """

    t_s: np.ndarray
    freq_hz: np.ndarray
    arrived_s: float

    def __len__(self) -> int:
        return self.freq_hz.shape[0]


def placeholder_names(names) -> bool:
    """Whether channel names are numbered stand-ins (c0, c1, ...; ch0 or ch1, ...) rather than
    the names of cables: what a .ts fit or a garment that sends no header line gets."""
    names = tuple(names)
    return any(names == tuple(f"{prefix}{i + first}" for i in range(len(names)))
               for prefix in ("c", "ch") for first in (0, 1))


def channels_differ(names, expected) -> bool:
    """Whether two lists of channel names name other channels, or the same in another order;
    numbered stand-ins on either side say nothing, so they never differ."""
    names, expected = tuple(names), tuple(expected)
    return names != expected and not placeholder_names(names) and not placeholder_names(expected)


class SourceGone(OSError):
    """The device went away (unplugged, port closed)."""


class Source:
    """Base class. ``read`` waits briefly and returns a Block (possibly empty).

    ``ended`` becomes True when a finite source (a file, a fixed-length simulation) is exhausted.
    ``connected`` is False while a device is away (a reconnecting source keeps trying meanwhile).
    """

    rate_hz: float
    channel_names: tuple[str, ...]
    ended: bool = False
    connected: bool = True

    @property
    def n_channels(self) -> int:
        return len(self.channel_names)

    def read(self) -> Block:
        raise NotImplementedError

    def close(self) -> None:
        """Release the device or file."""

    def counters(self) -> dict:
        """Counts of bad input, for status and logs."""
        return {}

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def empty_block(n_channels: int, now_s: float) -> Block:
    return Block(np.empty(0), np.empty((0, n_channels)), now_s)
