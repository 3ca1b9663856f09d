"""A troupe: several simulated wearers, each in several sessions.

Each take is one session (the jacket put on anew) of one wearer: every gesture
and posture of the chosen vocabulary ``repetitions`` times in shuffled order,
with every kind of null activity between them, cycling. ``sources.troupe.write_troupe``
writes them as take files.

``ordinary_take``: one simulated person's ordinary movement only, no cue at all: other
people's ordinary movement in the same garment, to add to a fit's null class.
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


def ordinary_script(rng: np.random.Generator, seconds: float, kinds) -> list[tuple[str, float]]:
    """Ordinary movement for ``seconds``: every kind of null activity in turn, shuffled,
    10 to 40 s each."""
    out, total = [], 0.0
    while total < seconds:
        order = list(kinds)
        rng.shuffle(order)
        for k in order:
            d = float(min(rng.uniform(10.0, 40.0), seconds - total))
            if d <= 0:
                break
            out.append((k, d))
            total += d
    return out


def ordinary_take(seed: int, person: int, seconds: float, null_activities, layout: GarmentLayout | None = None,
                  rate_hz: float | None = None):
    """The Take of simulated person ``person`` (of ``seed``) doing nothing but ordinary
    movement for ``seconds``: every kind in ``null_activities``, shuffled, 10 to 40 s each."""
    if seconds <= 0:
        raise ValueError("seconds of ordinary movement must be positive")
    rng = np.random.default_rng([seed, person, 31])
    extra = {} if rate_hz is None else {"rate_hz": rate_hz}
    jacket = Jacket(seed=seed, wearer=person, session=0, layout=layout, **extra)
    return jacket.perform(ordinary_script(rng, seconds, tuple(null_activities)))
