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


# The built-in jacket's stand-ins for other people: what `drape fit` adds to a minirocket
# model fitted on the built-in jacket's takes when no --ordinary takes are given. People of
# another seed than any troupe the defaults simulate (the spotting protocol's prior at its
# seed 1): 6 of them, 10 minutes each in ordinary movement (`drape simulate
# --ordinary-people 6 --seed 1`), and the same 6 performing each of the wearer's gestures.
# More people (60 performing, 30 moving 2 minutes each, 600 windows per class) fired more
# of the cues of sessions where the jacket sat unlike in the wearer's fit sessions, but
# many more times in ordinary movement (docs/benchmarks.md), so it is not the default.
OTHERS_SEED = 1001
OTHERS_PEOPLE = 6
OTHERS_S = 600.0
OTHERS_CUE_PEOPLE = 6
OTHERS_REPS = 1   # each of the wearer's gestures, performed by each of those people


def others_cue_take(seed: int, person: int, repetitions: int, labels, rate_hz: float | None = None) -> Recording:
    """Simulated person ``person`` (of ``seed``) performing each of ``labels`` (names of the
    full vocabulary) ``repetitions`` times between short stretches of ordinary movement, in
    their session 1: labelled cue takes of someone other than the wearer."""
    from ..garment import FULL_GESTURES, FULL_NULL_ACTIVITIES
    labels = [g for g in FULL_GESTURES if g in set(labels)]
    if not labels:
        raise ValueError("none of the labels is a gesture the simulated people know")
    rng = np.random.default_rng([seed, person, 1, 41])
    script = training_script(rng, repetitions, labels, null_activities=tuple(FULL_NULL_ACTIVITIES))
    extra = {} if rate_hz is None else {"rate_hz": rate_hz}
    take = Jacket(seed=seed, wearer=person, session=1, **extra).perform(script)
    return Recording.from_take(take, {g: FULL_GESTURES[g] for g in labels}, layout="built-in")


def built_in_others_cues(rate_hz: float, labels, people: int = OTHERS_CUE_PEOPLE,
                         repetitions: int = OTHERS_REPS) -> list[Recording]:
    """The built-in people's cue takes (OTHERS_SEED): each performs those of ``labels`` the
    simulator knows ``repetitions`` times. Empty when it knows none of them."""
    from ..garment import FULL_GESTURES
    if not set(labels) & set(FULL_GESTURES):
        return []
    out = []
    for k in range(people):
        rec = others_cue_take(OTHERS_SEED, k, repetitions, labels, rate_hz)
        rec.wearer, rec.session = f"cue-person{k}", "cues"
        out.append(rec)
    return out


# Layout names the simulator writes into takes of the built-in jacket: `drape simulate`,
# `drape capture --simulated`, and takes made in code (Recording.from_take).
BUILT_IN_LAYOUTS = ("built-in", "simulated jacket", "default")


def built_in_jacket_takes(recordings) -> bool:
    """True when every take is of the built-in simulated jacket: a layout name the simulator
    writes, its channels and one rate. Takes of a real garment, or of a simulated layout
    file, are not: the built-in people's movement would be another garment's."""
    from ..garment.layout import default_layout
    recordings = list(recordings)
    if not recordings:
        return False
    channels = default_layout(4).channel_names
    rate = recordings[0].rate_hz
    return all(r.layout in BUILT_IN_LAYOUTS and tuple(r.channel_names) == tuple(channels)
               and abs(r.rate_hz - rate) <= 1e-6 * rate for r in recordings)


def built_in_others(rate_hz: float, people: int = OTHERS_PEOPLE, seconds: float = OTHERS_S) -> list[Recording]:
    """The built-in jacket's ordinary movement of ``people`` simulated people (OTHERS_SEED),
    ``seconds`` each at ``rate_hz``, as unlabelled takes for a fit's null class."""
    from ..garment import FULL_NULL_ACTIVITIES
    from ..garment.troupe import ordinary_take
    out = []
    for k in range(people):
        rec = Recording.from_take(ordinary_take(OTHERS_SEED, k, seconds, FULL_NULL_ACTIVITIES, None, rate_hz), {},
                                  layout="built-in")
        rec.wearer, rec.session = f"ordinary-person{k}", "ordinary"
        out.append(rec)
    return out
