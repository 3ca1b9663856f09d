"""Soak: hours of simulated performance through the live loop, faster than real time.

``soak(hours)`` streams the simulated jacket (gestures, postures and long stretches of
ordinary movement) in live-sized blocks of 10–50 ms into ``bridge.service.run`` — the live
loop of ``drape start`` — with the same ``Pipeline``, mapping router and ``QueuedOutput``
worker the daemon uses, sending OSC over UDP to a receiver on loopback. Every block is also
written to a take file as it passes (``RecordingWriter``), the way a capture would. At the
end the take is replayed offline (``bridge.service.replay_events``, in 100 ms blocks) and
the two event lists are compared: time, gesture and kind of every event.

The performance is generated as it is consumed, one ``chunk_s`` script at a time, so memory
holds one chunk and not the whole soak. Memory is read from /proc/self/status (VmRSS) once
the warm-up is over and at the end; ``tracemalloc`` (optional: it slows allocation) adds
the Python heap's growth over the same span.
"""

from __future__ import annotations

import os
import socket
import tempfile
import threading
import time
import tracemalloc
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..sources.base import Block, Source

# A performance: short idles between gestures, and now and then a long stretch of nothing
# in particular (the dancer walks, stands through a scene, fidgets while others speak).
LONG_NULL_S = (30.0, 120.0)
LONG_NULL_EVERY = 4          # one chunk in this many is a long null stretch


def rss_mb() -> float:
    """Resident set size of this process (VmRSS in /proc/self/status), MB; NaN elsewhere."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return float("nan")


class SoakSource(Source):
    """The simulated jacket, rendered a chunk at a time and handed out in blocks of random
    length (``block_s`` range, s) as a serial source would; ``duration_s`` of stream in all.

    The jacket is the small soak model's wearer (seed 4, wearer 1) in a session it was not
    trained on; ``seed`` drives the script and the block lengths.

    Each block is written to ``writer`` (a ``RecordingWriter``) before it is returned, with
    stream time t = sample index / rate. ``on_block(samples_so_far)`` is called per block
    (the soak reads memory from it). Counts of performed gestures are kept, not the intervals.
    """

    def __init__(self, duration_s: float, seed: int = 0, jacket_seed: int = 4, wearer: int = 1, session: int = 2,
                 block_s=(0.01, 0.05), chunk_s: float = 60.0, writer=None, on_block=None, gestures=None):
        from ..garment import GESTURES, Jacket
        self.jacket = Jacket(seed=jacket_seed, wearer=wearer, session=session)
        self.rng = np.random.default_rng([seed, jacket_seed, wearer, session, 23])
        self.rate_hz = self.jacket.rate_hz
        self.channel_names = tuple(self.jacket.channel_names)
        self.gestures = list(gestures) if gestures else list(GESTURES)
        self.total_n = int(round(duration_s * self.rate_hz))
        self.block_n = (max(1, int(round(block_s[0] * self.rate_hz))), max(1, int(round(block_s[1] * self.rate_hz))))
        self.chunk_s = chunk_s
        self.writer, self.on_block = writer, on_block
        self.emitted = 0
        self.blocks = 0
        self.performed = Counter()
        self._chunks = 0
        self._f = np.empty((0, len(self.channel_names)))

    def _render(self) -> None:
        from ..garment import NULL_ACTIVITIES, random_script
        self._chunks += 1
        if self._chunks % LONG_NULL_EVERY == 0:
            script = [(NULL_ACTIVITIES[int(self.rng.integers(len(NULL_ACTIVITIES)))],
                       float(self.rng.uniform(*LONG_NULL_S)))]
        else:
            script = random_script(self.rng, self.chunk_s, self.gestures)
        take = self.jacket.perform(script)
        for iv in take.intervals:
            self.performed[iv.label] += 1
        self._f = np.concatenate([self._f, take.freq_hz])

    def read(self) -> Block:
        n = min(int(self.rng.integers(self.block_n[0], self.block_n[1] + 1)), self.total_n - self.emitted)
        while self._f.shape[0] < n:
            self._render()
        f, self._f = self._f[:n], self._f[n:]
        t = (self.emitted + np.arange(n)) / self.rate_hz
        if self.writer is not None and n:
            self.writer.samples(t, f)
        self.emitted += n
        self.blocks += 1
        self.ended = self.emitted >= self.total_n
        if self.on_block is not None:
            self.on_block(self.emitted)
        return Block(t, f, time.monotonic())


class Receiver(threading.Thread):
    """Counts UDP datagrams arriving on a loopback port (the show computer, for the soak)."""

    def __init__(self):
        super().__init__(daemon=True, name="soak-receiver")
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 1 << 20)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.settimeout(0.1)
        self.port = self.sock.getsockname()[1]
        self.count = 0
        self.halt = threading.Event()

    def run(self) -> None:
        while not self.halt.is_set():
            try:
                self.sock.recv(65536)
                self.count += 1
            except socket.timeout:
                continue
            except OSError:
                break

    def close(self) -> None:
        self.halt.set()
        self.join(timeout=2.0)
        self.sock.close()


def event_key(e) -> tuple:
    """What must agree between live and replay: stream time (to 0.1 ms), gesture, kind."""
    return (round(float(e.t_s), 4), e.gesture, e.kind)


def compare_events(live: list[tuple], replayed: list[tuple]) -> dict:
    """Matched / only-live / only-replay counts of two event-key lists (multisets: a doubled
    event shows as one only on the side that has it twice)."""
    a, b = Counter(live), Counter(replayed)
    matched = sum((a & b).values())
    return {"live": len(live), "replay": len(replayed), "matched": matched,
            "only_live": sum((a - b).values()), "only_replay": sum((b - a).values()),
            "doubled_live": sum(c - 1 for c in a.values() if c > 1),
            "in_order": live == replayed}


@dataclass
class SoakResult:
    simulated_h: float
    wall_s: float
    blocks: int
    samples: int
    events: int
    controls: int
    performed: int
    rss_warm_mb: float
    rss_end_mb: float
    heap_growth_mb: float | None
    sent: int
    dropped: int
    received: int
    comparison: dict
    take: str
    counts: dict = field(default_factory=dict)

    @property
    def rss_growth_mb(self) -> float:
        return self.rss_end_mb - self.rss_warm_mb

    def lines(self) -> list[str]:
        c = self.comparison
        heap = "" if self.heap_growth_mb is None else f"; Python heap growth (tracemalloc) {self.heap_growth_mb:+.2f} MB"
        return [
            f"simulated {self.simulated_h:.3f} h in {self.wall_s:.1f} s wall ({self.simulated_h * 3600 / max(self.wall_s, 1e-9):.0f}x real time)",
            f"blocks {self.blocks}, samples {self.samples}, gestures performed {self.performed}, "
            f"events {self.events} ({', '.join(f'{k} {v}' for k, v in sorted(self.counts.items()))}), control values {self.controls}",
            f"memory: RSS after warm-up {self.rss_warm_mb:.1f} MB, at the end {self.rss_end_mb:.1f} MB, "
            f"growth {self.rss_growth_mb:+.2f} MB{heap}",
            f"OSC out: sent {self.sent}, dropped {self.dropped}, received on loopback {self.received}",
            f"live vs replay of the captured take ({self.take}): matched {c['matched']}, only live {c['only_live']}, "
            f"only replay {c['only_replay']}, doubled {c['doubled_live']}, same order {c['in_order']}",
        ]


def soak(hours: float, model=None, mapping_path=None, seed: int = 5, block_s=(0.01, 0.05),
         warmup_s: float | None = None, out_dir=None, heap: bool = False, report=print) -> SoakResult:
    """Run ``hours`` of simulated performance through the live loop and compare with replay.

    model: a loaded ``Model`` of simulated wearer 1, jacket seed 4 (None: train a small one,
    a few seconds). mapping_path: an OSC mapping (default mappings/demo.toml); its destinations are
    pointed at a loopback receiver. warmup_s: stream time before the first memory reading
    (default: a tenth of the soak, at least 60 s, at most 10 min). out_dir: where the take
    goes (default a temporary folder, removed afterwards). heap: also trace the Python heap.
    """
    from ..mapping import parse_mapping
    from ..outputs import open_output
    from ..service import Pipeline, StopFlag, replay_events, run
    from ..sources import RecordingWriter, read_recording

    if model is None:
        from .simulated import train_simulated
        report("training a small model on the simulated wearer ...")
        model = train_simulated(seed=4, wearer=1, repetitions=6, sessions=1, null_s=90.0)
    duration_s = hours * 3600.0
    warmup_s = min(600.0, max(60.0, duration_s / 10)) if warmup_s is None else warmup_s
    warmup_s = min(warmup_s, duration_s / 2)
    if mapping_path is None:
        from ..examples_data import example_path
        mapping_path = example_path("demo.toml")
    mapping_path = Path(mapping_path)
    receiver = Receiver()
    receiver.start()
    text = mapping_path.read_text(encoding="utf-8")
    mapping = parse_mapping(_point_osc_at(text, receiver.port), str(mapping_path), model.classes, model.kinds,
                            model.channel_names, base_dir=mapping_path.parent)
    tmp = None
    if out_dir is None:
        tmp = tempfile.TemporaryDirectory(prefix="drape-soak-")
        out_dir = tmp.name
    Path(out_dir).mkdir(parents=True, exist_ok=True)  # --soak-out may name a folder not made yet
    take = Path(out_dir) / "soak-take.csv"
    events_path = Path(out_dir) / "soak-live-events.txt"
    rate = model.rate_hz
    warm = {"rss": None, "heap": None}
    warm_n = int(round(warmup_s * rate))
    progress_every = max(1, int(round(600.0 * rate)))  # a line per 10 min of stream
    next_progress = [progress_every]
    t0 = time.perf_counter()

    def on_block(n: int) -> None:
        if warm["rss"] is None and n >= warm_n:
            warm["rss"] = rss_mb()
            if heap:
                warm["heap"] = tracemalloc.get_traced_memory()[0]
        if n >= next_progress[0]:
            next_progress[0] += progress_every
            report(f"  {n / rate / 3600:.2f} h simulated, {time.perf_counter() - t0:.0f} s wall, RSS {rss_mb():.1f} MB")

    live_n = 0
    counts: Counter = Counter()
    if heap:
        tracemalloc.start()
    outputs = {name: open_output(d) for name, d in mapping.destinations.items()}
    try:
        with RecordingWriter(take, rate, model.channel_names, "simulated", "soak", "built-in", dict(model.kinds)) as w, \
                open(events_path, "w", encoding="utf-8") as ev_fh:
            src = SoakSource(duration_s, seed=seed, block_s=block_s, writer=w, on_block=on_block)
            if src.channel_names != tuple(model.channel_names):
                raise ValueError("the model was not trained on the simulated jacket's channels")

            def on_event(e, _timing) -> None:  # written as they come: the list does not grow in memory
                nonlocal live_n
                if e.kind != "control":
                    live_n += 1
                    counts[e.kind] += 1
                    ev_fh.write(f"{e.t_s!r}\t{e.gesture}\t{e.kind}\n")

            stats = run(src, Pipeline(model, mapping, "soak"), outputs, StopFlag(), on_event=on_event,
                        report=lambda t: None)
        for o in outputs.values():
            o.close()
        rss_end = rss_mb()
        heap_growth = None
        if heap:
            heap_growth = (tracemalloc.get_traced_memory()[0] - (warm["heap"] or 0)) / 2 ** 20
            tracemalloc.stop()
        wall_s = time.perf_counter() - t0
        time.sleep(0.2)  # the last datagrams reach the receiver
        receiver.close()
        sent = sum(o.stats.sent for o in outputs.values())
        dropped = sum(o.stats.dropped for o in outputs.values())

        live = []
        with open(events_path, encoding="utf-8") as fh:
            for line in fh:
                t, g, k = line.rstrip("\n").split("\t")
                live.append((round(float(t), 4), g, k))
        report(f"replaying the captured take ({take.stat().st_size / 2 ** 20:.0f} MB) offline ...")
        replayed = [event_key(e) for e in replay_events(read_recording(take), model, mapping, block_s=0.1)
                    if e.kind != "control"]
        return SoakResult(duration_s / 3600, wall_s, stats.blocks, stats.samples, live_n, stats.controls,
                          sum(src.performed.values()), warm["rss"] if warm["rss"] is not None else rss_end,
                          rss_end, heap_growth, sent, dropped, receiver.count, compare_events(live, replayed),
                          str(take) if tmp is None else take.name, dict(counts))
    finally:
        for o in outputs.values():
            o.close()
        receiver.close()
        if tracemalloc.is_tracing():
            tracemalloc.stop()
        if tmp is not None:
            tmp.cleanup()


def _point_osc_at(text: str, port: int) -> str:
    """The mapping's OSC destinations, sent to the soak's loopback receiver instead."""
    import re
    return re.sub(r'(osc\s*=\s*")[^"]*(")', rf"\g<1>127.0.0.1:{port}\g<2>", text)
