"""The pipeline decides a block of hops at once (runs of quiet hops in one step); its events
must be exactly those of deciding hop by hop, with the safety stage in the loop."""

from dataclasses import replace

import numpy as np
from hypothesis import HealthCheck, given, settings, strategies as st

from bridge.decisions import GateSettings, SafetySettings
from bridge.recognition.classifiers import fit_cases
from bridge.recognition.windows import WindowSpec
from bridge.service import Pipeline
from bridge.signal import BandPass

RATE = 20.0
CLASSES = ["wave", "tap", "guard", "cover"]
KINDS = {"wave": "gesture", "tap": "gesture", "guard": "posture", "cover": "posture"}


def _model():
    rng = np.random.default_rng(0)
    spec = WindowSpec(RATE, 1.0, 0.05)
    X = rng.normal(size=(40, 2, spec.length)).cumsum(axis=2)
    y = ["wave", "tap", "guard", "cover", "null"] * 8
    return fit_cases("linear", X, y, CLASSES, rate_hz=RATE, windows=spec, conditioning=BandPass(RATE, 1.0, 5.0),
                     channel_names=("a", "b"), kinds=KINDS)


MODEL = _model()


def _probabilities(rng, n: int, bursts: int) -> np.ndarray:
    """Noise with bursts of one class (gestures short, postures long, some below threshold)."""
    logits = rng.normal(0.0, 1.0, (n, len(MODEL.classes)))
    for _ in range(bursts):
        k = int(rng.integers(1, len(MODEL.classes)))
        a = int(rng.integers(0, n))
        long = MODEL.kinds[MODEL.classes[k]] == "posture" and rng.random() < 0.6
        logits[a:a + int(rng.integers(20, 120) if long else rng.integers(1, 12)), k] += rng.uniform(1.0, 6.0)
    p = np.exp(logits)
    return p / p.sum(axis=1, keepdims=True)


def _pipeline(safety: SafetySettings, gate: dict, record: bool) -> Pipeline:
    pipe = Pipeline(MODEL, record_hops=record)
    pipe.safety.configure(safety)
    pipe.safety.armed = safety.start_armed
    pipe.gate.settings = dict(gate)
    return pipe


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**32 - 1),
       arm=st.sampled_from(["", "guard", "cover"]), arm_hold_s=st.sampled_from([0.0, 0.3, 1.0]),
       panic=st.sampled_from(["", "tap", "cover"]), panic_disarms=st.booleans(), start_armed=st.booleans(),
       idle_s=st.sampled_from([0.0, 0.5, 2.0, 7.0]), held_every_s=st.sampled_from([0.0, 0.15, 1.0]),
       k=st.integers(1, 4), extra_n=st.integers(0, 3), refractory_s=st.sampled_from([0.0, 0.4, 1.5]),
       record=st.booleans())
def test_block_decisions_equal_hop_by_hop(seed, arm, arm_hold_s, panic, panic_disarms, start_armed, idle_s,
                                          held_every_s, k, extra_n, refractory_s, record):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 900))
    probs = _probabilities(rng, n, int(rng.integers(0, 25)))
    ends = list(range(40, 40 + n))  # one hop per sample: any spacing will do for the decisions
    level = rng.normal(size=(40 + n, 2))
    safety = SafetySettings(arm_posture=arm, arm_hold_s=arm_hold_s, idle_disarm_s=idle_s, start_armed=start_armed,
                            panic_gesture=panic, panic_disarms=panic_disarms)
    base = GateSettings(agree_k=k, agree_n=k + extra_n, refractory_s=refractory_s)
    gate = {c: replace(base, held_every_s=held_every_s if KINDS[c] == "posture" else 0.0,
                       threshold=float(rng.choice([0.4, 0.5, 0.7])), exit_threshold=0.3) for c in CLASSES}
    one, many = _pipeline(safety, gate, record), _pipeline(safety, gate, record)
    want = one._decide_each(ends, probs, level, 0)
    got, a = [], 0
    while a < n:  # blocks of any size, as replay and live deliver them
        b = min(n, a + int(rng.integers(1, 200)))
        got += many._decide(ends[a:b], probs[a:b], level, 0)
        a = b
    assert got == want
    assert (one.safety.armed, one.safety.last_activity_s, one.safety.toggled_this_hold) == \
        (many.safety.armed, many.safety.last_activity_s, many.safety.toggled_this_hold)
    assert one.gate.held == many.gate.held and one.gate.quiet_until_s == many.gate.quiet_until_s
    assert [list(p) for p in one.gate.recent] == [list(p) for p in many.gate.recent]
    if record:
        assert [(t, list(p)) for t, p in one.hops] == [(t, list(p)) for t, p in many.hops]


def test_the_random_cases_exercise_every_kind_of_event():
    # The comparison above means something only if the streams make the gate and the
    # safety stage act: count the kinds of event over a few fixed cases.
    kinds = set()
    for seed in range(12):
        rng = np.random.default_rng(seed)
        n = 900
        probs = _probabilities(rng, n, 25)
        safety = SafetySettings(arm_posture="guard", arm_hold_s=0.3, idle_disarm_s=2.0 if seed % 2 else 0.0,
                                start_armed=bool(seed % 3), panic_gesture="tap")
        gate = {c: GateSettings(agree_k=2, agree_n=3, refractory_s=0.4,
                                held_every_s=0.15 if KINDS[c] == "posture" else 0.0) for c in CLASSES}
        pipe = _pipeline(safety, gate, False)
        kinds |= {e.kind for e in pipe._decide(list(range(40, 40 + n)), probs, np.zeros((40 + n, 2)), 0)}
    assert kinds >= {"gesture", "entered", "held", "left", "armed", "disarmed", "panic"}
