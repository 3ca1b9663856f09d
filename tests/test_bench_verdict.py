"""`drape bench` says whether each figure meets its target."""

from bridge.evaluation.bench import HOP_TARGET_MS, REPLAY_TARGET_X, verdict


def test_verdict_compares_in_the_right_direction():
    assert verdict(0.19, HOP_TARGET_MS["linear"], True) == "target ≤ 0.2 ms: met"
    assert verdict(0.21, HOP_TARGET_MS["linear"], True) == "target ≤ 0.2 ms: NOT met"
    assert verdict(2500.0, REPLAY_TARGET_X["linear"], False) == "target ≥ 2000×: met"
    assert verdict(99.0, REPLAY_TARGET_X["minirocket"], False) == "target ≥ 100×: NOT met"
    assert verdict(5.0, None, True) == "" and "dtw" not in HOP_TARGET_MS
