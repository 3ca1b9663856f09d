"""Which cable layout separates the vocabulary best for wearers it never saw?

Simulates the same troupe (same people, same scripts, same seed) in each layout of
examples/layouts/, and scores each with leave-one-wearer-out: the linear classifier
is trained on all wearers but one and scored on the one left out ("unseen"), and on a
new session of the wearers it trained on ("seen"; not scored with one session each: their
training takes would not be held out).  Scores are balanced window accuracy (mean per-class recall, null included);
chance is 1 / classes.

    python examples/compare_layouts.py                  # 6 wearers x 2 sessions, full vocabulary
    python examples/compare_layouts.py --wearers 4 --vocabulary demo

It takes a few minutes (each layout: one troupe rendered, one model fitted per wearer).
"""

import argparse
import sys
import time
from pathlib import Path

from bridge.evaluation.layouts import compare_layouts
from bridge.garment import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES, load_layout

HERE = Path(__file__).resolve().parent


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("layouts", nargs="*", help="layout files (default: examples/layouts/*.toml)")
    p.add_argument("--wearers", type=int, default=6)
    p.add_argument("--sessions", type=int, default=2)
    p.add_argument("--repetitions", type=int, default=3, help="of each gesture, per session")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--vocabulary", choices=("demo", "full"), default="full")
    a = p.parse_args(argv)
    files = [Path(f) for f in a.layouts] or sorted((HERE / "layouts").glob("*.toml"))
    layouts = [load_layout(f) for f in files]
    gestures, nulls = (FULL_GESTURES, FULL_NULL_ACTIVITIES) if a.vocabulary == "full" else (GESTURES, NULL_ACTIVITIES)
    print(f"{a.wearers} wearers x {a.sessions} sessions, {len(gestures)} gestures and postures, "
          f"{len(nulls)} null kinds, seed {a.seed}", flush=True)
    t0 = time.monotonic()

    def score(v) -> str:   # one session each: no new session of a known wearer to score on
        return "n/a (one session each)" if v is None else f"{v:.3f}"

    def show(r):
        print(f"{r['layout']:<48} {r['channels']:>2} ch   unseen wearer {r['unseen']:.3f}   "
              f"seen wearer, new session {score(r['seen'])}   chance {r['chance']:.3f}   "
              f"({time.monotonic() - t0:.0f} s)", flush=True)
        for f in r["folds"]:
            print(f"    left out {f['wearer']:<8} unseen {f['unseen']:.3f}  seen {score(f['seen'])}", flush=True)

    compare_layouts(layouts, a.seed, a.wearers, a.sessions, a.repetitions, gestures, nulls, progress=show)
    return 0


if __name__ == "__main__":
    sys.exit(main())
