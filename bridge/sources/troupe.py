"""A troupe data set written as take files: ``wearer{w}-session{s}.take`` for every wearer and
session of ``garment.troupe.troupe_takes``, and a ``troupe.json`` listing them with the
seed, the layout and the vocabulary."""

from __future__ import annotations

import json
from pathlib import Path

from ..garment.layout import GarmentLayout
from ..garment.troupe import troupe_takes
from .recording import Recording, write_recording


MANIFEST = "troupe.json"


def troupe_file_names(wearers: int, sessions: int) -> list[str]:
    """Every file ``write_troupe`` writes into its folder, takes first, then the manifest."""
    return [take_name(w, s) for w in range(wearers) for s in range(sessions)] + [MANIFEST]


def take_name(wearer: int, session: int) -> str:
    return f"wearer{wearer}-session{session}.take"


def write_troupe(out_dir: str | Path, seed: int, wearers: int, sessions: int, gestures: dict[str, str],
                 null_activities, repetitions: int = 3, layout: GarmentLayout | None = None,
                 progress=None) -> Path:
    """Write the troupe's takes and ``troupe.json`` into ``out_dir`` (created if missing)."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = []
    layout_name = layout.name if layout else "built-in"
    for w, s, take in troupe_takes(seed, wearers, sessions, gestures, null_activities, repetitions, layout):
        path = out / take_name(w, s)
        write_recording(path, Recording.from_take(take, gestures, layout=layout_name))
        files.append({"file": path.name, "wearer": take.wearer, "session": take.session,
                      "seconds": round(take.t_s.size / take.rate_hz, 2), "gestures": len(take.intervals)})
        if progress:
            progress(files[-1])
    manifest = {"seed": seed, "wearers": wearers, "sessions": sessions, "repetitions": repetitions,
                "layout": layout_name, "kinds": dict(gestures), "null_activities": list(null_activities),
                "takes": files}
    (out / MANIFEST).write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    return out
