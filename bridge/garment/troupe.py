"""A troupe data set: several simulated wearers, each in several sessions, as take files.

Each take is one session (the jacket put on anew) of one wearer: every gesture
and posture of the chosen vocabulary ``repetitions`` times in shuffled order,
with every kind of null activity between them, cycling.  Files are named
``wearer{w}-session{s}.take`` and a ``troupe.json`` lists them with the seed,
the layout and the vocabulary.
"""

from __future__ import annotations

import json
from pathlib import Path

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


def write_troupe(out_dir: str | Path, seed: int, wearers: int, sessions: int, gestures: dict[str, str],
                 null_activities, repetitions: int = 3, layout: GarmentLayout | None = None,
                 progress=None) -> Path:
    """Write the troupe's takes and ``troupe.json`` into ``out_dir`` (created if missing)."""
    from ..sources import Recording, write_recording  # lazy: sources import garment

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = []
    layout_name = layout.name if layout else "built-in"
    for w, s, take in troupe_takes(seed, wearers, sessions, gestures, null_activities, repetitions, layout):
        path = out / f"wearer{w}-session{s}.take"
        write_recording(path, Recording.from_take(take, gestures, layout=layout_name))
        files.append({"file": path.name, "wearer": take.wearer, "session": take.session,
                      "seconds": round(take.t_s.size / take.rate_hz, 2), "gestures": len(take.intervals)})
        if progress:
            progress(files[-1])
    manifest = {"seed": seed, "wearers": wearers, "sessions": sessions, "repetitions": repetitions,
                "layout": layout_name, "kinds": dict(gestures), "null_activities": list(null_activities),
                "takes": files}
    (out / "troupe.json").write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    return out
