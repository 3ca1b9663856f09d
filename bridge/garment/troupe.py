"""A troupe: several simulated wearers, each in several sessions.

Each take is one session (the jacket put on anew) of one wearer: every gesture
and posture of the chosen vocabulary ``repetitions`` times in shuffled order,
with every kind of null activity between them, cycling. ``sources.troupe.write_troupe``
writes them as take files.
"""

from __future__ import annotations

import numpy as np

from .jacket import Jacket, training_script
from .layout import GarmentLayout


def troupe_takes(seed: int, wearers: int, sessions: int, gestures: dict[str, str], null_activities,
                 repetitions: int = 3, layout: GarmentLayout | None = None, idle_s=(2.0, 6.0)):
    """Yield (wearer, session, Take) for every wearer and session, in order."""
    if wearers < 1 or sessions < 1 or repetitions < 1:
        raise ValueError("wearers, sessions and repetitions must be at least 1")
    for w in range(wearers):
        for s in range(sessions):
            jacket = Jacket(seed=seed, wearer=w, session=s, layout=layout)
            rng = np.random.default_rng([seed, w, s, 17])
            script = training_script(rng, repetitions, list(gestures), idle_s, tuple(null_activities))
            yield w, s, jacket.perform(script)
