"""The daemon's live loop: at each wake it takes every block that has arrived, a garment's
blocks go through its pipeline as one, nothing is lost on the way (or, past the queue's
bound, each lost sample is counted), and the events are those of a replay of the stream."""

import threading
import time
from types import SimpleNamespace

import numpy as np
import pytest

from bridge.evaluation.simulated import train_simulated
from bridge.garment import GESTURES, Jacket, training_script
from bridge.service import Pipeline, replay_events
from bridge.service.daemon import Garment, Handoff, Reader, Service
from bridge.sources import Recording
from bridge.sources.base import Block, Source
from bridge.sources.health import Watchdog


@pytest.fixture(scope="module")
def model():
    # small on purpose: the tests compare blockings, not accuracy
    return train_simulated(seed=4, wearer=1, repetitions=3, sessions=1, null_s=30.0)


def take(seed: int):
    """Our demo scenario: a simulated dancer stands still, then performs each gesture once."""
    jacket = Jacket(seed=seed, wearer=1, session=2)
    return jacket.perform([("standing", 3.0)] + training_script(np.random.default_rng(seed), 1))


class OneSampleBlocks(Source):
    """Hands out a stream one sample per read, as fast as it is asked, in bursts of
    ``burst`` reads; between bursts it waits until ``queue`` is empty (so a burst never meets
    a full queue), then ends. ``burst`` None: every read at once (the loop not yet running)."""

    def __init__(self, freq_hz, rate_hz, names, burst=None, queue=None, seed=0):
        self.f, self.rate_hz, self.channel_names = freq_hz, rate_hz, tuple(names)
        self.i, self.left = 0, 0
        self.burst, self.queue, self.rng = burst, queue, np.random.default_rng(seed)

    def read(self):
        if self.burst is not None and self.left == 0:
            deadline = time.monotonic() + 30
            while self.queue.qsize() and time.monotonic() < deadline:
                time.sleep(0.001)
            self.left = int(self.rng.integers(1, self.burst + 1))
        self.left -= 1
        b = Block(np.array([self.i / self.rate_hz]), self.f[self.i:self.i + 1], time.monotonic())
        self.i += 1
        self.ended = self.i >= len(self.f)
        return b


def service_with(model, streams, burst=None):
    """A Service whose garments read ``streams`` (name → frequencies) through real Readers and
    the service's own queue; events are collected per garment, feeds counted."""
    config = SimpleNamespace(garments=[None] * len(streams), status_to=(), hold_still_s=1.0, detect_shift=True,
                             levels_hz=20.0)
    seen = {name: [] for name in streams}
    service = Service(config, open_fn=None, on_event=lambda name, e, lat: seen[name].append((e.t_s, e.gesture, e.kind)))
    feeds = {name: 0 for name in streams}
    for i, (name, f) in enumerate(streams.items()):
        pipe = Pipeline(model, None, name, settle=service.settling())
        feed = pipe.feed

        def counted(block, early=None, name=name, feed=feed):
            feeds[name] += 1
            return feed(block, early)

        pipe.feed = counted
        g = Garment(name, SimpleNamespace(), i, model=model, pipeline=pipe, watchdog=Watchdog(30.0))
        g.source = OneSampleBlocks(f, model.rate_hz, model.channel_names, burst, service.q, seed=i)
        g.reader = Reader(i, g.source, service.q)
        service.garments.append(g)
        service.sync_hold(g)
    return service, seen, feeds


def serve_until_fed(service, totals: dict, timeout_s: float = 120.0) -> None:
    loop = threading.Thread(target=service.serve, daemon=True)
    loop.start()
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if all(g.pipeline.samples + g.pipeline.skipped >= totals[g.name] for g in service.garments):
            break
        time.sleep(0.01)
    service.stop.set("test done")
    loop.join(30)
    assert not loop.is_alive()


def test_blocks_waiting_when_the_loop_wakes_go_through_the_pipeline_as_one(model):
    # two garments' readers each put 200 one-sample blocks before the loop runs (a burst):
    # the loop takes them all at its first wake and feeds each garment's pipeline once
    streams = {"lead": take(5).freq_hz[:200], "chorus": take(6).freq_hz[:200]}
    service, seen, feeds = service_with(model, streams)
    for g in service.garments:
        g.reader.start()
    for g in service.garments:
        g.reader.join(20)
    assert service.q.qsize() == 400
    serve_until_fed(service, {n: 200 for n in streams})
    for g in service.garments:
        assert g.reader.dropped == 0 and g.pipeline.samples + g.pipeline.skipped == 200
        # the same samples fed one by one decide the same (here: a calibration, no gesture yet)
        one_by_one = Pipeline(model, None, g.name, settle=service.settling())
        events = sum((one_by_one.feed(streams[g.name][i:i + 1]) for i in range(200)), [])
        assert seen[g.name] == [(e.t_s, e.gesture, e.kind) for e in events]
        assert one_by_one.samples == g.pipeline.samples
    assert feeds == {"lead": 1, "chorus": 1}


def test_bursts_through_the_running_loop_decide_what_the_replay_decides(model):
    # one-sample blocks in bursts of up to 150 while the loop runs: each wake joins what has
    # come of each garment; every sample arrives, and the events equal a replay of the take
    takes = {"lead": take(5), "chorus": take(6)}
    streams = {n: t.freq_hz for n, t in takes.items()}
    service, seen, feeds = service_with(model, streams, burst=150)
    for g in service.garments:
        g.reader.start()
    serve_until_fed(service, {n: len(f) for n, f in streams.items()})
    for g in service.garments:
        n = len(streams[g.name])
        assert g.reader.dropped == 0 and g.pipeline.samples + g.pipeline.skipped == n
        replayed = replay_events(Recording.from_take(takes[g.name], GESTURES), model, settle=service.settling())
        live = seen[g.name] + [(e.t_s, e.gesture, e.kind) for e in g.pipeline.stop()]
        assert any(kind == "gesture" for _, _, kind in live)
        assert live == [(e.t_s, e.gesture, e.kind) for e in replayed]
        assert feeds[g.name] < n  # blocks were joined at least sometimes


def test_a_reader_past_the_handoff_bound_drops_blocks_and_counts_their_samples():
    blocks = [np.full((10, 2), 1000.0 + i) for i in range(20)]

    class Twenty(Source):
        rate_hz, channel_names, i = 100.0, ("a", "b"), 0

        def read(self):
            self.i += 1
            self.ended = self.i >= len(blocks)
            return Block(np.arange(10) / 100.0, blocks[self.i - 1], time.monotonic())

    q = Handoff(maxsize=3)
    r = Reader(0, Twenty(), q)
    r.start()
    r.join(20)
    assert not r.is_alive() and r.error == ""
    kept = q.take_all()
    assert len(kept) == 3 and r.dropped == 17 * 10  # the oldest three wait, the rest are counted
    assert [b.freq_hz[0, 0] for _, b in kept] == [1000.0, 1001.0, 1002.0]
    assert q.take_all() == []


def test_delivery_times_are_written_as_plain_arrays_and_read_back(tmp_path):
    from bridge.decisions import Event
    from bridge.service.daemon import DeliveryTimes, Latency

    times = DeliveryTimes(limit=2)
    control = Event(0.01, "reach", "control", 1.0, 0.0, "lead", 0.5)
    cue = Event(0.02, "bow", "gesture", 0.9, 0.0, "lead", 0.0)
    times.record(1, [control, control], Latency(10.0, 10.0001, 10.0002), 5e-5)
    times.record(0, [cue], Latency(11.0, 11.001, 11.002))
    times.record(0, [cue], Latency(12.0, 12.0, 12.0))  # past the limit: counted, not kept
    times.save(tmp_path / "t.npz")
    with np.load(tmp_path / "t.npz", allow_pickle=False) as z:
        assert z["garment"].tolist() == [1.0, 0.0] and z["controls"].tolist() == [2.0, 0.0]
        assert z["others"].tolist() == [0.0, 1.0] and z["sent_s"].tolist() == [10.0002, 11.002]
        assert z["loop_cpu_s"][0] == 5e-5 and np.isnan(z["loop_cpu_s"][1]) and int(z["beyond"]) == 1
