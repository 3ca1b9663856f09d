"""Per-channel window features: level, spread, slope, extremes and their timing, energy over time."""

from __future__ import annotations

import numpy as np

N_SEGMENTS = 4
N_SHAPE = 8
FEATURES_PER_CHANNEL = 9 + N_SEGMENTS + 2 * N_SHAPE


def window_features(windows: np.ndarray) -> np.ndarray:
    """Features of windows (m, 2, length, channels) of (level, motion) streams.

    Level features are taken relative to the level just before the movement (the
    first tenth of the window), so a slow offset left by drift or a changed fit
    matters less. Returns (m, channels · FEATURES_PER_CHANNEL), channel-major.
    """
    level, motion = windows[:, 0], windows[:, 1]
    m, L, C = level.shape
    head_n = max(1, L // 10)
    head = level[:, :head_n].mean(axis=1)
    tail = level[:, -head_n:].mean(axis=1)
    mean = level.mean(axis=1)
    t = np.linspace(-1.0, 1.0, L)
    slope = np.einsum("l,mlc->mc", t, level - mean[:, None]) / np.dot(t, t)
    spread = motion.std(axis=1)
    # Stretch means in one pass each (few calls per block, not per stretch).
    energy = _stretch_means(motion * motion, N_SEGMENTS) ** 0.5        # (m, N_SEGMENTS, C)
    # The coarse course of the movement: mean level (above the level just before) and
    # mean motion in N_SHAPE equal stretches, which keeps the order in which channels move.
    shape_level = _stretch_means(level, N_SHAPE) - head[:, None]        # (m, N_SHAPE, C)
    shape_motion = _stretch_means(motion, N_SHAPE)
    feats = np.concatenate([
        np.stack([mean, mean - head, tail - head, slope, spread, motion.max(axis=1), motion.min(axis=1),
                  motion.argmax(axis=1) / L, motion.argmin(axis=1) / L], axis=1),
        energy, shape_level, shape_motion,
    ], axis=1)                                                          # (m, FEATURES_PER_CHANNEL, C)
    return feats.transpose(0, 2, 1).reshape(m, C * FEATURES_PER_CHANNEL)


def _stretch_means(x: np.ndarray, n: int) -> np.ndarray:
    """Means of x (m, L, C) over n nearly equal stretches of the time axis (as np.array_split cuts)."""
    L = x.shape[1]
    bounds = np.array([len(a) for a in np.array_split(np.arange(L), n)]).cumsum()
    starts = np.concatenate([[0], bounds[:-1]])
    return np.add.reduceat(x, starts, axis=1) / (bounds - starts)[None, :, None]
