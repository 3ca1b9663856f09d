"""Choosing each class's decision settings on labelled takes, and saying honestly how they do.

The takes are replayed once through the live pipeline, keeping each hop's probabilities;
the decision layer is then searched over those stored probabilities (no classifier work):

- **search space** per class: threshold, votes (k of n) and, for gestures, the re-arm rule
  (``rearm_below`` for ``rearm_hops`` hops). The grid always holds the class's current
  settings and stricter ones; the agreeing hops' needed mean (``min_confidence``) stays
  the class's own.
- **choice**: one candidate per class so that the false firings of all classes together
  stay within the budget (``max_false_per_hour`` × hours, rounded down) and never exceed
  those of the settings tune started from, with the most hits; ties go to fewer false
  firings, then to the stricter setting. Each class is searched on its own (a vectorised
  walk over the hops: the shared refractory time between classes is left out there);
  every figure reported comes from the real ``Gate`` and the one matcher.
- **no loosening on too little data**: with ``loosen=False`` (what ``drape tune`` asks when
  the takes are too short to show the false-firing budget, ``matching.hours_to_show``) the
  grid keeps only the class's current settings and stricter ones: no lower threshold,
  fewer agreeing hops, smaller share of agreeing hops or quicker re-arm. A handful of
  minutes without a false firing says nothing about an hour, so it cannot justify them.
- **held-out figure**: the takes are split into pieces (each take, or the two halves of a
  single take cut between labelled intervals); for each piece the settings are chosen on
  the others and scored on it. Only these pooled held-out counts are an estimate; the
  point reached on the data that chose it is not reported as one.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np

from ..decisions import Gate, GateSettings, gate_settings_for
from .matching import count_take, pool

THRESHOLDS = (0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95)
DEBOUNCE = ((1, 1), (2, 2), (2, 3), (3, 4), (4, 5), (5, 6), (6, 8), (8, 10), (10, 12))   # (k, n)
REARM = ((0.3, 3), (0.2, 5), (0.1, 8))          # (rearm_below, rearm_hops), loosest first


@dataclass(frozen=True)
class Piece:
    """Stored hops of one stretch of take: times (h,) s, probabilities (h, classes), its
    labelled intervals and length, s."""

    times_s: np.ndarray
    probs: np.ndarray
    intervals: tuple
    duration_s: float


@dataclass(frozen=True)
class TuneResult:
    before: dict         # ``matching.pool`` of the starting settings on all the takes
    held_out: dict       # ``matching.pool`` of settings chosen without each piece, on that piece
    in_sample: dict      # ``matching.pool`` of the stored settings on the takes that chose them
    settings: dict       # class -> GateSettings.to_dict(), chosen on all the takes
    budget: int          # false firings allowed on all the takes
    met: bool            # the choice on all takes kept within the budget
    held_out_met: bool   # the held-out false firings kept within the held-out hours' budget
    pieces: int
    held_back: tuple = ()  # classes kept no looser (loosen=False) where the whole grid chose looser settings


def hop_probabilities(model, recording, block_s: float = 0.1) -> tuple[np.ndarray, np.ndarray]:
    """(times (h,) s, probabilities (h, classes)) of every hop of a take, through the live pipeline."""
    from ..service import Pipeline
    from ..sources.replay import ReplaySource

    pipe = Pipeline(model, record_hops=True)
    src = ReplaySource(recording, block_s)
    while not src.ended:
        pipe.feed(src.read().freq_hz)
    if not pipe.hops:
        return np.empty(0), np.empty((0, len(model.classes)))
    return np.array([t for t, _ in pipe.hops]), np.array([p for _, p in pipe.hops])


def _hop_s(model) -> float:
    windows = getattr(model, "windows", None)
    return windows.hop_s if windows is not None else 0.1


def gate_events(model, times_s, probs, settings: dict):
    """The real decision layer's events over stored hops (``Gate.step`` hop by hop)."""
    return gate_hops(model.classes, model.kinds, _hop_s(model), times_s, probs, settings)


def gate_hops(classes, kinds: dict[str, str], hop_s: float, times_s, probs, settings: dict):
    """``gate_events`` for hops kept without their model: its classes, kinds and hop (s)."""
    g = Gate(classes, kinds, settings, hop_s=hop_s)
    out = []
    for t, p in zip(times_s, probs):
        out += g.step(float(t), p)
    return out + g.release_all(float(times_s[-1]) if len(times_s) else 0.0)


def split_pieces(takes: list[Piece]) -> list[Piece]:
    """The takes themselves when there are several; a single take cut in two at the gap
    between labelled intervals that best halves both its intervals and its time."""
    if len(takes) != 1:
        return list(takes)
    t = takes[0]
    ivs = t.intervals
    gaps = [0.5 * (a.end_s + b.start_s) for a, b in zip(ivs, ivs[1:]) if b.start_s > a.end_s]
    if not ivs:
        gaps = [t.duration_s / 2]
    if not gaps or t.duration_s <= 0:
        return [t]
    n = max(1, len(ivs))
    cut = min(gaps, key=lambda g: abs(sum(iv.start_s < g for iv in ivs) / n - 0.5) + abs(g / t.duration_s - 0.5))
    k = int(np.searchsorted(t.times_s, cut))
    first = Piece(t.times_s[:k], t.probs[:k], tuple(iv for iv in ivs if iv.start_s < cut), cut)
    second = Piece(t.times_s[k:] - cut, t.probs[k:],
                   tuple(replace_times(iv, -cut) for iv in ivs if iv.start_s >= cut), t.duration_s - cut)
    return [first, second]


def replace_times(iv, shift_s: float):
    """An interval moved by shift_s."""
    from types import SimpleNamespace
    return SimpleNamespace(start_s=iv.start_s + shift_s, end_s=iv.end_s + shift_s, label=iv.label)


def _rolling_count(x: np.ndarray, n: int) -> np.ndarray:
    """Sum of the last n entries (fewer at the start), per entry: of booleans, the trues."""
    c = np.concatenate([[0], np.cumsum(x)])
    i = np.arange(1, len(x) + 1)
    return c[i] - c[np.maximum(i - n, 0)]


def class_firings(times_s: np.ndarray, probs: np.ndarray, j: int, kind: str, s: GateSettings,
                  top: np.ndarray | None = None) -> np.ndarray:
    """Firing times of class j alone under settings s: what ``Gate`` decides for it when no
    other gesture's refractory time and no posture intervenes (they only take firings away). Work is one pass over the hops plus one
    step per firing. ``top``: probs.argmax(axis=1), when already at hand."""
    if not len(times_s):
        return np.empty(0)
    p = probs[:, j]
    votes = ((probs.argmax(axis=1) if top is None else top) == j) & (p >= s.threshold)
    n_votes = _rolling_count(votes, s.agree_n)
    agreeing = n_votes >= s.agree_k
    if s.min_confidence > 0:   # the gate's ``confident``, over every hop at once
        agreeing &= _rolling_count(np.where(votes, p, 0.0), s.agree_n) >= s.min_confidence * n_votes - 1e-9
    agreed = np.flatnonzero(agreeing)
    out = []
    i = 0
    low = p < s.rearm_below
    if kind == "posture":
        leaving = np.flatnonzero(_rolling_count(p < s.exit_threshold, s.agree_n) >= s.agree_k)
        while True:
            a = np.searchsorted(agreed, i)
            if a >= len(agreed):
                break
            enter = agreed[a]
            out.append(times_s[enter])
            b = np.searchsorted(leaving, enter + 1)
            if b >= len(leaving):
                break
            again = _rearmed_from(low, leaving[b], s.rearm_hops)   # re-entry waits for the re-arm
            if again is None:
                break
            i = max(leaving[b] + 1, again)
        return np.array(out)
    idx = np.arange(len(p))
    run = idx - np.maximum.accumulate(np.where(low, -1, idx))       # low hops in a row ending here
    rearmed = np.flatnonzero(run >= s.rearm_hops)
    quiet = -np.inf
    while True:
        a = np.searchsorted(agreed, i)
        if a >= len(agreed):
            break
        c = agreed[a]
        if times_s[c] < quiet:
            i = int(np.searchsorted(times_s, quiet - 1e-9))
            i = max(i, c + 1)
            continue
        out.append(times_s[c])
        quiet = times_s[c] + s.refractory_s
        b = np.searchsorted(rearmed, c + 1)
        if b >= len(rearmed):
            break
        i = rearmed[b]
    return np.array(out)


def _rearmed_from(low: np.ndarray, start: int, hops: int) -> int | None:
    """The first hop at which ``hops`` low hops in a row, counted from ``start`` (included),
    are complete; None if never. Scanned in growing chunks: re-arming is usually soon."""
    n, size = len(low), 64
    carry, at = 0, start
    while at < n:
        seg = low[at:at + size]
        idx = np.arange(len(seg))
        last_high = np.maximum.accumulate(np.where(seg, -1, idx))
        run = np.where(last_high >= 0, idx - last_high, carry + idx + 1)
        hit = np.flatnonzero(run >= hops)
        if len(hit):
            return at + int(hit[0])
        carry = int(run[-1])
        at += len(seg)
        size *= 4
    return None


def candidates(current: GateSettings, kind: str, thresholds=THRESHOLDS, debounce=DEBOUNCE,
               rearm=REARM) -> list[GateSettings]:
    """The grid for one class, strictest first, always holding ``current``."""
    grid = []
    for th, (k, n) in itertools.product(sorted(set(thresholds) | {current.threshold}, reverse=True),
                                        sorted(set(debounce) | {(current.agree_k, current.agree_n)},
                                               key=lambda kn: (kn[0], kn[0] / kn[1]), reverse=True)):
        base = replace(current, threshold=th, agree_k=k, agree_n=n,
                       exit_threshold=min(current.exit_threshold, th))
        if kind == "posture":
            grid.append(base)
            continue
        for below, hops in sorted(set(rearm) | {(current.rearm_below, current.rearm_hops)},
                                  key=lambda r: (r[0], -r[1])):
            if below <= th:
                grid.append(replace(base, rearm_below=below, rearm_hops=hops))
    return list(dict.fromkeys(grid))


def no_looser(s: GateSettings, current: GateSettings) -> bool:
    """Whether settings ``s`` fire no more readily than ``current``: a threshold as high, as
    many agreeing hops and as large a share of the last n, a re-arm as slow."""
    return (s.threshold >= current.threshold and s.agree_k >= current.agree_k
            and s.agree_k * current.agree_n >= current.agree_k * s.agree_n
            and s.rearm_below <= current.rearm_below and s.rearm_hops >= current.rearm_hops)


def _stricter_only(table: dict, current: dict) -> dict:
    """``search_table`` rows of settings no looser than each class's ``current``."""
    out = {}
    for name, (cands, hits, false) in table.items():
        keep = [c for c, s in enumerate(cands) if no_looser(s, current[name])]
        out[name] = ([cands[c] for c in keep], hits[keep], false[keep])
    return out


def _hits_false(fire_t: np.ndarray, intervals, slack_s: float = 2.5) -> tuple[int, int]:
    """(hits, other firings) of one class's firing times (sorted) against its own
    intervals: an interval is hit when a firing falls within its reach (the matcher's
    rule where one class's reaches do not overlap; the figures reported come from the
    matcher itself). Every firing that is not a hit is false, whatever its kind."""
    if not len(intervals):
        return 0, len(fire_t)
    a = np.searchsorted(fire_t, [iv.start_s for iv in intervals], side="left")
    b = np.searchsorted(fire_t, [iv.end_s + slack_s for iv in intervals], side="right")
    hits = int((b > a).sum())
    return hits, len(fire_t) - hits


def search_table(model, pieces: list[Piece], current: dict, **grid) -> dict:
    """Per class: (candidates, hits (candidates, pieces), false (candidates, pieces))."""
    table = {}
    for j, name in enumerate(model.classes[1:], start=1):
        kind = model.kinds[name]
        cands = candidates(current[name], kind, **grid)
        hits = np.zeros((len(cands), len(pieces)), dtype=int)
        false = np.zeros_like(hits)
        for q, piece in enumerate(pieces):
            own = sorted((iv for iv in piece.intervals if iv.label == name), key=lambda iv: iv.start_s)
            top = piece.probs.argmax(axis=1) if len(piece.probs) else None
            for c, s in enumerate(cands):
                fire = class_firings(piece.times_s, piece.probs, j, kind, s, top)
                hits[c, q], false[c, q] = _hits_false(fire, own)
        table[name] = (cands, hits, false)
    return table


def choose(table: dict, use: np.ndarray, cap: int, current: dict) -> tuple[dict, bool]:
    """One candidate per class on the pieces in ``use``: most hits with at most ``cap``
    false firings in all, ties to fewer false firings, then to the current setting, then
    to the stricter; (settings, met). When no choice keeps within the cap, the
    strictest count (fewest false firings) of each class, and met False."""
    dp = {0: (0, {})}
    for name, (cands, hits, false) in table.items():
        h = hits[:, use].sum(axis=1)
        f = false[:, use].sum(axis=1)
        nxt: dict[int, tuple[int, dict]] = {}
        # the current setting first, then strictest first: a tie keeps what the model had
        # (no evidence to change it), else the stricter
        order = sorted(range(len(cands)), key=lambda c: cands[c] != current.get(name))
        for used, (got, chosen) in dp.items():
            for c in order:
                u = used + int(f[c])
                if u > cap:
                    continue
                g = got + int(h[c])
                if u not in nxt or g > nxt[u][0]:
                    nxt[u] = (g, {**chosen, name: cands[c]})
        if not nxt:
            least = {}
            for nm, (cs, hh, ff) in table.items():
                fs = ff[:, use].sum(axis=1)
                least[nm] = cs[int(np.argmin(fs))]
            return least, False
        dp = nxt
    best = max(g for g, _ in dp.values())
    used = min(u for u, (g, _) in dp.items() if g == best)
    return {**current, **dp[used][1]}, True


def _hours(pieces, use) -> float:
    return sum(p.duration_s for p, u in zip(pieces, use) if u) / 3600.0


def _score(model, pieces, settings) -> dict:
    return pool([count_take(gate_events(model, p.times_s, p.probs, settings), p.intervals, p.duration_s)
                 for p in pieces])


def tune_model(model, recordings, max_false_per_hour: float = 1.0, progress=None, loosen: bool = True,
               names=None, **grid) -> TuneResult:
    """Tune every non-null class of ``model`` on labelled ``recordings``; the model is not
    changed. ``grid``: thresholds, debounce, rearm (see ``candidates``). ``loosen=False``:
    search only each class's current settings and stricter ones (``no_looser``).
    Raises ``ModelError`` (a ValueError) before any replay when a take's channels are not the
    model's (``Model.check_takes``; ``names`` are the takes' names for that message)."""
    recordings = list(recordings)
    model.check_takes(recordings, names)
    takes = []
    for i, r in enumerate(recordings):
        t, p = hop_probabilities(model, r)
        takes.append(Piece(t, p, tuple(sorted(r.intervals, key=lambda iv: iv.start_s)), r.freq_hz.shape[0] / r.rate_hz))
        if progress:
            progress(i + 1, len(recordings))
    current = gate_settings_for(model.classes[1:], model.decision, model.kinds, hop_s=_hop_s(model))
    pieces = split_pieces(takes)
    table = search_table(model, pieces, current, **grid)
    everyone = np.ones(len(pieces), dtype=bool)
    whole = table
    if not loosen:
        table = _stricter_only(table, current)

    def cap_for(use):
        """(cap, budget): never more false firings than the budget, nor than the starting
        settings made on the same pieces (counted the way the search counts)."""
        budget = int(np.floor(max_false_per_hour * _hours(pieces, use) + 1e-9))
        start = sum(int(false[cands.index(current[name]), use].sum()) for name, (cands, _, false) in table.items())
        return min(budget, start), budget

    cap, budget = cap_for(everyone)
    chosen, met = choose(table, everyone, cap, current)
    held_back = ()
    if not loosen:   # what the whole grid would have chosen, to say which classes were kept back
        free, _ = choose(whole, everyone, cap, current)
        held_back = tuple(g for g, s in free.items() if not no_looser(s, current[g]))
    held = []
    held_met = True
    if len(pieces) > 1:
        for q in range(len(pieces)):
            use = everyone.copy()
            use[q] = False
            c, _ = choose(table, use, cap_for(use)[0], current)
            held.append(count_take(gate_events(model, pieces[q].times_s, pieces[q].probs, c), pieces[q].intervals,
                                   pieces[q].duration_s))
        ho = pool(held)
        held_met = ho["false"] <= int(np.floor(max_false_per_hour * ho["take_hours"] + 1e-9))
    else:
        ho = None
    return TuneResult(before=_score(model, takes, current), held_out=ho, in_sample=_score(model, takes, chosen),
                      settings={g: s.to_dict() for g, s in chosen.items()}, budget=budget, met=met,
                      held_out_met=held_met, pieces=len(pieces), held_back=held_back)
