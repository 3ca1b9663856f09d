"""Event-level scoring of a continuous take: what a performer and an operator would count.

Frame accuracy hides the errors that matter on stage: a gesture recognised twice, two
gestures heard as one, a cue fired while the wearer only walked. The counts here follow
the event categories of Ward, Lukowicz & Gellersen, "Performance metrics for activity
recognition", ACM TIST 2(1):6, 2011, applied one class at a time (a detection of the
wrong class is an insertion of its class and leaves the true one deleted):

true events (per labelled interval)
    correct      overlapped by exactly one detection, which overlaps nothing else
    deleted      overlapped by no detection
    fragmented   overlapped by more than one detection
    merged       overlapped by a detection that also overlaps another true event
    frag_merged  both of the last two
detections
    correct      overlaps exactly one true event, which no other detection overlaps
    inserted     overlaps no true event (a false trigger)
    fragmenting  overlaps a true event that other detections overlap too
    merging      overlaps more than one true event
    frag_merging both of the last two

Intervals are half-open [start, end) in seconds; "overlap" means a stretch of positive
length in common. Intervals of one class that overlap or touch are one event (a binary
segmentation cannot tell them apart). Event recall is 1 − deleted / true events, event
precision is 1 − inserted / detections.

Decision events become detected intervals by ``detected_spans``: a dynamic gesture covers
the window it was decided from, [t − window_s, t]; a posture runs from "entered" to
"left". Latency is measured from a true gesture's end to the first event of its class
whose span overlaps it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TRUE_KINDS = ("correct", "deleted", "fragmented", "merged", "frag_merged")
DETECTED_KINDS = ("correct", "inserted", "fragmenting", "merging", "frag_merging")


@dataclass(frozen=True)
class Span:
    """A labelled stretch of the stream, s."""

    start_s: float
    end_s: float
    label: str


def merge_touching(intervals) -> list[tuple[float, float]]:
    """Sorted intervals with overlapping or touching ones joined; empty ones dropped."""
    out: list[list[float]] = []
    for a, b in sorted((float(a), float(b)) for a, b in intervals):
        if b <= a:
            continue
        if out and a <= out[-1][1]:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]


def _overlaps(a: tuple[float, float], b: tuple[float, float]) -> bool:
    return min(a[1], b[1]) > max(a[0], b[0])


def score_one_class(truth, detected) -> dict:
    """Event categories for one class.

    truth, detected: iterables of (start_s, end_s). Returns {"truth": [category per true
    event], "detected": [category per detection], "truth_spans", "detected_spans" (the
    merged intervals the categories refer to), and a count per category name}.
    """
    g = merge_touching(truth)
    d = merge_touching(detected)
    # Both lists are sorted and disjoint, so a two-pointer sweep finds all overlaps.
    hits_g = [[] for _ in g]
    hits_d = [[] for _ in d]
    j0 = 0
    for i, gi in enumerate(g):
        while j0 < len(d) and d[j0][1] <= gi[0]:
            j0 += 1
        j = j0
        while j < len(d) and d[j][0] < gi[1]:
            if _overlaps(gi, d[j]):
                hits_g[i].append(j)
                hits_d[j].append(i)
            j += 1
    merging = [len(h) > 1 for h in hits_d]
    fragmented = [len(h) > 1 for h in hits_g]
    truth_cat = []
    for i, h in enumerate(hits_g):
        frag = fragmented[i]
        merged = any(merging[j] for j in h)
        truth_cat.append("deleted" if not h else "frag_merged" if frag and merged else "fragmented" if frag
                         else "merged" if merged else "correct")
    det_cat = []
    for j, h in enumerate(hits_d):
        frag = any(fragmented[i] for i in h)
        det_cat.append("inserted" if not h else "frag_merging" if frag and merging[j] else "merging" if merging[j]
                       else "fragmenting" if frag else "correct")
    out = {"truth": truth_cat, "detected": det_cat, "truth_spans": g, "detected_spans": d}
    out["counts"] = {**{f"true_{k}": truth_cat.count(k) for k in TRUE_KINDS},
                     **{f"detected_{k}": det_cat.count(k) for k in DETECTED_KINDS}}
    return out


def detected_spans(events, window_s: float, end_s: float, kinds: dict[str, str]) -> list[Span]:
    """Detected intervals from decision events (``bridge.decisions.Event``).

    A gesture event at t covers [t − window_s, t], the window it was decided from; a
    posture covers "entered" to the next "left" of it (or ``end_s`` if never left).
    """
    spans = []
    entered: dict[str, float] = {}
    for e in sorted(events, key=lambda e: e.t_s):
        if e.kind == "gesture":
            spans.append(Span(max(0.0, e.t_s - window_s), e.t_s, e.gesture))
        elif e.kind == "entered":
            entered[e.gesture] = e.t_s
        elif e.kind == "left" and e.gesture in entered:
            spans.append(Span(entered.pop(e.gesture), e.t_s, e.gesture))
    for name, t0 in entered.items():
        spans.append(Span(t0, max(end_s, t0), name))
    return [s for s in spans if s.end_s > s.start_s]


def null_seconds(truth: list[Span], duration_s: float) -> float:
    """Time outside every labelled interval, s."""
    inside = sum(b - a for a, b in merge_touching((max(0.0, s.start_s), min(duration_s, s.end_s)) for s in truth))
    return max(0.0, duration_s - inside)


def score_take(truth: list[Span], events, window_s: float, duration_s: float, kinds: dict[str, str]) -> dict:
    """Event scores of one take: counts summed over classes, per-class counts, latencies.

    truth: the take's labelled intervals as Spans; events: the decision events replayed
    over it. Returns a dict of counts plus "latency_s" (one per detected true gesture),
    "null_s", "duration_s" and "per_class".
    """
    classes = sorted({s.label for s in truth} | {e.gesture for e in events})
    det = detected_spans(events, window_s, duration_s, kinds)
    every_true = [(s.start_s, s.end_s) for s in truth]
    totals: dict[str, int] = {"inserted_in_null": 0}
    per_class = {}
    for c in classes:
        sc = score_one_class([(s.start_s, s.end_s) for s in truth if s.label == c],
                             [(s.start_s, s.end_s) for s in det if s.label == c])
        # An insertion touching no labelled event of any class fired while the wearer did
        # none of the vocabulary (walking, talking...); the others are wrong-class cues.
        in_null = sum(1 for cat, span in zip(sc["detected"], sc["detected_spans"])
                      if cat == "inserted" and not any(_overlaps(span, t) for t in every_true))
        per_class[c] = {**sc["counts"], "inserted_in_null": in_null}
        for k, v in per_class[c].items():
            totals[k] = totals.get(k, 0) + v
    latency = []
    for s in truth:
        if kinds.get(s.label) != "gesture":
            continue
        times = [e.t_s for e in events if e.kind == "gesture" and e.gesture == s.label
                 and _overlaps((s.start_s, s.end_s), (max(0.0, e.t_s - window_s), e.t_s))]
        if times:
            latency.append(min(times) - s.end_s)
    return {**totals, "latency_s": latency, "null_s": null_seconds(truth, duration_s), "duration_s": duration_s,
            "per_class": per_class}


def summarise(takes: list[dict]) -> dict:
    """Sum per-take scores and derive the headline figures.

    Returns the summed counts (``true_*``, ``detected_*``), ``true_events``,
    ``detections``, ``event_recall``, ``event_precision``, ``false_triggers`` (inserted
    detections), ``null_hours``, ``false_triggers_per_null_hour`` (all insertions over the
    hours of null activity: the strict figure), ``false_triggers_in_null`` and its rate
    ``false_triggers_in_null_per_null_hour`` (insertions overlapping no labelled event),
    ``wrong_class`` (insertions during another labelled event) and ``latency_s``
    {"median", "p95", "count"} from gesture end to its event.
    """
    keys = [f"true_{k}" for k in TRUE_KINDS] + [f"detected_{k}" for k in DETECTED_KINDS]
    out = {k: int(sum(t.get(k, 0) for t in takes)) for k in keys}
    n_true = sum(out[f"true_{k}"] for k in TRUE_KINDS)
    n_det = sum(out[f"detected_{k}"] for k in DETECTED_KINDS)
    in_null = int(sum(t.get("inserted_in_null", 0) for t in takes))
    lat = np.array([x for t in takes for x in t["latency_s"]], dtype=float)
    null_h = sum(t["null_s"] for t in takes) / 3600.0
    out.update(
        true_events=n_true, detections=n_det,
        event_recall=round(1.0 - out["true_deleted"] / n_true, 4) if n_true else None,
        event_precision=round(1.0 - out["detected_inserted"] / n_det, 4) if n_det else None,
        false_triggers=out["detected_inserted"], null_hours=round(null_h, 4),
        false_triggers_per_null_hour=round(out["detected_inserted"] / null_h, 2) if null_h > 0 else None,
        false_triggers_in_null=in_null, wrong_class=out["detected_inserted"] - in_null,
        false_triggers_in_null_per_null_hour=round(in_null / null_h, 2) if null_h > 0 else None,
        latency_s={"median": round(float(np.median(lat)), 3) if lat.size else None,
                   "p95": round(float(np.percentile(lat, 95)), 3) if lat.size else None,
                   "count": int(lat.size)},
    )
    return out
