"""Count a spotting bench's scored sessions again at another gate, without refitting.

    python benchmarks/spotting_recount.py --cache DIR [--cache DIR ...]
        [--workflow two-sessions|checkin|three-dressings]
        [--gestures THRESHOLD K N] [--postures THRESHOLD K N]
        [--gesture-min-confidence P] [--posture-min-confidence P]

`drape bench --spotting --spotting-cache DIR` keeps each known wearer's scored-session hop
probabilities in DIR; this reads them back and counts them with the one matcher, with every
gesture (or posture) at the given threshold on K of N hops, and the agreeing hops' mean
probability needed (``min_confidence``; 0 turns it off). Several caches (troupes) are
pooled into one figure. A gate chosen by looking at these counts is no longer held out on
them: choose on development sessions, then count here.
Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse

from bridge.evaluation.matching import format_counts, pool
from bridge.evaluation.spotting import WORKFLOWS, recount


def _gate(values, min_confidence):
    out = {}
    if values is not None:
        out.update(threshold=float(values[0]), agree_k=int(values[1]), agree_n=int(values[2]))
    if min_confidence is not None:
        out["min_confidence"] = min_confidence
    return out or None


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cache", required=True, action="append",
                    help="the folder given to drape bench --spotting-cache; repeat to pool troupes")
    ap.add_argument("--workflow", default="two-sessions", choices=WORKFLOWS)
    ap.add_argument("--gestures", nargs=3, metavar=("THRESHOLD", "K", "N"), help="every gesture's gate")
    ap.add_argument("--postures", nargs=3, metavar=("THRESHOLD", "K", "N"), help="every posture's entry")
    ap.add_argument("--gesture-min-confidence", type=float, metavar="P",
                    help="every gesture's needed mean of its agreeing hops, 0..1")
    ap.add_argument("--posture-min-confidence", type=float, metavar="P",
                    help="every posture's needed mean of its agreeing hops, 0..1 (0: the votes alone)")
    a = ap.parse_args()
    rows = []
    for cache in a.cache:
        try:
            out = recount(cache, a.workflow, _gate(a.gestures, a.gesture_min_confidence),
                          _gate(a.postures, a.posture_min_confidence))
        except ValueError as exc:   # no kept sessions, or a gate GateSettings refuses
            raise SystemExit(f"spotting_recount: {exc}")
        where = f"{cache} " if len(a.cache) > 1 else ""
        for w, c in zip(out["wearers"], out["per_wearer"]):
            print(f"{where}wearer{w}: {c['hit']}/{c['performed']} hits, {c['false']} false ({c['double']} double, "
                  f"{c['wrong_name']} wrong name, {c['ordinary']} ordinary)")
        rows += out["per_wearer"]
    if len(a.cache) > 1:
        print(f"pooled over {len(a.cache)} caches, {len(rows)} scored sessions:")
    print("\n".join(format_counts(pool(rows))))


if __name__ == "__main__":
    main()
