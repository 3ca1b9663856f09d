"""A model of the built-in simulated jacket, trained the way a user would train one on a new
wearer: used by the demo, the soak and the live benchmark."""

from __future__ import annotations

import numpy as np

from ..garment import GESTURES, Jacket, training_script
from ..recognition import fit_linear
from ..sources import Recording


def train_simulated(seed: int, wearer: int, repetitions: int = 8, sessions: int = 2, null_s: float = 180.0):
    """A model for one simulated wearer, trained the way a user would on a new wearer:
    each gesture ``repetitions`` times per session, then ``null_s`` of ordinary movement."""
    takes = []
    for session in range(sessions):
        jacket = Jacket(seed=seed, wearer=wearer, session=session)
        rng = np.random.default_rng([seed, wearer, session, 11])
        script = training_script(rng, repetitions)
        script += [(activity, null_s / 3) for activity in ("standing", "walking", "fidgeting")]
        takes.append(Recording.from_take(jacket.perform(script), GESTURES))
    return fit_linear(takes, dict(GESTURES))
