"""Event-level scoring of a continuous take: what a performer and an operator would count.

The headline figures are the strict firing counts of ``matching``: every cue a take
fired is a hit, a double firing, a wrong-name firing or a firing in ordinary movement,
with rates per hour and their intervals. Nothing here may hide a firing.

As a second view, the event categories of Ward, Lukowicz & Gellersen, "Performance
metrics for activity recognition", ACM TIST 2(1):6, 2011, applied one class at a time (a
detection of the wrong class is an insertion of its class and leaves the true one deleted):

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
length in common. True intervals of one class that overlap or touch are one event (a
binary segmentation cannot tell them apart); detections are never merged: each firing is
a detection of its own, so a cue fired twice shows as fragmenting, not as one.

Decision events become detected intervals by ``detected_spans``: a dynamic gesture covers
the window it was decided from, [t − window_s, t]; a posture runs from "entered" to
"left".
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .matching import SLACK_S, count_take, pool

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
    event], "detected": [category per detection], "truth_spans" (merged), "detected_spans"
    (sorted, never merged), and a count per category name}.
    """
    g = merge_touching(truth)
    d = sorted((float(a), float(b)) for a, b in detected if b > a)
    # True events are sorted and disjoint; detections may overlap one another.
    hits_g = [[] for _ in g]
    hits_d = [[] for _ in d]
    starts = np.array([a for a, _ in g])
    for j, dj in enumerate(d):
        for i in range(max(0, int(np.searchsorted(starts, dj[0], side="right")) - 1), len(g)):
            if g[i][0] >= dj[1]:
                break
            if _overlaps(g[i], dj):
                hits_g[i].append(j)
                hits_d[j].append(i)
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


def score_take(truth: list[Span], events, window_s: float, duration_s: float, kinds: dict[str, str],
               slack_s: float = SLACK_S) -> dict:
    """Scores of one take: ``firings`` (``matching.count_take``: the strict counts) and the
    Ward categories summed over classes (``ward``, with ``per_class``).

    truth: the take's labelled intervals as Spans; events: the decision events replayed
    over it.
    """
    classes = sorted({s.label for s in truth} | {e.gesture for e in events})
    det = detected_spans(events, window_s, duration_s, kinds)
    ward: dict[str, int] = {}
    per_class = {}
    for c in classes:
        sc = score_one_class([(s.start_s, s.end_s) for s in truth if s.label == c],
                             [(s.start_s, s.end_s) for s in det if s.label == c])
        per_class[c] = sc["counts"]
        for k, v in sc["counts"].items():
            ward[k] = ward.get(k, 0) + v
    return {"firings": count_take(events, truth, duration_s, slack_s), "ward": ward, "per_class": per_class,
            "duration_s": duration_s}


def ward_summary(counts: list[dict]) -> dict:
    """Summed Ward counts with ``true_events``, ``detections``, ``event_recall`` (1 − deleted /
    true events) and ``event_precision`` (1 − inserted / detections)."""
    keys = [f"true_{k}" for k in TRUE_KINDS] + [f"detected_{k}" for k in DETECTED_KINDS]
    out = {k: int(sum(t.get(k, 0) for t in counts)) for k in keys}
    n_true = sum(out[f"true_{k}"] for k in TRUE_KINDS)
    n_det = sum(out[f"detected_{k}"] for k in DETECTED_KINDS)
    out.update(true_events=n_true, detections=n_det,
               event_recall=round(1.0 - out["true_deleted"] / n_true, 4) if n_true else None,
               event_precision=round(1.0 - out["detected_inserted"] / n_det, 4) if n_det else None)
    return out


def summarise(takes: list[dict], target_per_hour: float = 1.0) -> dict:
    """Pool per-take scores: the strict firing figures (``matching.pool``: recall, hits,
    missed, double, wrong_name, ordinary, false, rates with intervals, latency) at the top
    level, and the Ward view under ``ward``."""
    out = pool([t["firings"] for t in takes], target_per_hour)
    out["ward"] = ward_summary([t["ward"] for t in takes])
    return out
