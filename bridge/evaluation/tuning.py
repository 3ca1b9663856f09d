"""Choosing each gesture's operating point (threshold, k-of-n debounce) on held-out takes.

The takes are replayed once through the live pipeline, keeping each hop's probabilities;
the decision layer is then re-run over those probabilities for every candidate setting
(cheap: no classifier work). For each gesture the candidates give (hits, false triggers);
a small dynamic programme then picks one candidate per gesture so that the false triggers
of all gestures together stay within the budget (``max_false_per_hour`` × hours of takes,
rounded down) while the number of hits is highest; ties go to fewer false triggers, then
to the more conservative setting.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np

from ..decisions import Gate, GateSettings, gate_settings_for
from .matching import match_events

THRESHOLDS = (0.4, 0.5, 0.6, 0.7, 0.8, 0.9)
DEBOUNCE = ((1, 1), (2, 2), (2, 3), (3, 4), (4, 5), (5, 6))  # (k, n)


@dataclass(frozen=True)
class OperatingPoint:
    recall: float
    false_per_hour: float
    median_latency_s: float
    hits: int
    labelled: int
    false: int
    hours: float


def format_point(p: OperatingPoint) -> str:
    lat = "n/a" if np.isnan(p.median_latency_s) else f"{p.median_latency_s:+.2f} s"
    return (f"recall {p.recall:.3f} ({p.hits}/{p.labelled}), false triggers {p.false} "
            f"= {p.false_per_hour:.1f} per hour, median latency {lat}")


@dataclass(frozen=True)
class TuneResult:
    before: OperatingPoint
    after: OperatingPoint
    settings: dict     # gesture -> GateSettings.to_dict()


def hop_probabilities(model, recording, block_s: float = 0.1):
    """[(t_s, probabilities)] per hop of a take, through the live pipeline."""
    from ..service import Pipeline
    from ..sources.replay import ReplaySource

    pipe = Pipeline(model, record_hops=True)
    src = ReplaySource(recording, block_s)
    while not src.ended:
        pipe.feed(src.read().freq_hz)
    return pipe.hops


def gate_events(model, hops, settings: dict):
    g = Gate(model.classes, model.kinds, settings)
    out = []
    for t, p in hops:
        out += g.step(t, p)
    return out + g.release_all(hops[-1][0] if hops else 0.0)


def evaluate(model, takes_hops, recordings, settings: dict, only: str | None = None) -> OperatingPoint:
    hits = labelled = false = 0
    lat = []
    for hops, rec in zip(takes_hops, recordings):
        ev = gate_events(model, hops, settings)
        ivs = rec.intervals
        if only is not None:
            ev = [e for e in ev if e.gesture == only]
            ivs = [iv for iv in ivs if iv.label == only]
        m = match_events(ev, ivs)
        hits += len(m.hits)
        labelled += len(ivs)
        false += len(m.false)
        lat += m.latencies_s
    hours = sum(r.freq_hz.shape[0] / r.rate_hz for r in recordings) / 3600
    return OperatingPoint(hits / labelled if labelled else float("nan"), false / hours if hours else float("nan"),
                          float(np.median(lat)) if lat else float("nan"), hits, labelled, false, hours)


def tune_model(model, recordings, max_false_per_hour: float = 1.0, thresholds=THRESHOLDS,
               debounce=DEBOUNCE) -> TuneResult:
    """Tune every non-null class of ``model`` on labelled ``recordings``; the model is not changed."""
    takes_hops = [hop_probabilities(model, r) for r in recordings]
    current = gate_settings_for(model.classes[1:], model.decision, model.kinds)
    before = evaluate(model, takes_hops, recordings, current)
    hours = before.hours
    budget = int(np.floor(max_false_per_hour * hours + 1e-9))
    fronts = {}
    for g in model.classes[1:]:
        cands = []
        # most conservative first, so ties keep the safer setting
        for th, (k, n) in itertools.product(sorted(thresholds, reverse=True), sorted(debounce, reverse=True)):
            s = replace(current[g], threshold=th, agree_k=k, agree_n=n,
                        exit_threshold=min(current[g].exit_threshold, th))
            p = evaluate(model, takes_hops, recordings, {**current, g: s}, only=g)
            cands.append((p.false, -p.hits, s))
        fronts[g] = cands
    # dp[f] = (hits, chosen) with f false triggers used so far
    dp = {0: (0, {})}
    for g, cands in fronts.items():
        nxt = {}
        for used, (hits, chosen) in dp.items():
            for f, neg_h, s in cands:
                u = used + f
                if u > budget:
                    continue
                h = hits - neg_h
                if u not in nxt or h > nxt[u][0]:
                    nxt[u] = (h, {**chosen, g: s})
        if not nxt:  # not even the strictest setting keeps within the budget: use it anyway
            strict = min(cands, key=lambda c: (c[0], c[1]))
            nxt = {used + strict[0]: (hits - strict[1], {**chosen, g: strict[2]}) for used, (hits, chosen) in dp.items()}
        dp = nxt
    best_hits = max(h for h, _ in dp.values())
    f_used = min(u for u, (h, _) in dp.items() if h == best_hits)
    chosen = dp[f_used][1]
    after = evaluate(model, takes_hops, recordings, {**current, **chosen})
    return TuneResult(before, after, {g: s.to_dict() for g, s in chosen.items()})
