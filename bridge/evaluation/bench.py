"""Benchmarks: fit time and per-hop inference time of each classifier, printed as figures.

The ``drape bench`` verb calls ``run_all``; each function returns its figures as a dict so
callers can print or store them. Inputs are random walks, not garment data: the cost of
a hop does not depend on what the stream holds (DTW pruning aside, noted in its figures).
"""

from __future__ import annotations

import time

import numpy as np

from ..recognition.classifiers import fit_cases, make_recogniser
from ..recognition.windows import WindowSpec
from ..signal import BandPass


def _cases(rng, n_cases: int, n_in: int, length: int) -> np.ndarray:
    return rng.normal(size=(n_cases, n_in, length)).cumsum(axis=2) * 0.01


def bench_classifier(name: str, n_channels: int = 4, rate_hz: float = 100.0, window_s: float = 2.0,
                     hop_s: float = 0.05, n_classes: int = 5, per_class: int = 5, hops: int = 200,
                     seed: int = 0, **options) -> dict:
    """Fit ``name`` on random cases and time ``push`` of one hop at a time.

    Returns {"classifier", "channels", "fit_s", "hop_median_ms", "hop_p99_ms", "hops"} (plus
    "dtw_computed_fraction" for dtw: templates compared / templates offered).
    """
    rng = np.random.default_rng(seed)
    spec = WindowSpec(rate_hz, window_s, hop_s)
    stream = options.pop("stream", "level" if name == "linear" else "both")
    n_in = 2 * n_channels if stream == "both" else n_channels
    labels = [f"g{i}" for i in range(n_classes)]
    X = _cases(rng, n_classes * per_class + per_class, n_in, spec.length)
    y = np.array(sum([[c] * per_class for c in labels], []) + ["null"] * per_class)
    t0 = time.perf_counter()
    model = fit_cases(name, X, y, labels, rate_hz=rate_hz, windows=spec, conditioning=BandPass(rate_hz),
                      channel_names=tuple(f"ch{i}" for i in range(n_channels)), stream=stream, **options)
    fit_s = time.perf_counter() - t0
    rec = make_recogniser(model)
    n_total = spec.length + hops * spec.hop
    level = rng.normal(size=(n_total, n_channels)).cumsum(axis=0) * 0.01
    motion = rng.normal(size=(n_total, n_channels)) * 0.01
    rec.push(level[:spec.length], motion[:spec.length])          # first window: start-up, not timed
    times = []
    for h in range(hops):
        a = spec.length + h * spec.hop
        t0 = time.perf_counter()
        ends, _ = rec.push(level[a:a + spec.hop], motion[a:a + spec.hop])
        times.append(time.perf_counter() - t0)
        assert len(ends) == 1
    ms = np.array(times) * 1e3
    out = {"classifier": name, "channels": n_channels, "fit_s": round(fit_s, 3),
           "hop_median_ms": round(float(np.median(ms)), 3), "hop_p99_ms": round(float(np.percentile(ms, 99)), 3),
           "hops": hops}
    if name == "dtw":
        out["dtw_computed_fraction"] = round(rec.computed / max(1, rec.offered), 3)
    return out


def run_all(channels=(4, 8), hops: int = 200, print_fn=print) -> list[dict]:
    """Every classifier at each channel count: 2 s window, 100 Hz, 50 ms hop. Prints a table."""
    rows = []
    for n_ch in channels:
        for name, opts in (("linear", {}), ("minirocket", {}), ("dtw", {"band": 0.1})):
            rows.append(bench_classifier(name, n_channels=n_ch, hops=hops, **opts))
            if print_fn:
                r = rows[-1]
                extra = f"  compared {r['dtw_computed_fraction']:.0%} of templates" if "dtw_computed_fraction" in r else ""
                print_fn(f"{r['classifier']:>10}  {r['channels']} ch  fit {r['fit_s']:.2f} s  "
                         f"hop median {r['hop_median_ms']:.2f} ms  p99 {r['hop_p99_ms']:.2f} ms{extra}")
    return rows


if __name__ == "__main__":
    run_all()
