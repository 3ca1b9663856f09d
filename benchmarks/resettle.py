"""Re-settling on the simulated jacket: false re-settles per hour of ordinary movement with
nothing near, and how many approaches of a second person, a metal stand or a table are found.

    python benchmarks/resettle.py [--wearers 3] [--minutes 20] [--approaches 4] [--seed 7]

Each wearer gets a model trained the way `drape demo` trains one (held-out sessions are
performed, never trained on). The pipeline runs exactly as `drape start` runs it, with the
service's default ``[calibration]`` (a 1 s hold-still at start, ``shift = true``), in blocks
of 10 samples. Figures only; nothing here passes or fails.

"Ordinary movement" is the demo's vocabulary at random (`random_script`): standing, walking,
adjusting the jacket, and every demo gesture and posture in between. Any re-settle there is
false. An approach is a stretch of ``--stay-s`` (default 30 s) during which the simulator's
second person, grounded stand or table comes near and stays, between 20 s of standing: it is
found when a re-settle begins while it is near. Some approaches hardly move any channel (the
object came on the far side, or stopped well away); they are counted apart ("small": less
than the detector's threshold on every channel, measured from the take), as a re-settle
would not change anything for them.
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bridge.cli import train_simulated  # noqa: E402
from bridge.garment import Jacket  # noqa: E402
from bridge.garment.jacket import random_script  # noqa: E402
from bridge.service import Pipeline, Settling  # noqa: E402
from bridge.service.pipeline import SETTLING  # noqa: E402
from bridge.signal.shift import ShiftDetector  # noqa: E402

KINDS = ("partner_near", "metal_near", "leaning_on_table")
BLOCK = 10


def settles(model, freq_hz, held=None) -> list[int]:
    """Stream samples at which a re-settle began (service defaults). ``held``, a list, gets
    the (start_s, end_s) of every posture the gate held."""
    p = Pipeline(model, settle=Settling(1.0, True, True))
    events = []
    for i in range(0, freq_hz.shape[0], BLOCK):
        events += p.feed(freq_hz[i:i + BLOCK])
    events += p.stop()
    if held is not None:
        began = {}
        for e in events:
            if e.kind == "entered":
                began[e.gesture] = e.t_s
            elif e.kind == "left" and e.gesture in began:
                held.append((began.pop(e.gesture), e.t_s))
    return [h.start_sample for h in p.holds if h.state == SETTLING]


def main(argv=None) -> int:
    a = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    a.add_argument("--wearers", type=int, default=3)
    a.add_argument("--minutes", type=float, default=20.0, help="ordinary movement per wearer")
    a.add_argument("--approaches", type=int, default=4, help="approaches of each kind per wearer")
    a.add_argument("--stay-s", type=float, default=30.0)
    a.add_argument("--seed", type=int, default=7)
    a.add_argument("--matters", type=float, help="smallest step (|Δ ln f| on a channel) an approach must make to be "
                   "counted as one to find (default: the detector's threshold)")
    args = a.parse_args(argv)
    threshold = args.matters or ShiftDetector(100.0).threshold
    t0 = time.monotonic()
    false_n, ordinary_s = 0, 0.0
    found = {k: [0, 0] for k in KINDS}        # found, total (large enough to matter)
    small = {k: [0, 0] for k in KINDS}        # found, total (below the threshold everywhere)
    false_in_approach = left_n = 0
    as_posture = {k: 0 for k in KINDS}
    for wearer in range(args.wearers):
        model = train_simulated(1, wearer)
        # ordinary movement, nothing near
        jacket = Jacket(seed=args.seed, wearer=wearer, session=3)
        take = jacket.perform(random_script(np.random.default_rng([args.seed, wearer]), args.minutes * 60.0))
        hits = settles(model, take.freq_hz)
        false_n += len(hits)
        ordinary_s += take.freq_hz.shape[0] / take.rate_hz
        print(f"wearer {wearer}: {take.freq_hz.shape[0] / take.rate_hz / 60:.0f} min ordinary movement, "
              f"{len(hits)} re-settles" + (f" at {', '.join(f'{h / take.rate_hz:.0f} s' for h in hits)}" if hits else ""),
              flush=True)
        # approaches
        rng = np.random.default_rng([args.seed, wearer, 1])
        script, spans = [("standing", 20.0)], []
        t = 20.0
        for _ in range(args.approaches):
            for k in rng.permutation(KINDS):
                script += [(str(k), args.stay_s), ("standing", 20.0)]
                spans.append((str(k), t, t + args.stay_s))
                t += args.stay_s + 20.0
        take = Jacket(seed=args.seed, wearer=wearer, session=4).perform(script)
        rate = take.rate_hz
        held = []
        hits = [h / rate for h in settles(model, take.freq_hz, held)]
        logf = np.log(take.freq_hz)
        for k, a_s, b_s in spans:
            before = np.median(logf[int((a_s - 8) * rate):int((a_s - 1) * rate)], axis=0)
            during = np.median(logf[int((a_s + 5) * rate):int((b_s - 3) * rate)], axis=0)
            big = bool(np.any(np.abs(during - before) >= threshold))
            got = any(a_s < h <= b_s for h in hits)
            tally = found if big else small
            tally[k][0] += got
            tally[k][1] += 1
            overlap = sum(max(0.0, min(b_s, y) - max(a_s, x)) for x, y in held)
            if big and not got and overlap > 0.5 * (b_s - a_s):
                as_posture[k] += 1  # the classifier took it for a posture: shifts wait while one is held
        leave_s = ShiftDetector(rate).sustain_s + 3.0  # the object leaving is a lasting change too
        left_n += sum(any(b_s < h <= b_s + leave_s for _, _, b_s in spans) for h in hits)
        false_in_approach += sum(not any(a_s < h <= b_s + leave_s for _, a_s, b_s in spans) for h in hits)
    hours = ordinary_s / 3600.0
    print()
    print(f"ordinary movement: {false_n} false re-settles in {hours:.2f} h of {args.wearers} wearers "
          f"= {false_n / hours:.1f} per hour" + (" (none seen: fewer than one per "
                                                 f"{hours:.2f} h)" if false_n == 0 else ""))
    for k in KINDS:
        print(f"{k:<17} found {found[k][0]} of {found[k][1]} that move a channel by {threshold:g} or more; "
              f"{small[k][0]} of {small[k][1]} smaller ones"
              + (f"; of the missed, {as_posture[k]} held as a posture by the classifier" if as_posture[k] else ""))
    print(f"re-settles when the object left again: {left_n} of {sum(v[1] for v in found.values()) + sum(v[1] for v in small.values())} "
          f"approaches; outside any approach or leaving (false): {false_in_approach}")
    print(f"({time.monotonic() - t0:.0f} s on {platform.machine()} {platform.processor() or ''}, "
          f"python {platform.python_version()}; seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
