"""The fit a performer waits for before a show: two fit sessions and a check-in take of one
simulated wearer, with the six simulated people `drape fit` adds on the built-in jacket,
fitted as `drape bench --spotting --spotting-checkin 3` fits it (the default classifier,
minirocket with out-of-fold hard-negative mining).

    python benchmarks/checkin_fit.py [--seed 6] [--wearer 0] [--cache DIR]

Renders the takes into --cache once (several minutes the first time), then times the fit
alone: wall and CPU seconds, peak resident memory of the process, the transform engine
(numba with the `accelerate` extra, else numpy) and the fit's own summary figures, so two
runs can be checked to give the same model. Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import json
import platform
import resource
import time
from pathlib import Path

from bridge.evaluation.spotting import Protocol, fit_model, prior_options, protocol_takes
from bridge.recognition.minirocket import compiled_kernels


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seed", type=int, default=6, help="the troupe's seed (default 6)")
    ap.add_argument("--wearer", type=int, default=0, help="which wearer of the troupe (default 0)")
    ap.add_argument("--cache", default="drape-checkin-fit", help="folder for the rendered takes")
    a = ap.parse_args()
    p = Protocol(seed=a.seed, prior_wearers=6, prior_cue_people=6, prior_reps=1, checkin_reps=3)
    takes = protocol_takes(p, Path(a.cache), None, roles=("fit0", "fit1", "checkin"))
    own = [takes[(a.wearer, r)] for r in ("fit0", "fit1", "checkin")]
    minutes = sum(r.freq_hz.shape[0] / r.rate_hz for r in own) / 60.0
    wall, cpu = time.perf_counter(), time.process_time()
    model = fit_model("minirocket", own, **prior_options(p, takes))
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0   # kB on Linux
    s = model.summary
    print(f"check-in fit, seed {a.seed} wearer {a.wearer}: {minutes:.1f} min of the wearer's takes + 6 simulated people; "
          f"{s['cases']} windows, {s.get('hard_negatives', 0)} mined")
    print(f"  wall {wall:.1f} s, CPU {cpu:.1f} s, peak RSS {peak_mb:.0f} MB, transform "
          f"{'numba' if compiled_kernels() else 'numpy'}, Python {platform.python_version()}")
    print(f"  ridge alpha {s['ridge_alpha']:.4g}, held-out window accuracy {s['cross_validated_window_accuracy']}, "
          f"calibration error {s['calibration_error']}, temperature {model.temperature:.6g}")
    print("  held-out recall by class: " + json.dumps({k: v["recall"] for k, v in s["held_out_by_class"].items()}))


if __name__ == "__main__":
    main()
