"""Event-level scores: hand-worked cases and a reference implementation.

Definitions: Ward, Lukowicz & Gellersen, "Performance metrics for activity recognition",
ACM TIST 2(1):6, 2011 (event categories correct, deletion, fragmentation, merge,
insertion, and the detection-side fragmenting/merging categories). The hand-worked cases
below were worked out on paper from those definitions, one per kind of event error.
"""

import numpy as np
import pytest

from bridge.decisions import Event
from bridge.evaluation.events import (Span, detected_spans, merge_touching, score_one_class, score_take, summarise,
                                     ward_summary)


def counts(truth, detected):
    c = score_one_class(truth, detected)["counts"]
    return {k: v for k, v in c.items() if v}


# --- hand-worked cases (Ward et al. 2011 definitions) -------------------------------------

def test_one_detection_on_one_true_event_is_correct_both_ways():
    assert counts([(1, 3)], [(2, 4)]) == {"true_correct": 1, "detected_correct": 1}


def test_deletion_and_insertion_when_nothing_overlaps():
    assert counts([(1, 3)], [(5, 6)]) == {"true_deleted": 1, "detected_inserted": 1}
    assert counts([(1, 3)], []) == {"true_deleted": 1}


def test_insertion_beside_a_correct_detection():
    assert counts([(0, 2)], [(0.5, 1.5), (5, 6)]) == {"true_correct": 1, "detected_correct": 1, "detected_inserted": 1}


def test_fragmentation_two_detections_in_one_true_event():
    assert counts([(0, 10)], [(1, 3), (5, 7)]) == {"true_fragmented": 1, "detected_fragmenting": 2}


def test_merge_one_detection_over_two_true_events():
    assert counts([(0, 2), (4, 6)], [(1, 5)]) == {"true_merged": 2, "detected_merging": 1}


def test_fragmented_and_merged_together():
    # True A [0,4) is hit by d1 [1,2) and d2 [3,7); d2 also covers true B [6,8).
    # A: fragmented (two detections) and merged (d2 covers B too); B: merged.
    # d1: fragmenting; d2: merging and fragmenting.
    assert counts([(0, 4), (6, 8)], [(1, 2), (3, 7)]) == {
        "true_frag_merged": 1, "true_merged": 1, "detected_fragmenting": 1, "detected_frag_merging": 1}


def test_touching_true_intervals_are_one_event_but_detections_are_never_merged():
    assert merge_touching([(2, 3), (1, 2), (5, 5)]) == [(1, 3)]
    assert counts([(0, 2)], [(2, 3)]) == {"true_deleted": 1, "detected_inserted": 1}
    # Two firings on one true event are two detections: the event is fragmented, not correct.
    assert counts([(0, 4)], [(1, 2), (2, 3)]) == {"true_fragmented": 1, "detected_fragmenting": 2}
    # Overlapping detection windows (a cue repeated while its window still holds the
    # gesture) stay two detections as well.
    assert counts([(0, 4)], [(1, 3), (2, 3.5)]) == {"true_fragmented": 1, "detected_fragmenting": 2}


def test_take_scores_from_decision_events():
    kinds = {"bow": "gesture", "arms_crossed": "posture"}
    truth = [Span(10.0, 11.5, "bow"), Span(20.0, 25.0, "arms_crossed"), Span(40.0, 41.0, "bow")]
    events = [
        Event(12.0, "bow", "gesture", 0.9),            # bow decided 0.5 s after it ended: a hit
        Event(21.0, "arms_crossed", "entered", 0.8),   # posture held 21–25.5: a hit
        Event(25.5, "arms_crossed", "left", 0.8, 4.5),
        Event(30.0, "bow", "gesture", 0.7),            # nothing was happening: ordinary movement
    ]                                                  # the bow at 40 s: missed
    s = score_take(truth, events, window_s=2.0, duration_s=3600.0, kinds=kinds)
    assert s["ward"]["true_correct"] == 2 and s["ward"]["true_deleted"] == 1 and s["ward"]["detected_inserted"] == 1
    f = s["firings"]
    assert (f["hit"], f["missed"], f["double"], f["wrong_name"], f["ordinary"]) == (2, 1, 0, 0, 1)
    assert f["latency_s"] == [pytest.approx(0.5), pytest.approx(1.0)]
    # ordinary movement: outside each interval's reach [start, end + 2.5 s]
    assert f["ordinary_s"] == pytest.approx(3600.0 - 4.0 - 7.5 - 3.5)
    out = summarise([s])
    assert out["recall"] == pytest.approx(2 / 3, abs=1e-4)
    assert out["rates"]["ordinary_per_ordinary_hour"]["count"] == 1
    assert out["rates"]["false_per_take_hour"]["per_hour"] == pytest.approx(1.0)
    assert out["ward"]["event_recall"] == pytest.approx(2 / 3, abs=1e-4)
    assert out["ward"]["event_precision"] == pytest.approx(2 / 3, abs=1e-4)


def test_a_wrong_class_is_a_wrong_name_firing_and_a_miss():
    kinds = {"bow": "gesture", "sweep_across": "gesture"}
    s = score_take([Span(10.0, 11.5, "bow")], [Event(12.0, "sweep_across", "gesture", 0.9)], 2.0, 60.0, kinds)
    w = s["ward"]
    assert (w["true_deleted"], w["detected_inserted"], w["true_correct"]) == (1, 1, 0)
    assert s["per_class"]["bow"]["true_deleted"] == 1 and s["per_class"]["sweep_across"]["detected_inserted"] == 1
    f = s["firings"]
    assert (f["hit"], f["missed"], f["wrong_name"], f["ordinary"]) == (0, 1, 1, 0)


def test_posture_never_left_runs_to_the_end():
    spans = detected_spans([Event(5.0, "arms_crossed", "entered", 0.8)], 2.0, 9.0, {"arms_crossed": "posture"})
    assert spans == [Span(5.0, 9.0, "arms_crossed")]


# --- against the reference implementation --------------------------------------------------

def _segmentation(rng, n, horizon):
    """n disjoint, non-touching intervals on whole numbers in (0, horizon)."""
    cuts = np.sort(rng.choice(np.arange(1, horizon), 2 * n, replace=False))
    return [(int(cuts[2 * i]), int(cuts[2 * i + 1])) for i in range(n)]


TRUE_CODES = {"correct": "C", "deleted": "D", "fragmented": "F", "merged": "M", "frag_merged": "FM"}
DETECTED_CODES = {"correct": "C", "inserted": "I'", "fragmenting": "F'", "merging": "M'", "frag_merging": "FM'"}


def test_same_categories_as_the_reference_on_random_segmentations():
    # Reference: the `ward-metrics` 0.9.5 package on the registry (the implementation
    # published by the metrics' authors' group), function eval_events.
    wm = pytest.importorskip("wardmetrics", reason="ward-metrics (test extra) not installed")
    quirks = 0
    for trial in range(400):
        rng = np.random.default_rng(trial)
        horizon = int(rng.integers(30, 200))
        truth = _segmentation(rng, int(rng.integers(1, 8)), horizon)
        det = _segmentation(rng, int(rng.integers(1, 10)), horizon)
        ref_truth, ref_det, ref_counts, ref_std = wm.eval_events(list(truth), list(det))
        ours = score_one_class(truth, det)
        assert [TRUE_CODES[c] for c in ours["truth"]] == ref_truth, (truth, det)
        for j, (mine, theirs) in enumerate(zip(ours["detected"], ref_det)):
            if DETECTED_CODES[mine] != theirs:
                # The one known difference: the reference labels a merging detection M'
                # instead of FM' when a true event it covers was fragmented and already
                # marked merged through an earlier detection (its labels are built by
                # string concatenation, which then no longer equals "F" or "FM"). By the
                # definitions the detection is both merging and fragmenting:
                assert (mine, theirs) == ("frag_merging", "M'"), (truth, det)
                covered = [i for i, g in enumerate(ours["truth_spans"]) if min(g[1], det[j][1]) > max(g[0], det[j][0])]
                assert len(covered) > 1 and any(ours["truth"][i] == "frag_merged" for i in covered)
                quirks += 1
        s = ward_summary([ours["counts"]])
        assert s["event_recall"] == pytest.approx(ref_std["recall"], abs=1e-4)
        assert s["event_precision"] == pytest.approx(ref_std["precision"], abs=1e-4)
    assert quirks < 40  # the difference is a corner case, not the rule
