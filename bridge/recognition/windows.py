"""Sliding windows over a conditioned stream, with the window and hop in seconds."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class WindowSpec:
    """Window length and hop, s, at a sample rate, Hz."""

    rate_hz: float
    window_s: float = 2.0
    hop_s: float = 0.1

    @property
    def length(self) -> int:
        """Samples per window."""
        return max(8, int(round(self.window_s * self.rate_hz)))

    @property
    def hop(self) -> int:
        """Samples per hop."""
        return max(1, int(round(self.hop_s * self.rate_hz)))

    def to_dict(self) -> dict:
        return {"rate_hz": self.rate_hz, "window_s": self.window_s, "hop_s": self.hop_s}

    @classmethod
    def from_dict(cls, d: dict) -> "WindowSpec":
        return cls(float(d["rate_hz"]), float(d["window_s"]), float(d["hop_s"]))


class Windower:
    """Collects samples of several parallel streams and yields a window every hop.

    State is a buffer holding at least the last ``length`` samples per stream and the
    count of samples seen; ``push`` returns the windows completed by this block with the
    index (count of samples seen) of each window's last sample, so replay and live agree
    to the sample. Blocks are written into the preallocated buffer after the samples kept;
    only when it is full are the last ``length`` samples moved back to its start, so a
    hop copies the hop's samples and the window it returns, nothing more.
    """

    def __init__(self, spec: WindowSpec, n_channels: int, n_streams: int = 2):
        self.spec = spec
        L = spec.length
        self.buf = np.zeros((n_streams, 2 * L + spec.hop, n_channels))
        self.end = L          # buf[:, end − L:end] are the last L samples (zeros before any)
        self.seen = 0

    @property
    def ring(self) -> np.ndarray:
        """The last ``length`` samples per stream, (streams, length, channels) (a copy)."""
        return self.buf[:, self.end - self.spec.length:self.end].copy()

    def push(self, *streams: np.ndarray) -> tuple[np.ndarray, list[int]]:
        """Append a block of each stream, (n, channels) each.

        Returns (windows (m, streams, length, channels), end indices (m,)).
        """
        L = self.spec.length
        n = streams[0].shape[0]
        first = self._next_emit()
        ends = list(range(first, self.seen + n + 1, self.spec.hop))
        n_str, _, n_ch = self.buf.shape
        if n == 0:
            return np.empty((0, n_str, L, n_ch)), []
        if self.end + n > self.buf.shape[1]:
            keep = self.buf[:, self.end - L:self.end]
            if L + n > self.buf.shape[1]:
                grown = np.zeros((n_str, L + n, n_ch))
                grown[:, :L] = keep
                self.buf = grown
            else:
                self.buf[:, :L] = keep      # source and destination do not overlap: end − L ≥ L
            self.end = L
        for i, s in enumerate(streams):
            self.buf[i, self.end:self.end + n] = s
        # Windows from the last L samples followed by the block: the window ending at
        # absolute sample e starts at position e − seen of that stretch.
        ext = self.buf[:, self.end - L:self.end + n]
        if len(ends) == 1:
            k = ends[0] - self.seen
            windows = ext[None, :, k:k + L].copy()
        elif ends:
            view = np.lib.stride_tricks.sliding_window_view(ext, L, axis=1)   # (streams, n+1, ch, L)
            w = view[:, np.asarray(ends) - self.seen]                         # (streams, m, ch, L)
            windows = np.ascontiguousarray(w.transpose(1, 0, 3, 2))
        else:
            windows = np.empty((0, n_str, L, n_ch))
        self.end += n
        self.seen += n
        return windows, ends

    def _next_emit(self) -> int:
        L, hop = self.spec.length, self.spec.hop
        if self.seen < L:
            return L
        return self.seen + hop - ((self.seen - L) % hop)


def window_ends(spec: WindowSpec, n_samples: int) -> np.ndarray:
    """End index (exclusive) of every window a Windower emits over ``n_samples`` samples."""
    if n_samples < spec.length:
        return np.empty(0, dtype=np.int64)
    return np.arange(spec.length, n_samples + 1, spec.hop, dtype=np.int64)


def all_windows(spec: WindowSpec, *streams: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every window a Windower would emit over whole streams, at once (offline training).

    Returns (windows (m, streams, length, channels), end indices (m,)).
    """
    L = spec.length
    ends = window_ends(spec, streams[0].shape[0])
    if not len(ends):
        return np.empty((0, len(streams), L, streams[0].shape[1])), ends
    stacked = np.stack(streams)  # (streams, n, channels)
    view = np.lib.stride_tricks.sliding_window_view(stacked, L, axis=1)  # (streams, n-L+1, ch, L)
    w = view[:, ends - L]  # (streams, m, ch, L)
    return np.ascontiguousarray(w.transpose(1, 0, 3, 2)), ends
