"""The fit a performer waits for before a show: two fit sessions and a check-in take of one
simulated wearer, with the six simulated people `drape fit` adds on the built-in jacket,
fitted as `drape bench --spotting --spotting-checkin 3` fits it (the default classifier,
minirocket with out-of-fold hard-negative mining).

    python benchmarks/checkin_fit.py [--seed 6] [--wearer 0] [--cache DIR] [--checkin-s 180] [--stages]

Renders the takes into --cache once (several minutes the first time), then times the fit
alone: wall and CPU seconds, peak resident memory of the process, the transform engine
(numba with the `accelerate` extra, else numpy) and the fit's own summary figures, so two
runs can be checked to give the same model. With --stages, also where the memory goes:
the resident size sampled every 10 ms while each stage of the fit runs (windows cut,
transform fitted, features computed, ridge and its held-out folds, mining), a row per stage
with its calls, seconds, the resident size it started at and the most it reached. Figures
only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import platform
import resource
import threading
import time
from pathlib import Path

from bridge.evaluation.spotting import Protocol, fit_model, prior_options, protocol_takes
from bridge.recognition.minirocket import compiled_kernels


def resident_mb() -> float:
    """This process's resident size now, MB (Linux: /proc/self/statm)."""
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20


class StageMemory:
    """Samples the resident size on a thread and notes when each wrapped function runs."""

    def __init__(self, period_s: float = 0.01):
        self.period_s, self.samples, self.calls = period_s, [], []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def _sample(self) -> None:
        while not self._stop.is_set():
            self.samples.append((time.perf_counter(), resident_mb()))
            time.sleep(self.period_s)

    def wrap(self, module, name: str, stage: str) -> None:
        inner = getattr(module, name)

        def timed(*args, **kw):
            start, at = time.perf_counter(), resident_mb()
            try:
                return inner(*args, **kw)
            finally:
                self.calls.append((stage, start, time.perf_counter(), at))
        setattr(module, name, timed)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *_exc) -> None:
        self._stop.set()
        self._thread.join()

    def table(self) -> list[str]:
        rows, order = {}, []
        for stage, a, b, at in self.calls:
            peak = max([mb for t, mb in self.samples if a <= t <= b] + [at])
            if stage not in rows:
                order.append(stage)
                rows[stage] = [0, 0.0, at, peak]
            r = rows[stage]
            r[0], r[1], r[3] = r[0] + 1, r[1] + (b - a), max(r[3], peak)
        lines = ["| stage | calls | seconds | resident at its first start, MB | most while it ran, MB |",
                 "|---|---|---|---|---|"]
        lines += [f"| {k} | {rows[k][0]} | {rows[k][1]:.1f} | {rows[k][2]:.0f} | {rows[k][3]:.0f} |" for k in order]
        return lines


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seed", type=int, default=6, help="the troupe's seed (default 6)")
    ap.add_argument("--wearer", type=int, default=0, help="which wearer of the troupe (default 0)")
    ap.add_argument("--cache", default="drape-checkin-fit", help="folder for the rendered takes")
    ap.add_argument("--checkin-s", type=float, default=Protocol.checkin_null_s,
                    help=f"ordinary movement in the check-in take, s (default {Protocol.checkin_null_s:g}, as drape capture --check-in)")
    ap.add_argument("--stages", action="store_true", help="also the resident memory of each stage of the fit")
    a = ap.parse_args()
    p = Protocol(seed=a.seed, prior_wearers=6, prior_cue_people=6, prior_reps=1, checkin_reps=3,
                 checkin_null_s=a.checkin_s)
    takes = protocol_takes(p, Path(a.cache), None, roles=("fit0", "fit1", "checkin"))
    own = [takes[(a.wearer, r)] for r in ("fit0", "fit1", "checkin")]
    minutes = sum(r.freq_hz.shape[0] / r.rate_hz for r in own) / 60.0
    stages = StageMemory() if a.stages else None
    if stages:
        from bridge.recognition import classifiers as c
        for name, stage in (("recording_windows", "windows cut"), ("fit_minirocket", "transform fitted"),
                            ("minirocket_transform", "features"), ("fit_ridge_heldout", "ridge, held-out folds"),
                            ("hard_negatives", "mining (features inside)")):
            stages.wrap(c, name, stage)
        print(f"before the fit: resident {resident_mb():.0f} MB (the takes loaded)")
    with stages or contextlib.nullcontext():
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
    if stages:
        print("\n".join(stages.table()))


if __name__ == "__main__":
    main()
