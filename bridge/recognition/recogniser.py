"""Live recognition: conditioned blocks in, class probabilities per hop out."""

from __future__ import annotations

import numpy as np

from .features import window_features
from .linear import probabilities
from .model import Model
from .windows import Windower


class Recogniser:
    """Owns the window ring for one stream and applies a model every hop."""

    def __init__(self, model: Model):
        self.model = model
        self.windower = Windower(model.windows, model.n_channels)

    def push(self, level: np.ndarray, motion: np.ndarray) -> tuple[list[int], np.ndarray]:
        """Add a conditioned block; returns (end sample index per hop, probabilities (hops, classes))."""
        windows, ends = self.windower.push(level, motion)
        if not ends:
            return [], np.empty((0, len(self.model.classes)))
        scores = self.model.scores(window_features(windows))
        return ends, probabilities(scores, self.model.temperature)
