"""Counting every firing against labelled intervals: the one matcher of drape.

``drape evaluate``, ``drape tune``, the benchmarks, the demo's summary and the tests all
count with this module, so they print the same figures for the same events.

A *firing* is a dynamic gesture's "gesture" event or a posture's "entered" event (the
events that send a cue). An interval's *reach* is [start, end + slack_s]: a gesture is
decided once the classifier's window holds all of it, so its cue comes after the end.
Each firing, taken in time order, is exactly one of:

hit
    the first firing of the interval's name within the reach of an interval not yet hit
    (the earliest such interval);
double
    a further firing of the name within the reach of an interval already hit: the same
    cue fired twice;
wrong_name
    within the reach of an interval of another name only;
ordinary
    within the reach of no interval: fired during ordinary movement.

Nothing is merged, windowed away or forgiven: a detector that fires every 1.5 s scores
one hit per interval and every other firing as an error. Time outside every reach is the
*ordinary movement* the ``ordinary`` firings are counted over; all false firings
(double + wrong_name + ordinary) are also given per hour of take.

Rates of rare events come with the exact 95 % Poisson interval (Garwood 1936): with k
seen in T hours, lower = χ²(0.025; 2k) / 2T (0 when k = 0), upper = χ²(0.975; 2k + 2) / 2T.
With none seen the upper bound is 3.69 / T: showing "at most 1 per hour" needs about 3.7
hours without a false firing, which ``rate`` says.

Latency of a hit: decision time minus the interval's end for a gesture (the moment the
movement is complete), minus its start for a posture (the moment it begins).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FIRING = ("gesture", "entered")
KINDS = ("hit", "double", "wrong_name", "ordinary")
SLACK_S = 2.5


@dataclass(frozen=True)
class Match:
    hits: tuple          # ((interval, event), ...)
    missed: tuple        # intervals with no hit
    doubles: tuple       # firings on an interval already hit
    wrong_name: tuple    # firings during an interval of another name
    ordinary: tuple      # firings during ordinary movement

    @property
    def false(self) -> tuple:
        """Every firing that is not a hit, in time order."""
        return tuple(sorted(self.doubles + self.wrong_name + self.ordinary, key=lambda e: e.t_s))

    @property
    def latencies_s(self) -> list[float]:
        return [e.t_s - (iv.start_s if e.kind == "entered" else iv.end_s) for iv, e in self.hits]


def firings(events) -> list:
    """The events that send a cue ("gesture", "entered"), in time order."""
    return sorted((e for e in events if e.kind in FIRING), key=lambda e: e.t_s)


def match_events(events, intervals, slack_s: float = SLACK_S) -> Match:
    """Sort every firing among ``events`` (objects with t_s, gesture, kind) into hits,
    doubles, wrong-name and ordinary-movement firings against ``intervals`` (objects with
    start_s, end_s, label), s."""
    ivs = sorted(intervals, key=lambda iv: (iv.start_s, iv.end_s))
    starts = np.array([iv.start_s for iv in ivs], dtype=float)
    reach = np.array([iv.end_s + slack_s for iv in ivs], dtype=float)
    hit_by: dict[int, object] = {}
    hits, doubles, wrong, ordinary = [], [], [], []
    for e in firings(events):
        near = np.flatnonzero((starts <= e.t_s) & (e.t_s <= reach))
        same = [i for i in near if ivs[i].label == e.gesture]
        fresh = [i for i in same if i not in hit_by]
        if fresh:
            hit_by[fresh[0]] = e
            hits.append((ivs[fresh[0]], e))
        elif same:
            doubles.append(e)
        elif len(near):
            wrong.append(e)
        else:
            ordinary.append(e)
    missed = tuple(iv for i, iv in enumerate(ivs) if i not in hit_by)
    return Match(tuple(hits), missed, tuple(doubles), tuple(wrong), tuple(ordinary))


def ordinary_seconds(intervals, duration_s: float, slack_s: float = SLACK_S) -> float:
    """Time of a take outside every interval's reach [start, end + slack_s], s."""
    spans = sorted((max(0.0, iv.start_s), min(duration_s, iv.end_s + slack_s)) for iv in intervals)
    covered, edge = 0.0, 0.0
    for a, b in spans:
        a = max(a, edge)
        if b > a:
            covered += b - a
            edge = b
    return max(0.0, duration_s - covered)


def poisson_interval(k: int, hours: float, level: float = 0.95) -> tuple[float, float]:
    """Exact (Garwood) interval for a rate per hour, k events seen in ``hours``."""
    from scipy.stats import chi2
    if hours <= 0:
        return float("nan"), float("nan")
    a = 1.0 - level
    lo = 0.0 if k == 0 else chi2.ppf(a / 2, 2 * k) / (2 * hours)
    hi = chi2.ppf(1 - a / 2, 2 * k + 2) / (2 * hours)
    return float(lo), float(hi)


def hours_to_show(target_per_hour: float) -> float:
    """Hours of take needed before a rate at or below ``target_per_hour`` can be shown: with
    none seen, the 95 % upper bound only then comes down to it (inf for a target of 0)."""
    if target_per_hour <= 0:
        return float("inf")
    return poisson_interval(0, 1.0)[1] / target_per_hour


def rate(k: int, hours: float, target_per_hour: float | None = 1.0) -> dict:
    """{count, hours, per_hour, low, high} and, when the data cannot show a rate at or
    below ``target_per_hour`` even with none seen, a ``too_short`` sentence."""
    lo, hi = poisson_interval(k, hours)
    # Six places: printing at two never rounds twice (0.1553 kept as 0.155 printed as 0.15).
    out = {"count": int(k), "hours": round(hours, 6), "per_hour": round(k / hours, 6) if hours > 0 else None,
           "low": round(lo, 6), "high": round(hi, 6)}
    if target_per_hour and hours > 0:
        need_h = hours_to_show(target_per_hour)
        if hours < need_h:
            out["too_short"] = (f"{hours:.2f} h cannot show ≤ {target_per_hour:g} per hour: even with none seen "
                                f"the 95 % bound is {poisson_interval(0, hours)[1]:.1f} per hour; "
                                f"that needs ≥ {need_h:.1f} h")
    return out


def count_take(events, intervals, duration_s: float, slack_s: float = SLACK_S) -> dict:
    """Counts of one take: performed, hit, missed, double, wrong_name, ordinary, false
    (the last three summed), latency_s (per hit), take_s and ordinary_s."""
    m = match_events(events, intervals, slack_s)
    return {"performed": len(m.hits) + len(m.missed), "hit": len(m.hits), "missed": len(m.missed),
            "double": len(m.doubles), "wrong_name": len(m.wrong_name), "ordinary": len(m.ordinary),
            "false": len(m.doubles) + len(m.wrong_name) + len(m.ordinary), "latency_s": m.latencies_s,
            "take_s": float(duration_s), "ordinary_s": ordinary_seconds(intervals, duration_s, slack_s),
            "by_name": by_name(m)}


def by_name(m: Match) -> dict:
    """{name: {performed, missed, double, wrong_name, ordinary}}: the misses of each name
    performed and the false firings of each name fired, so a reader sees which cue to
    change. Every firing and every interval is in exactly one entry's counts."""
    out: dict[str, dict[str, int]] = {}

    def add(name, key):
        out.setdefault(name, dict.fromkeys(NAME_COUNTS, 0))[key] += 1
    for iv, _ in m.hits:
        add(iv.label, "performed")
    for iv in m.missed:
        add(iv.label, "performed")
        add(iv.label, "missed")
    for key, fired in (("double", m.doubles), ("wrong_name", m.wrong_name), ("ordinary", m.ordinary)):
        for e in fired:
            add(e.gesture, key)
    return dict(sorted(out.items()))


COUNTS = ("performed", "hit", "missed", "double", "wrong_name", "ordinary", "false")
NAME_COUNTS = ("performed", "missed", "double", "wrong_name", "ordinary")


def pool(takes: list[dict], target_per_hour: float = 1.0) -> dict:
    """Sum ``count_take`` results and derive the figures: recall, and for every kind of
    false firing its rate with interval: ``double``, ``wrong_name`` and ``false`` per hour
    of take, ``ordinary`` per hour of ordinary movement (each rate names its hours)."""
    out = {k: int(sum(t[k] for t in takes)) for k in COUNTS}
    names: dict[str, dict[str, int]] = {}
    for t in takes:
        for name, c in t.get("by_name", {}).items():
            acc = names.setdefault(name, dict.fromkeys(NAME_COUNTS, 0))
            for k in NAME_COUNTS:
                acc[k] += c[k]
    take_h = sum(t["take_s"] for t in takes) / 3600.0
    ordinary_h = sum(t["ordinary_s"] for t in takes) / 3600.0
    lat = np.array([x for t in takes for x in t["latency_s"]], dtype=float)
    out.update(
        recall=round(out["hit"] / out["performed"], 6) if out["performed"] else None,
        take_hours=round(take_h, 6), ordinary_hours=round(ordinary_h, 6),
        rates={"false_per_take_hour": rate(out["false"], take_h, target_per_hour),
               "double_per_take_hour": rate(out["double"], take_h, target_per_hour),
               "wrong_name_per_take_hour": rate(out["wrong_name"], take_h, target_per_hour),
               "ordinary_per_ordinary_hour": rate(out["ordinary"], ordinary_h, target_per_hour)},
        latency_s={"median": round(float(np.median(lat)), 6) if lat.size else None,
                   "p95": round(float(np.percentile(lat, 95)), 6) if lat.size else None, "count": int(lat.size)},
        by_name=dict(sorted(names.items())),
    )
    return out


def format_by_name(p: dict) -> list[str]:
    """A Markdown table of ``pool``'s ``by_name``: per name, misses of it and its false firings."""
    lines = ["| name | performed | missed | fired twice | fired during another cue | fired in ordinary movement |",
             "|---|---|---|---|---|---|"]
    for name, c in p.get("by_name", {}).items():
        lines.append(f"| {name} | {c['performed']} | {c['missed']} | {c['double']} | {c['wrong_name']} | "
                     f"{c['ordinary']} |")
    return lines


def names_to_check(p: dict) -> list[str]:
    """'hands_on_hips 2 of 6 missed, 3 false' for each name with a miss or a false firing,
    the most false first: the cues to rehearse, re-record or move to a harmless action."""
    rows = []
    for name, c in p.get("by_name", {}).items():
        false = c["double"] + c["wrong_name"] + c["ordinary"]
        if c["missed"] or false:
            parts = ([f"{c['missed']} of {c['performed']} missed"] if c["missed"] else []) + \
                ([f"{false} false"] if false else [])
            rows.append((-false, -c["missed"], name, f"{name} {', '.join(parts)}"))
    return [r[-1] for r in sorted(rows)]


def format_rate(r: dict) -> str:
    """'2 = 0.50 per hour (0.06–1.81) over 4.00 h'."""
    if r["per_hour"] is None:
        return f"{r['count']} (no time to count over)"
    return f"{r['count']} = {r['per_hour']:.2f} per hour (95 % {r['low']:.2f}–{r['high']:.2f}) over {r['hours']:.2f} h"


def format_counts(p: dict) -> list[str]:
    """Lines a person reads: recall, each kind of firing, rates with intervals and denominators."""
    rec = "n/a" if p["recall"] is None else f"{p['recall']:.3f}"
    lat = p["latency_s"]
    r = p["rates"]
    lines = [f"firings: {p['hit']} hits of {p['performed']} performed (recall {rec}, {p['missed']} missed); "
             f"false {p['false']}: {p['double']} double, {p['wrong_name']} wrong name, "
             f"{p['ordinary']} in ordinary movement",
             f"  false firings per hour of take:       {format_rate(r['false_per_take_hour'])}",
             f"  double firings per hour of take:      {format_rate(r['double_per_take_hour'])}",
             f"  wrong-name firings per hour of take:  {format_rate(r['wrong_name_per_take_hour'])}",
             f"  firings per hour of ordinary movement: {format_rate(r['ordinary_per_ordinary_hour'])}"]
    if lat["count"]:
        lines.append(f"  latency from gesture end (posture start) to its cue: median {lat['median']:+.2f} s, "
                     f"p95 {lat['p95']:+.2f} s")
    worst = names_to_check(p)
    if worst:
        lines.append("  by name: " + "; ".join(worst))
    short = r["false_per_take_hour"].get("too_short")
    if short:
        lines.append(f"  note: {short}")
    return lines
