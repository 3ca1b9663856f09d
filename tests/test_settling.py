"""Hold-still calibration and shift re-settling inside ``Pipeline``: sample-exact, so the
events and the captures do not depend on how the stream is cut into blocks, and a replay
of the raw stream with the same ``Settling`` decides what the live chain decided."""

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from bridge.evaluation.simulated import train_simulated
from bridge.garment import GESTURES, Jacket, training_script
from bridge.service import Pipeline, Settling, replay_events
from bridge.service.pipeline import CALIBRATING, SETTLING
from bridge.signal.shift import ShiftDetector
from bridge.sources import Recording

SETTLE = Settling(hold_still_s=1.0, detect_shift=True, start_holding=True)


@pytest.fixture(scope="module")
def model():
    # small on purpose (a few seconds to train): the tests compare blockings, not accuracy
    return train_simulated(seed=4, wearer=1, repetitions=3, sessions=1, null_s=30.0)


def _take():
    """Our demo scenario: the dancer stands still, performs each gesture once, stands by a
    metal stage rail that lowers the left front panel's frequency by 1 % from then on (a
    sudden lasting shift), then performs the gestures again. The small model also takes
    some ends of postures for shifts: more captures, all of which must match too."""
    jacket = Jacket(seed=5, wearer=1, session=2)
    rng = np.random.default_rng(3)
    first = jacket.perform([("standing", 3.0)] + training_script(rng, 1))
    still = jacket.perform([("standing", 20.0)])  # the step, then longer than the shift detector's sustain
    second = jacket.perform(training_script(rng, 1))
    freq = np.concatenate([first.freq_hz, still.freq_hz, second.freq_hz])
    step_at = first.freq_hz.shape[0] + int(5.0 * first.rate_hz)
    freq[step_at:, 2] *= 0.99
    n = freq.shape[0]
    take = replace(first, t_s=np.arange(n) / first.rate_hz, freq_hz=freq,
                   intervals=first.intervals + still.intervals + second.intervals)
    return take, step_at


TAKE, STEP_AT = _take()


def _blocks(n: int, seed: int, most: int = 200):
    rng = np.random.default_rng(seed)
    i = 0
    while i < n:
        k = int(rng.integers(1, most + 1))
        yield i, min(n, i + k)
        i += k


def _run(model, freq, cuts, settle=SETTLE):
    pipe = Pipeline(model, settle=settle)
    events = []
    for a, b in cuts:
        events += pipe.feed(freq[a:b])
    events += pipe.stop()
    return [(round(e.t_s, 9), e.gesture, e.kind) for e in events], \
        [(h.state, h.start_sample, h.end_sample, h.done) for h in pipe.holds], pipe


def test_the_stream_has_a_shift_and_gestures(model):
    events, holds, pipe = _run(model, TAKE.freq_hz, [(0, TAKE.freq_hz.shape[0])])
    n = SETTLE.hold_samples(model.rate_hz)
    assert holds[0] == (CALIBRATING, 0, n, True)
    # the rail: one capture begun `sustain_s` after the step, give or take the fast mean's lag
    sustain = ShiftDetector(model.rate_hz).sustain_s
    settling = [h for h in holds if h[0] == SETTLING and STEP_AT < h[1] <= STEP_AT + (sustain + 1.0) * model.rate_hz]
    assert len(settling) == 1, holds
    fired = settling[0][1]
    assert fired >= STEP_AT + sustain * model.rate_hz
    assert all(h[2] - h[1] == n and h[3] for h in holds)
    assert sum(1 for e in events if e[2] == "gesture") >= 2 and sum(1 for e in events if e[2] == "entered") >= 4
    # nothing is decided inside a capture
    for _, a, b, _ in holds:
        assert not any(a / model.rate_hz < t <= b / model.rate_hz for t, _, k in events if k != "left")
    # the last capture set the rest: its median
    last = holds[-1]
    np.testing.assert_array_equal(pipe.conditioner.state.centre_hz, np.median(TAKE.freq_hz[last[1]:last[2]], axis=0))


@settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 2**32 - 1), most=st.sampled_from([1, 7, 50, 200]))
def test_events_and_captures_do_not_depend_on_the_blocks(model, seed, most):
    f = TAKE.freq_hz
    whole = _run(model, f, [(0, f.shape[0])])
    if most == 1:  # sample by sample over the part around the shift only: the slowest case
        k = STEP_AT + 1100  # past the shift's report, sustain_s (10 s) after the step
        cuts = [(0, STEP_AT + 900)] + [(i, i + 1) for i in range(STEP_AT + 900, k)] + [(k, f.shape[0])]
    else:
        cuts = list(_blocks(f.shape[0], seed, most))
    blocked = _run(model, f, cuts)
    assert blocked[0] == whole[0]
    assert blocked[1] == whole[1]
    assert blocked[2].samples == whole[2].samples


def test_a_capture_takes_exactly_its_samples_and_the_rest_of_the_block_goes_on(model):
    n = SETTLE.hold_samples(model.rate_hz)
    assert n == 100  # 1.0 s at 100 Hz
    f = TAKE.freq_hz[:n + 57].copy()
    f[10] = np.nan  # an unreadable row inside the capture is skipped, not counted
    pipe = Pipeline(model, settle=SETTLE)
    assert pipe.holding == CALIBRATING
    pipe.feed(f)
    assert pipe.holding is None and pipe.skipped == 1
    h = pipe.holds[0]
    assert (h.start_sample, h.end_sample, h.done) == (0, n, True)
    assert pipe.samples == n + 56                  # the 56 rows after the capture went on
    good = np.delete(f, 10, axis=0)
    np.testing.assert_array_equal(pipe.conditioner.state.centre_hz, np.median(good[:n], axis=0))
    # the same rows in two blocks cut anywhere else: same state
    other = Pipeline(model, settle=SETTLE)
    other.feed(f[:37])
    assert other.holding == CALIBRATING and other.samples == 36
    other.feed(f[37:])
    np.testing.assert_array_equal(other.conditioner.state.centre_hz, pipe.conditioner.state.centre_hz)
    assert other.samples == pipe.samples


def test_stream_time_goes_on_while_holding(model):
    pipe = Pipeline(model, settle=Settling(hold_still_s=2.0))
    pipe.feed(TAKE.freq_hz[:150])
    assert pipe.holding == CALIBRATING and pipe.samples == 150 and pipe.t_s == pytest.approx(1.5)


def test_without_settling_nothing_changes(model):
    f = TAKE.freq_hz
    plain = Pipeline(model)
    assert plain.holding is None and plain.shift is None
    events = plain.feed(f)
    assert plain.holds == [] and plain.samples == f.shape[0]
    with pytest.raises(ValueError, match="no settling"):
        plain.rebaseline("now")
    # a settling that never holds and never looks for shifts decides the same events
    same = Pipeline(model, settle=Settling(1.0, detect_shift=False, start_holding=False)).feed(f)
    assert [(e.t_s, e.gesture, e.kind) for e in same] == [(e.t_s, e.gesture, e.kind) for e in events]


def test_a_shift_while_a_posture_is_held_starts_no_capture(model):
    # the dancer holds a hand on the heart for 12 s: a lasting step on the channels, but
    # the gate holds the posture, so the shift detector's report is ignored
    jacket = Jacket(seed=5, wearer=1, session=2)
    f = jacket.perform([("standing", 3.0), ("hand_on_heart", 12.0), ("standing", 2.0)]).freq_hz
    pipe = Pipeline(model, settle=SETTLE)
    held_at_fire = []
    for a, b in _blocks(f.shape[0], 1, 40):
        before = pipe.shift.shifts
        pipe.feed(f[a:b])
        if pipe.shift.shifts > before:
            held_at_fire.append(bool(pipe.gate.held))
    assert pipe.shift.shifts >= 1 and all(held_at_fire)  # it fired, always while held
    assert [h.state for h in pipe.holds] == [CALIBRATING]


def test_rebaseline_releases_held_postures_and_captures_from_the_next_sample(model):
    jacket = Jacket(seed=5, wearer=1, session=2)
    f = jacket.perform([("standing", 3.0), ("hand_on_heart", 6.0)]).freq_hz
    pipe = Pipeline(model, settle=SETTLE)
    events = pipe.feed(f)
    assert any(e.kind == "entered" for e in events) and pipe.gate.held
    held = set(pipe.gate.held)
    left = pipe.rebaseline("hold still: re-baselining")
    assert {e.gesture for e in left if e.kind == "left"} == held and not pipe.gate.held
    assert pipe.holding == CALIBRATING and pipe.holds[-1].start_sample == f.shape[0]
    # a second rebaseline cuts the first short and starts again
    pipe.feed(f[:30])
    pipe.rebaseline("again")
    assert not pipe.holds[-2].done and pipe.holds[-2].end_sample == f.shape[0] + 30
    pipe.feed(f[:SETTLE.hold_samples(model.rate_hz)])
    assert pipe.holding is None and pipe.holds[-1].done


def test_live_blocks_decide_what_the_replay_decides(model):
    """As the service runs it: blocks of 10-50 ms; replay: ``replay_events`` in 0.1 s blocks."""
    rec = Recording.from_take(TAKE, GESTURES)
    f = TAKE.freq_hz
    rng = np.random.default_rng(7)
    pipe = Pipeline(model, settle=SETTLE)
    live, i = [], 0
    while i < f.shape[0]:
        k = int(rng.integers(1, 6))  # 1-5 samples at 100 Hz
        live += pipe.feed(f[i:i + k])
        i += k
    live += pipe.stop()
    offline = replay_events(rec, model, settle=SETTLE)
    assert [(e.t_s, e.gesture, e.kind) for e in live] == [(e.t_s, e.gesture, e.kind) for e in offline]
    assert any(h.state == SETTLING for h in pipe.holds)
    # and without the settings the replay decides otherwise: the settings matter
    assert [(e.t_s, e.gesture, e.kind) for e in replay_events(rec, model)] != \
        [(e.t_s, e.gesture, e.kind) for e in offline]


def test_shift_detector_says_where_it_fired_and_can_stop_there():
    rate = 50.0
    rng = np.random.default_rng(0)
    f = 1e6 * (1 + 1e-4 * rng.normal(size=(900, 2)))
    f[100:, 0] *= 0.98
    full = ShiftDetector(rate)
    assert full.step(f) == (0,)
    k = full.fired_at
    sustain = full.sustain_s
    assert 100 + sustain * rate - 1 <= k <= 100 + (sustain + 0.6) * rate
    stopped = ShiftDetector(rate)
    assert stopped.step(f, stop=True) == (0,) and stopped.fired_at == k
    upto = ShiftDetector(rate)
    upto.step(f[:k + 1])
    np.testing.assert_array_equal(stopped.fast, upto.fast)
    np.testing.assert_array_equal(stopped.slow, upto.slow)
    assert stopped.over_n == upto.over_n == 0
    assert ShiftDetector(rate).step(f[:k]) == () and ShiftDetector(rate).fired_at is None


def test_settling_rejects_a_negative_hold():
    with pytest.raises(ValueError, match="hold_still_s"):
        Settling(hold_still_s=-1.0)
    assert Settling(hold_still_s=0.0).hold_samples(100.0) == 1


def test_the_service_mirrors_the_pipelines_captures_and_decides_what_the_replay_decides(model, caplog):
    """The daemon's own path (``Service.take``), without threads: its state follows the
    pipeline (calibrating → running → settling → running), a shift is logged as a notice,
    a rebaseline starts a capture, and its events are the replay's with ``Service.settling()``."""
    import logging
    from types import SimpleNamespace

    from bridge.service.daemon import RUNNING, Garment, Service
    from bridge.sources.base import Block
    from bridge.sources.health import Watchdog

    caplog.set_level(logging.INFO, logger="drape")
    seen = []
    config = SimpleNamespace(garments=[], status_to=(), hold_still_s=1.0, detect_shift=True)
    service = Service(config, open_fn=None, on_event=lambda name, e, lat: seen.append((e.t_s, e.gesture, e.kind)))
    assert service.settling() == SETTLE
    g = Garment("lead", SimpleNamespace(), model=model, pipeline=Pipeline(model, None, "lead", settle=service.settling()),
                watchdog=Watchdog(30.0))
    service.garments.append(g)
    service.sync_hold(g)
    assert (g.state, g.note) == (CALIBRATING, "hold still: calibrating")
    f = TAKE.freq_hz
    states = []
    for a, b in _blocks(f.shape[0], 11, 5):
        service.take(0, Block(np.arange(a, b) / model.rate_hz, f[a:b], service.clock()))
        if not states or states[-1] != g.state:
            states.append(g.state)
    assert states[:4] == [CALIBRATING, RUNNING, SETTLING, RUNNING]
    assert "re-settling" in caplog.text and "baseline set from 1.0 s of holding still" in caplog.text
    replayed = replay_events(Recording.from_take(TAKE, GESTURES), model, settle=service.settling())
    tail = g.pipeline.stop()
    assert seen + [(e.t_s, e.gesture, e.kind) for e in tail] == [(e.t_s, e.gesture, e.kind) for e in replayed]
    sent = []
    real_send, service.status.send = service.status.send, sent.extend
    service.command("rebaseline", "", "", None)
    assert g.state == CALIBRATING and g.pipeline.holding == CALIBRATING
    # The new state goes out with the command, not at the next half-second tick (a short
    # hold-still can be over by then, and a view would never show it).
    assert any(b"/drape/g/lead/state" in m and b"calibrating" in m for m in sent)
    service.status.send = real_send
    service.status.close()


def test_after_a_capture_hops_keep_the_stream_clock(model):
    """The recogniser restarts after a capture; its hops must be timed on the stream's clock
    (samples so far), not from its own restart."""
    f = TAKE.freq_hz[:600]
    n = SETTLE.hold_samples(model.rate_hz)
    settled = Pipeline(model, record_hops=True, settle=SETTLE)
    settled.feed(f)
    plain = Pipeline(model, record_hops=True)
    plain.feed(f[n:])
    assert len(settled.hops) == len(plain.hops) > 0
    np.testing.assert_allclose([t for t, _ in settled.hops], [t + n / model.rate_hz for t, _ in plain.hops])
    assert settled.hops[-1][0] <= settled.t_s
