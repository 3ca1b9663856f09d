"""Per-channel window features: level, spread, slope, extremes and their timing, energy over time."""

from __future__ import annotations

from functools import lru_cache

import numpy as np

N_SEGMENTS = 4
N_SHAPE = 8
FEATURES_PER_CHANNEL = 9 + N_SEGMENTS + 2 * N_SHAPE
_CHUNK = 512  # windows per batch step: bounds the temporary (motion²) to a few MB in training


def window_features(windows: np.ndarray) -> np.ndarray:
    """Features of windows (m, 2, length, channels) of (level, motion) streams.

    Level features are taken relative to the level just before the movement (the
    first tenth of the window), so a slow offset left by drift or a changed fit
    matters less. Returns (m, channels · FEATURES_PER_CHANNEL), channel-major.

    Every mean-like feature is a fixed weighting of the window's samples, so each stream
    takes one product with a precomputed (rows, length) weight matrix: a live hop costs a
    few dozen small array operations whatever the window length.
    """
    windows = np.asarray(windows, dtype=float)
    m, _, L, C = windows.shape
    out = np.empty((m, FEATURES_PER_CHANNEL, C))
    for a in range(0, m, _CHUNK):
        _fill(windows[a:a + _CHUNK], out[a:a + _CHUNK])
    return out.transpose(0, 2, 1).reshape(m, C * FEATURES_PER_CHANNEL)


def _fill(windows: np.ndarray, out: np.ndarray) -> None:
    """Write the features of windows (m, 2, L, C) into out (m, FEATURES_PER_CHANNEL, C)."""
    level, motion = windows[:, 0], windows[:, 1]
    L = level.shape[1]
    w_level, w_motion, w_square = _weights(L)
    lv = w_level @ level                      # (m, 5 + N_SHAPE, C)
    mv = w_motion @ motion                    # (m, 1 + N_SHAPE, C)
    sq = w_square @ (motion * motion)         # (m, 1 + N_SEGMENTS, C)
    out[:, 0:4] = lv[:, 0:4]                  # mean, mean − head, tail − head, slope
    spread = sq[:, 0] - mv[:, 0] * mv[:, 0]   # mean square − square mean: the variance
    np.maximum(spread, 0.0, out=spread)
    np.sqrt(spread, out=out[:, 4])
    amax = motion.argmax(axis=1)
    amin = motion.argmin(axis=1)
    out[:, 5] = np.take_along_axis(motion, amax[:, None], axis=1)[:, 0]
    out[:, 6] = np.take_along_axis(motion, amin[:, None], axis=1)[:, 0]
    np.divide(amax, L, out=out[:, 7])
    np.divide(amin, L, out=out[:, 8])
    np.sqrt(sq[:, 1:], out=out[:, 9:9 + N_SEGMENTS])           # energy in N_SEGMENTS stretches
    # The coarse course of the movement: mean level (above the level just before) and
    # mean motion in N_SHAPE equal stretches, which keeps the order in which channels move.
    out[:, 9 + N_SEGMENTS:9 + N_SEGMENTS + N_SHAPE] = lv[:, 4:]
    out[:, 9 + N_SEGMENTS + N_SHAPE:] = mv[:, 1:]


@lru_cache(maxsize=8)
def _weights(L: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weight rows (k, L) over a window of L samples, read-only.

    level: mean, mean − head, tail − head, least-squares slope against t ∈ [−1, 1], and the
    N_SHAPE stretch means minus head (head/tail: means of the first/last tenth);
    motion: mean and the N_SHAPE stretch means; motion²: mean and the N_SEGMENTS stretch means.
    """
    head_n = max(1, L // 10)
    mean = np.full(L, 1.0 / L)
    head = np.zeros(L)
    head[:head_n] = 1.0 / head_n
    tail = np.zeros(L)
    tail[-head_n:] = 1.0 / head_n
    t = np.linspace(-1.0, 1.0, L)
    slope = (t - t.mean()) / np.dot(t, t)
    shape = _stretches(L, N_SHAPE)
    w_level = np.vstack([mean, mean - head, tail - head, slope, shape - head])
    w_motion = np.vstack([mean, shape])
    w_square = np.vstack([mean, _stretches(L, N_SEGMENTS)])
    for w in (w_level, w_motion, w_square):
        w.flags.writeable = False
    return w_level, w_motion, w_square


def _stretches(L: int, n: int) -> np.ndarray:
    """(n, L) rows averaging n nearly equal stretches of the time axis (as np.array_split cuts)."""
    rows = np.zeros((n, L))
    for i, part in enumerate(np.array_split(np.arange(L), n)):
        rows[i, part] = 1.0 / len(part)
    return rows
