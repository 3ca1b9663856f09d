"""Decision semantics on scripted probability sequences."""

from dataclasses import replace

import numpy as np
import pytest

from bridge.decisions import Gate, GateSettings

CLASSES = ("null", "wave", "hold")
KINDS = {"wave": "gesture", "hold": "posture"}


def probs(top: str, p: float = 0.9) -> np.ndarray:
    v = np.full(3, (1 - p) / 2)
    v[CLASSES.index(top)] = p
    return v


def run(gate, seq, hop_s=0.1):
    out = []
    for i, top in enumerate(seq):
        out += gate.step(round(i * hop_s, 6), probs(*top) if isinstance(top, tuple) else probs(top))
    return out


def test_k_of_n_needs_agreement():
    g = Gate(CLASSES, KINDS, {c: GateSettings(agree_k=3, agree_n=4) for c in KINDS})
    assert run(g, ["wave", "null", "wave", "null", "null"]) == []
    g = Gate(CLASSES, KINDS, {c: GateSettings(agree_k=3, agree_n=4) for c in KINDS})
    ev = run(g, ["wave", "null", "wave", "wave"])
    assert [(e.gesture, e.kind, e.t_s) for e in ev] == [("wave", "gesture", 0.3)]


def test_below_threshold_does_not_count():
    g = Gate(CLASSES, KINDS, {c: GateSettings(threshold=0.8) for c in KINDS})
    assert run(g, [("wave", 0.7)] * 10) == []


def test_a_gesture_fires_once_however_long_its_evidence_lasts():
    # The refractory time (1 s) is far shorter than the 2.5 s of agreement: it must not
    # let the same gesture fire again while its evidence is still there.
    g = Gate(CLASSES, KINDS, {c: GateSettings(agree_k=2, agree_n=2, refractory_s=1.0) for c in KINDS})
    ev = run(g, ["wave"] * 25)
    assert [e.t_s for e in ev] == [0.1]


def test_a_gesture_re_arms_after_its_probability_stays_low():
    s = GateSettings(agree_k=2, agree_n=2, refractory_s=0.0, rearm_below=0.3, rearm_hops=3)
    # two low hops are not enough: a dip inside one long gesture does not re-arm it
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    ev = run(g, ["wave"] * 5 + ["null"] * 2 + ["wave"] * 5)
    assert [e.t_s for e in ev] == [0.1]
    # three in a row are: the next agreement fires again
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    ev = run(g, ["wave"] * 5 + ["null"] * 3 + ["wave"] * 5)
    assert [e.t_s for e in ev] == [0.1, 0.9]
    # a probability between rearm_below and the threshold neither votes nor re-arms
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    ev = run(g, ["wave"] * 5 + [("wave", 0.4)] * 10 + ["wave"] * 5)
    assert [e.t_s for e in ev] == [0.1]


def test_refractory_still_quiets_every_gesture():
    classes = ("null", "wave", "bow")
    kinds = {"wave": "gesture", "bow": "gesture"}
    g = Gate(classes, kinds, {c: GateSettings(agree_k=1, agree_n=1, refractory_s=1.0) for c in kinds})
    p = lambda i: np.eye(3)[i] * 0.9 + 0.05
    ev = []
    for i, top in enumerate([1, 2, 2, 0, 0, 0, 0, 0, 0, 0, 0, 2]):
        ev += g.step(round(i * 0.1, 6), p(top))
    assert [(e.gesture, e.t_s) for e in ev] == [("wave", 0.0), ("bow", 1.1)]


def test_rearm_settings_are_checked_and_stored():
    with pytest.raises(ValueError):
        GateSettings(threshold=0.5, rearm_below=0.6)
    with pytest.raises(ValueError):
        GateSettings(rearm_hops=0)
    d = GateSettings(rearm_below=0.2, rearm_hops=5).to_dict()
    assert (d["rearm_below"], d["rearm_hops"]) == (0.2, 5)


def test_posture_entered_left_with_duration_and_hysteresis():
    s = GateSettings(threshold=0.8, exit_threshold=0.3, agree_k=2, agree_n=3)
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    # 0.85 enters; 0.5 is between the thresholds and keeps it held; 0.1 leaves.
    seq = [("hold", 0.85)] * 3 + [("hold", 0.5)] * 10 + [("null", 0.9)] * 3
    ev = run(g, seq)
    assert [(e.kind, e.t_s) for e in ev] == [("entered", 0.1), ("left", 1.4)]
    assert ev[1].duration_s == pytest.approx(1.3)


def test_release_all_ends_held_postures():
    g = Gate(CLASSES, KINDS, {c: GateSettings(agree_k=1, agree_n=1) for c in KINDS})
    run(g, ["hold"])
    left = g.release_all(5.0)
    assert [(e.gesture, e.kind, e.duration_s) for e in left] == [("hold", "left", 5.0)]
    assert g.release_all(6.0) == []


def test_settings_reject_nonsense():
    with pytest.raises(ValueError):
        GateSettings(agree_k=5, agree_n=3)
    with pytest.raises(ValueError):
        GateSettings(threshold=0.3, exit_threshold=0.5)


def test_a_block_of_hops_decides_exactly_as_hop_by_hop():
    # step_many is an optimisation of calling step per hop: same events on random streams
    # with bursts of agreement, postures held across block boundaries and refractory time.
    from bridge.decisions import Gate
    classes = ("null", "a", "b", "p")
    kinds = {"a": "gesture", "b": "gesture", "p": "posture"}
    rng = np.random.default_rng(1)
    for trial in range(20):
        n = 400
        logits = rng.normal(0, 1, (n, 4))
        for _ in range(12):
            s = int(rng.integers(0, n - 30))
            logits[s:s + int(rng.integers(2, 30)), int(rng.integers(1, 4))] += 4.0
        p = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
        t = np.arange(n) * 0.05
        one, many = Gate(classes, kinds), Gate(classes, kinds)
        want = [e for i in range(n) for e in one.step(float(t[i]), p[i])]
        got, a = [], 0
        while a < n:
            b = min(n, a + int(rng.integers(1, 60)))
            got += many.step_many(t[a:b], p[a:b])
            a = b
        assert got == want and len(want) > 3


def test_a_posture_that_flickers_out_and_back_fires_once():
    s = GateSettings(threshold=0.8, exit_threshold=0.35, agree_k=2, agree_n=2, rearm_below=0.3, rearm_hops=3)
    # left on two hops at 0.32 (below the exit level, above the re-arm level): back in is no new entry
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    ev = run(g, [("hold", 0.9)] * 5 + [("hold", 0.32)] * 2 + [("hold", 0.9)] * 5)
    assert [e.kind for e in ev] == ["entered", "left"]
    # fallen away for three hops from the hop it was left at: entered again
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    ev = run(g, [("hold", 0.9)] * 5 + [("null", 0.9)] * 4 + [("hold", 0.9)] * 5)
    assert [e.kind for e in ev] == ["entered", "left", "entered"]


def _vec(wave: float, hold: float) -> np.ndarray:
    return np.array([1.0 - wave - hold, wave, hold])


def _fire(settings, seq, hop_s=0.1):
    g = Gate(CLASSES, KINDS, {c: settings for c in KINDS})
    out = []
    for i, v in enumerate(seq):
        out += g.step(round(i * hop_s, 6), v)
    return [(e.t_s, e.gesture, e.kind) for e in out]


def test_no_gesture_fires_while_a_posture_is_held_or_just_left():
    # Moving out of a posture reads as a gesture: wave's evidence while "hold" is still
    # held (its probability above the exit level) must not fire.
    s = GateSettings(threshold=0.4, agree_k=2, agree_n=2, exit_threshold=0.3, rearm_below=0.3, rearm_hops=2,
                     after_posture_s=1.0)
    held, leaving = [_vec(0.05, 0.9)] * 5, [_vec(0.55, 0.35)] * 4
    ev = _fire(s, held + leaving + [_vec(0.05, 0.05)] * 30)
    assert ev == [(0.1, "hold", "entered"), (1.0, "hold", "left")]
    # the same evidence just after the posture is left (within 1 s) is not fired either ...
    ev = _fire(s, held + [_vec(0.0, 0.0)] * 3 + [_vec(0.9, 0.0)] * 5 + [_vec(0.0, 0.0)] * 20)
    assert ev == [(0.1, "hold", "entered"), (0.6, "hold", "left")]
    # ... and a wave that starts after the quiet time fires, once
    ev = _fire(s, held + [_vec(0.0, 0.0)] * 12 + [_vec(0.9, 0.0)] * 5 + [_vec(0.0, 0.0)] * 5)
    assert ev == [(0.1, "hold", "entered"), (0.6, "hold", "left"), (1.8, "wave", "gesture")]
    # a negative quiet time lets gestures fire during postures, as before the rule
    ev = _fire(replace(s, after_posture_s=-1.0), held + leaving + [_vec(0.05, 0.05)] * 30)
    assert (0.6, "wave", "gesture") in ev


def test_blocked_gesture_must_re_arm_before_it_fires():
    # Evidence that began inside the quiet time does not fire the moment the quiet time
    # ends: it fell on the posture's way out, so it must fall away first.
    s = GateSettings(threshold=0.4, agree_k=2, agree_n=2, exit_threshold=0.3, rearm_below=0.3, rearm_hops=2,
                     after_posture_s=0.5)
    ev = _fire(s, [_vec(0.05, 0.9)] * 5 + [_vec(0.0, 0.0)] * 3 + [_vec(0.9, 0.0)] * 20)
    assert [e for e in ev if e[1] == "wave"] == []


def test_another_posture_is_not_entered_while_one_is_held():
    classes, kinds = ("null", "cross", "hips"), {"cross": "posture", "hips": "posture"}
    s = GateSettings(threshold=0.5, agree_k=2, agree_n=2, exit_threshold=0.3, after_posture_s=0.5)
    g = Gate(classes, kinds, {c: s for c in kinds})
    seq = [np.array([0.05, 0.9, 0.05])] * 5 + [np.array([0.0, 0.4, 0.6])] * 5 + [np.array([0.8, 0.1, 0.1])] * 5
    ev = []
    for i, v in enumerate(seq):
        ev += g.step(round(i * 0.1, 6), v)
    assert [(e.gesture, e.kind) for e in ev] == [("cross", "entered"), ("cross", "left")]


def test_a_posture_left_for_a_moment_is_not_entered_again_until_two_seconds_out():
    from bridge.decisions.gate import posture_default
    assert posture_default(0.1).rearm_hops == 20 and posture_default(0.5).rearm_hops == 4
    # "left" takes 8 low hops, then the re-arm counts 20 (at 0.1 s) or 4 (at 0.5 s) from there
    for hop_s, gap_hops, again in ((0.1, 25, False), (0.1, 30, True), (0.5, 9, False), (0.5, 12, True)):
        g = Gate(CLASSES, KINDS, hop_s=hop_s)
        n = g.settings["hold"].agree_n
        seq = ["hold"] * n + ["null"] * gap_hops + ["hold"] * n
        ev = [e.kind for e in run(g, seq, hop_s) if e.gesture == "hold"]
        assert ev == (["entered", "left", "entered"] if again else ["entered", "left"]), (hop_s, gap_hops)


def test_default_gesture_needs_four_of_five_hops_above_065():
    g = Gate(CLASSES, KINDS)
    # the start of another movement that looks like the gesture for three hops: silent
    assert run(g, ["null"] * 5 + ["wave"] * 3 + ["null"] * 10) == []
    assert run(Gate(CLASSES, KINDS), ["null"] * 5 + [("wave", 0.62)] * 20) == []
    ev = run(Gate(CLASSES, KINDS), ["null"] * 5 + ["wave"] * 4 + ["null"] * 10)
    assert [(e.gesture, e.kind) for e in ev] == [("wave", "gesture")]


def test_a_gesture_whose_evidence_dips_is_not_fired_again_until_it_has_been_low_for_0_6_s():
    from bridge.decisions.gate import gesture_default
    assert gesture_default(0.1).rearm_hops == 6 and gesture_default(0.5).rearm_hops == 3
    # the evidence outlasts the refractory time (1.5 s), dips for gap hops and comes back
    for hop_s, gap_hops, again in ((0.1, 5, False), (0.1, 6, True), (0.5, 2, False), (0.5, 3, True)):
        g = Gate(CLASSES, KINDS, hop_s=hop_s)
        seq = ["wave"] * round(2.0 / hop_s) + ["null"] * gap_hops + ["wave"] * 5 + ["null"] * 10
        fired = [e for e in run(g, seq, hop_s) if e.gesture == "wave"]
        assert len(fired) == (2 if again else 1), (hop_s, gap_hops)


def test_a_posture_needs_its_agreeing_hops_mean_to_reach_min_confidence():
    # every hop above the 0.5 threshold, but their mean below the 0.65 asked: no entry
    s = GateSettings(threshold=0.5, agree_k=8, agree_n=10, min_confidence=0.65)
    g = Gate(CLASSES, KINDS, {"wave": GateSettings(), "hold": s})
    assert run(g, ["null"] * 5 + [("hold", 0.6)] * 30) == []
    # the same hops climbing: entered on the first hop whose last 8 agreeing hops average ≥ 0.65
    g = Gate(CLASSES, KINDS, {"wave": GateSettings(), "hold": s})
    ev = run(g, ["null"] * 5 + [("hold", 0.6)] * 8 + [("hold", 0.9)] * 10)
    assert [(e.gesture, e.kind) for e in ev] == [("hold", "entered")]
    # 8 votes: 0.6 × (8 − m) + 0.9 × m ≥ 5.2 first at m = 2, the 10th hop of the posture
    assert ev[0].t_s == pytest.approx((5 + 9) * 0.1) and ev[0].confidence >= 0.65
    # without it the same hops enter at the 8th hop
    g = Gate(CLASSES, KINDS, {"wave": GateSettings(), "hold": replace(s, min_confidence=0.0)})
    assert [e.t_s for e in run(g, ["null"] * 5 + [("hold", 0.6)] * 8 + [("hold", 0.9)] * 10)] == \
        pytest.approx([(5 + 7) * 0.1])


def test_min_confidence_is_checked_and_stored():
    with pytest.raises(ValueError, match="min_confidence"):
        GateSettings(min_confidence=1.2)
    from bridge.decisions import gate_settings_for
    stored = gate_settings_for(["hold"], {"hold": GateSettings(min_confidence=0.7).to_dict()}, KINDS)
    assert stored["hold"].min_confidence == 0.7
    # a table stored before the setting existed takes the default of its kind
    old = {k: v for k, v in GateSettings().to_dict().items() if k != "min_confidence"}
    assert gate_settings_for(["hold"], {"hold": old}, KINDS)["hold"].min_confidence == \
        gate_settings_for(["hold"], None, KINDS)["hold"].min_confidence


def test_default_posture_entry_needs_a_mean_of_065_over_its_agreeing_hops():
    from bridge.decisions.gate import posture_default
    assert posture_default(0.1).min_confidence == 0.65
    assert run(Gate(CLASSES, KINDS), ["null"] * 5 + [("hold", 0.6)] * 40) == []
    ev = run(Gate(CLASSES, KINDS), ["null"] * 5 + [("hold", 0.7)] * 40)
    assert [(e.gesture, e.kind) for e in ev] == [("hold", "entered")]
