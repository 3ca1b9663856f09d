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
    from ..recognition.classifiers import RECORDING_DEFAULTS
    defaults = {"fourier_features": 2000} if name == "linear" else {
        k: v for k, v in RECORDING_DEFAULTS.get(name, {}).items() if k not in ("cases_per_class", "null_cases")}
    options = {**defaults, **options}
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
    times, cpu = [], []
    for h in range(hops):
        a = spec.length + h * spec.hop
        t0, c0 = time.perf_counter(), time.process_time()
        ends, _ = rec.push(level[a:a + spec.hop], motion[a:a + spec.hop])
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        assert len(ends) == 1
    ms = np.array(times) * 1e3
    cpu_ms = np.array(cpu) * 1e3
    out = {"classifier": name, "channels": n_channels, "fit_s": round(fit_s, 3),
           "hop_median_ms": round(float(np.median(ms)), 3), "hop_p99_ms": round(float(np.percentile(ms, 99)), 3),
           "cpu_median_ms": round(float(np.median(cpu_ms)), 3), "cpu_mean_ms": round(float(cpu_ms.mean()), 3),
           "hops": hops}
    if name == "dtw":
        out["dtw_computed_fraction"] = round(rec.computed / max(1, rec.offered), 3)
    return out


def bench_continuous(n_channels: int = 4, rate_hz: float = 100.0, samples: int = 3000, seed: int = 0) -> dict:
    """Added latency of a continuous control: from a sample handed to the pipeline to its
    OSC datagram built, one sample per block (the live case), with the classifier running
    on its hops alongside. Jitter is the standard deviation and p99 − median of that time.
    Wall-clock figures include time the process was not scheduled (a loaded machine); the
    ``cpu_`` figures are this thread's CPU time for the same span, which excludes it.

    Returns {"samples", "median_ms", "p99_ms", "max_ms", "jitter_std_ms", "jitter_p99_ms",
    "cpu_median_ms", "cpu_p99_ms"}.
    """
    from ..mapping import parse_mapping
    from ..outputs.osc import encode_osc
    from ..service import Pipeline

    rng = np.random.default_rng(seed)
    spec = WindowSpec(rate_hz, 2.0, 0.05)
    names = tuple(f"ch{i}" for i in range(n_channels))
    X = _cases(rng, 30, n_channels, spec.length)
    y = ["a"] * 10 + ["b"] * 10 + ["null"] * 10
    model = fit_cases("linear", X, y, ["a", "b"], rate_hz=rate_hz, windows=spec, conditioning=BandPass(rate_hz),
                      channel_names=names, stream="level")
    mapping = parse_mapping(
        '[destinations.d]\nosc = "127.0.0.1:9"\n[[control]]\nname = "reach"\n'
        f'mix = {{ {names[0]} = 1.0, {names[1]} = 0.5 }}\nrelaxed = 0.0\nclosest = 0.05\n'
        'min_change = 0.0\nmax_rate_hz = 1000\nbeta = 0.5\nto = "d"\naddress = "/reach"\n',
        "bench", model.classes, model.kinds, names)
    pipe = Pipeline(model, mapping)
    freq = 2e5 / np.sqrt(1 + np.abs(rng.normal(size=(samples, n_channels)).cumsum(axis=0) * 1e-3))
    done: list[float] = []

    def send(events):
        for d in pipe.dispatches(events):
            encode_osc(d.message)
        done.append((time.perf_counter(), time.thread_time()))

    times, cpu = [], []
    for i in range(samples):
        done.clear()
        t0, c0 = time.perf_counter(), time.thread_time()
        pipe.feed(freq[i:i + 1], early=send)
        if done:
            times.append(done[0][0] - t0)
            cpu.append(done[0][1] - c0)
    ms = np.array(times[int(spec.length):]) * 1e3  # after the first window (start-up) is full
    cpu_ms = np.array(cpu[int(spec.length):]) * 1e3
    med = float(np.median(ms))
    return {"samples": int(ms.size), "median_ms": round(med, 3), "p99_ms": round(float(np.percentile(ms, 99)), 3),
            "max_ms": round(float(ms.max()), 3), "jitter_std_ms": round(float(ms.std()), 3),
            "jitter_p99_ms": round(float(np.percentile(ms, 99)) - med, 3),
            "cpu_median_ms": round(float(np.median(cpu_ms)), 3), "cpu_p99_ms": round(float(np.percentile(cpu_ms, 99)), 3)}


def _troupe_takes(minutes: float, seed: int = 7) -> list:
    """Simulated training takes (one wearer, several sessions) adding up to about ``minutes``."""
    from ..garment import GESTURES, Jacket, training_script
    from ..sources import Recording
    takes, total, session = [], 0.0, 0
    while total < minutes * 60.0:
        rng = np.random.default_rng([seed, session])
        script = training_script(rng, 6) + [(a, 30.0) for a in ("standing", "walking", "fidgeting")]
        rec = Recording.from_take(Jacket(seed=seed, wearer=0, session=session).perform(script), GESTURES)
        takes.append(rec)
        total += rec.freq_hz.shape[0] / rec.rate_hz
        session += 1
    return takes


def bench_fit(name: str, minutes: float = 30.0) -> dict:
    """Fit time of ``name`` on about ``minutes`` of simulated 4-channel takes at 100 Hz (hop 0.1 s)."""
    from ..garment import GESTURES
    from ..recognition.classifiers import fit_recordings
    takes = _troupe_takes(minutes)
    t0 = time.perf_counter()
    fit_recordings(name, takes, dict(GESTURES))
    return {"classifier": name, "data_minutes": round(sum(t.freq_hz.shape[0] / t.rate_hz for t in takes) / 60.0, 1),
            "fit_s": round(time.perf_counter() - t0, 2)}


def bench_replay(name: str, duration_s: float = 300.0, hop_s: float = 0.05) -> dict:
    """Replay speed through the live pipeline, as a multiple of real time.

    A model is fitted on two simulated training takes (2 s window, ``hop_s`` hop), then a
    ``duration_s`` random performance of a new session is replayed in 5 s blocks and in
    0.1 s blocks (as a live source delivers them).
    """
    from ..garment import GESTURES, Jacket, random_script
    from ..recognition.classifiers import fit_recordings
    from ..recognition.training import TrainingSettings
    from ..service import replay_events
    from ..sources import Recording
    takes = _troupe_takes(5.0)[:2]
    model = fit_recordings(name, takes, dict(GESTURES), TrainingSettings(hop_s=hop_s), estimate=False) \
        if name != "linear" else fit_recordings(name, takes, dict(GESTURES), TrainingSettings(hop_s=hop_s))
    rec = Recording.from_take(Jacket(seed=7, wearer=0, session=9).perform(
        random_script(np.random.default_rng(9), duration_s)), GESTURES)
    real_s = rec.freq_hz.shape[0] / rec.rate_hz
    out = {"classifier": name, "replayed_s": round(real_s, 1), "hop_s": hop_s}
    for label, block_s in (("block_5s", 5.0), ("block_100ms", 0.1)):
        t0, c0 = time.perf_counter(), time.process_time()
        replay_events(rec, model, None, block_s)
        out[f"x_real_time_{label}"] = round(real_s / (time.perf_counter() - t0), 1)
        out[f"x_cpu_{label}"] = round(real_s / max(time.process_time() - c0, 1e-9), 1)
    return out


# Targets on a laptop-class machine (the issue's): per-hop median, ms, and replay in 5 s
# blocks, multiple of real time. Wall-clock figures count time the process waited for a
# busy CPU; the CPU-time figures do not (the process's own work, all threads).
HOP_TARGET_MS = {"linear": 0.2, "minirocket": 3.0}
REPLAY_TARGET_X = {"linear": 2000.0, "minirocket": 100.0}


def verdict(value: float, target: float | None, below: bool) -> str:
    """"target ≤ 0.2 ms: met" style text for a figure, or "" when there is no target."""
    if target is None:
        return ""
    ok = value <= target if below else value >= target
    return f"target {'≤' if below else '≥'} {target:g}{' ms' if below else '×'}: {'met' if ok else 'NOT met'}"


def _verdicts(wall: float, cpu: float, target: float | None, below: bool) -> str:
    """The verdict by wall clock and by CPU time, as a suffix for a printed line."""
    v = verdict(wall, target, below)
    return f"  {v} (by CPU time: {verdict(cpu, target, below).split(': ')[1]})" if v else ""


def run_all(channels=(4, 8), hops: int = 200, replay_s: float = 300.0, fit_minutes: float = 30.0,
            classifiers=("linear", "minirocket", "dtw"), print_fn=print) -> list[dict]:
    """Every classifier at each channel count: 2 s window, 100 Hz, 50 ms hop. Prints a table.

    Then replay speed through the pipeline and fit time on ``fit_minutes`` of data.
    Targets on a laptop-class machine: linear ≤ 0.2 ms per hop and ≥ 2000× real time;
    minirocket ≤ 3 ms per hop and ≥ 100× real time.
    """
    rows = []
    if print_fn:
        import os
        try:
            load = open("/proc/loadavg").read().split()[:3]
        except OSError:
            load = ["?"]
        print_fn(f"load average {' '.join(load)} on {os.cpu_count()} CPUs; BLAS threads "
                 f"{os.environ.get('OPENBLAS_NUM_THREADS', 'default')} (targets are for a quiet machine)", flush=True)
    for n_ch in channels:
        for name in classifiers:
            rows.append(bench_classifier(name, n_channels=n_ch, hops=hops))
            if print_fn:
                r = rows[-1]
                extra = f"  compared {r['dtw_computed_fraction']:.0%} of templates" if "dtw_computed_fraction" in r else ""
                print_fn(f"{r['classifier']:>10}  {r['channels']} ch  hop median {r['hop_median_ms']:.3f} ms  "
                         f"p99 {r['hop_p99_ms']:.3f} ms  (CPU time median {r['cpu_median_ms']:.3f} ms){extra}"
                         + _verdicts(r["hop_median_ms"], r["cpu_median_ms"], HOP_TARGET_MS.get(name), True),
                         flush=True)
    for name in classifiers if replay_s else ():
        rows.append(bench_replay(name, replay_s))
        if print_fn:
            r = rows[-1]
            print_fn(f"{name:>10}  replay of {r['replayed_s']:.0f} s (hop {r['hop_s']} s): "
                     f"{r['x_real_time_block_5s']:.0f}× real time in 5 s blocks (by CPU time {r['x_cpu_block_5s']:.0f}×), "
                     f"{r['x_real_time_block_100ms']:.0f}× in 0.1 s blocks (CPU {r['x_cpu_block_100ms']:.0f}×)"
                     + _verdicts(r["x_real_time_block_5s"], r["x_cpu_block_5s"], REPLAY_TARGET_X.get(name), False),
                     flush=True)
    for name in classifiers if fit_minutes else ():
        rows.append(bench_fit(name, fit_minutes))
        if print_fn:
            r = rows[-1]
            print_fn(f"{name:>10}  fit on {r['data_minutes']:.0f} min of 4-channel data: {r['fit_s']:.1f} s", flush=True)
    c = bench_continuous()
    rows.append({"classifier": "continuous control", **c})
    if print_fn:  # target: ≤ 2 ms added, ≤ 1 ms jitter
        print_fn(f"continuous control, sample → OSC datagram: median {c['median_ms']:.3f} ms, p99 {c['p99_ms']:.3f} ms, "
                 f"max {c['max_ms']:.3f} ms, jitter (std) {c['jitter_std_ms']:.3f} ms, p99 − median {c['jitter_p99_ms']:.3f} ms; "
                 f"CPU time median {c['cpu_median_ms']:.3f} ms, p99 {c['cpu_p99_ms']:.3f} ms")
    return rows


if __name__ == "__main__":
    run_all()


def bench_live(seconds: float = 30.0, print_fn=print) -> dict:
    """End to end through a real pseudo-terminal: the simulated jacket written as text lines in
    real time → `drape start` (a separate process) → OSC to a loopback python-osc receiver.

    Reports the daemon's own arrival → send figure per event (its processing overhead, ms),
    the receiver's view (OSC datagram received minus the write time of the newest line before
    it: an upper bound on end to end, ms) and the daemon's memory (VmHWM, MB, Linux).
    Targets on a laptop-class machine: overhead p99 ≤ 5 ms; memory ≤ 150 MB for 4 garments.
    """
    import os
    import re
    import subprocess
    import sys
    import tempfile
    import threading
    from pathlib import Path

    from pythonosc.dispatcher import Dispatcher
    from pythonosc.osc_server import ThreadingOSCUDPServer

    from ..cli import train_simulated
    from ..examples_data import example_text
    from ..sources import format_line
    from ..sources.simulated import SimulatedSource

    got: list[float] = []
    disp = Dispatcher()
    disp.set_default_handler(lambda *_: got.append(time.monotonic()))
    server = ThreadingOSCUDPServer(("127.0.0.1", 0), disp)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        train_simulated(1, 0).save(tmp / "jacket.npz")
        mapping = example_text("demo.toml").replace("127.0.0.1:9000", f"127.0.0.1:{server.server_address[1]}")
        (tmp / "map.toml").write_text(mapping)
        master, slave = os.openpty()
        (tmp / "live.toml").write_text(f'[garment]\nname = "bench"\nport = "{os.ttyname(slave)}"\n'
                                       f'model = "jacket.npz"\nmapping = "map.toml"\n')
        proc = subprocess.Popen([sys.executable, "-m", "bridge", "start", "--config", str(tmp / "live.toml")],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            proc.stderr.readline()  # the port is open from here on
            src = SimulatedSource(seed=2, wearer=0, session=2, realtime=True, block_s=0.01, duration_s=seconds)
            writes: list[float] = []
            while not src.ended:
                block = src.read()
                for v in block.freq_hz:
                    os.write(master, format_line(v))
                    writes.append(time.monotonic())
            time.sleep(0.5)
            try:
                status = Path(f"/proc/{proc.pid}/status").read_text()
                hwm = float(re.search(r"VmHWM:\s+(\d+)", status).group(1)) / 1024
            except (OSError, AttributeError):
                hwm = float("nan")
            proc.terminate()
            out, _ = proc.communicate(timeout=20)
        finally:
            proc.kill()
            os.close(master)
            os.close(slave)
            server.shutdown()
            server.server_close()
    overhead = np.array([float(m) for m in re.findall(r"latency\s+([0-9.]+) ms", out)])
    w = np.array(writes)
    received = np.array([g - w[np.searchsorted(w, g) - 1] for g in got if np.searchsorted(w, g) > 0]) * 1e3
    result = {"seconds": seconds, "events": int(overhead.size), "datagrams": len(got),
              "overhead_median_ms": round(float(np.median(overhead)), 3) if overhead.size else None,
              "overhead_p99_ms": round(float(np.percentile(overhead, 99)), 3) if overhead.size else None,
              "end_to_end_median_ms": round(float(np.median(received)), 3) if received.size else None,
              "end_to_end_p99_ms": round(float(np.percentile(received, 99)), 3) if received.size else None,
              "memory_peak_mb": round(hwm, 1)}
    if print_fn:
        print_fn(f"live through a pty, {seconds:g} s, {result['events']} events, {result['datagrams']} OSC datagrams: "
                 f"arrival → send median {result['overhead_median_ms']} ms, p99 {result['overhead_p99_ms']} ms; "
                 f"line written → OSC received median {result['end_to_end_median_ms']} ms, "
                 f"p99 {result['end_to_end_p99_ms']} ms; daemon memory peak {result['memory_peak_mb']} MB")
    return result
