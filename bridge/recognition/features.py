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
    segs = np.array_split(np.arange(L), N_SEGMENTS)
    energy = [np.sqrt((motion[:, s] ** 2).mean(axis=1)) for s in segs]
    # The coarse course of the movement: mean level (above the level just before) and
    # mean motion in N_SHAPE equal stretches, which keeps the order in which channels move.
    parts = np.array_split(np.arange(L), N_SHAPE)
    shape_level = [level[:, s].mean(axis=1) - head for s in parts]
    shape_motion = [motion[:, s].mean(axis=1) for s in parts]
    feats = [
        mean,
        mean - head,
        tail - head,
        slope,
        spread,
        motion.max(axis=1),
        motion.min(axis=1),
        motion.argmax(axis=1) / L,
        motion.argmin(axis=1) / L,
        *energy,
        *shape_level,
        *shape_motion,
    ]
    return np.stack(feats, axis=2).reshape(m, C * FEATURES_PER_CHANNEL)
