"""The decision layer: turns per-hop class probabilities into few, deliberate events.

A dynamic gesture fires once when k of the last n hops agree on it above its threshold
and those hops' mean probability reaches ``min_confidence``; then no gesture fires for its
refractory time, and the same gesture does not fire again until it has re-armed: its
probability below ``rearm_below`` for ``rearm_hops`` hops in a row. The evidence of a gesture stays in the classifier's window for up to a window's
length after the movement, so a fixed quiet time shorter than that fires it twice; the
re-arm rule waits for the evidence itself to fall away, however long the window. A
posture that was left re-arms by the same rule before it can be entered again. A posture
is "entered" on the same k-of-n rule and "left" when k of the last n hops fall below its
lower exit threshold (hysteresis); while it stays held a "held" event repeats every
``held_every_s`` seconds (0: never). While a posture is held, and for ``after_posture_s``
after it is left, no gesture fires and no other posture is entered: the movement out of
a posture otherwise reads as a gesture or as the start of another posture.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, replace

import numpy as np

GESTURE, ENTERED, HELD, LEFT = "gesture", "entered", "held", "left"


@dataclass(frozen=True)
class Event:
    """One decision. Times in seconds on the stream's clock (sample count / rate)."""

    t_s: float
    gesture: str
    kind: str               # "gesture", "entered", "held", "left"; "control" for continuous values;
                            # "armed", "disarmed", "panic", "layer" for the safety and layer state
    confidence: float       # mean probability over the agreeing hops, 0..1
    duration_s: float = 0.0  # how long a posture has been held ("held", "left" events), s
    garment: str = ""
    level: float = 0.0      # "control": the control's value 0..1; otherwise the strongest
                            # channel's level (ΔC/C0 above baseline) when the event was decided
    detail: str = ""        # "layer": the layer switched to; "panic"/"armed": what caused it


@dataclass(frozen=True)
class GateSettings:
    """Decision settings for one class."""

    # 0.65 with 4 of 5 (re-armed after 0.6 s low; postures: 0.5 with 8 of 10, re-entered
    # only after 2 s out), and the quiet time around postures: chosen for fits with other
    # people's cues, on the development and tune sessions the protocol never scores;
    # the postures' mean of 0.65 on troupes the protocol had scored before, then held out
    # on new ones (docs/benchmarks.md, "Spotting").
    threshold: float = 0.65      # probability needed for a hop to count, 0..1
    agree_k: int = 4             # hops that must agree ...
    agree_n: int = 5             # ... out of the last n
    refractory_s: float = 1.5    # quiet time for every gesture after a gesture fires, s
    rearm_below: float = 0.3     # a fired gesture re-arms once its probability is below this ...
    rearm_hops: int = 3          # ... for this many hops in a row
    exit_threshold: float = 0.35  # posture: below this a hop counts towards "left"
    held_every_s: float = 0.0    # posture: repeat a "held" event this often while held, s (0: never)
    # Moving out of a posture looks like the start of a gesture (or of another posture)
    # to the classifier: while a posture is held, and for this long after one is left,
    # this class does not fire; its evidence then must fall away (re-arm) as after a firing.
    after_posture_s: float = 1.0  # s; negative: fire whatever the postures do
    # The agreeing hops' mean probability must reach this too (the event's confidence):
    # a false entry passes the per-hop threshold on a few hops just above it, a true one
    # mostly well above (docs/benchmarks.md, "Spotting"). 0: the votes alone decide.
    min_confidence: float = 0.0   # 0..1

    def __post_init__(self):
        if not 0 < self.threshold <= 1 or not 0 <= self.exit_threshold <= self.threshold:
            raise ValueError("need 0 <= exit_threshold <= threshold <= 1")
        if not 1 <= self.agree_k <= self.agree_n:
            raise ValueError("need 1 <= agree_k <= agree_n")
        if self.refractory_s < 0:
            raise ValueError("refractory_s must be >= 0")
        if not 0 <= self.rearm_below <= self.threshold or self.rearm_hops < 1:
            raise ValueError("need 0 <= rearm_below <= threshold and rearm_hops >= 1")
        if self.held_every_s < 0:
            raise ValueError("held_every_s must be >= 0")
        if not np.isfinite(self.after_posture_s):
            raise ValueError("after_posture_s must be finite")
        if not 0 <= self.min_confidence <= 1:
            raise ValueError("need 0 <= min_confidence <= 1")

    def to_dict(self) -> dict:
        return {"threshold": self.threshold, "agree_k": self.agree_k, "agree_n": self.agree_n,
                "refractory_s": self.refractory_s, "rearm_below": self.rearm_below, "rearm_hops": self.rearm_hops,
                "exit_threshold": self.exit_threshold,
                "held_every_s": self.held_every_s, "after_posture_s": self.after_posture_s,
                "min_confidence": self.min_confidence}


# A held posture must agree longer before it counts: brief passes through a posture-like
# shape at the edges of other movements are common and must not fire "entered"; nor must
# a shape that only just passes the threshold (its agreeing hops' mean below 0.65). A
# posture left for a moment mid-hold must not be entered again: it re-arms only after
# POSTURE_REARM_S of low hops (20 at the usual 0.1 s hop).
POSTURE_DEFAULT = GateSettings(threshold=0.5, agree_k=8, agree_n=10, min_confidence=0.65)
POSTURE_REARM_S = 2.0


# The start of another movement can look like a gesture for a few hops, and a gesture's
# evidence can dip for a hop or two before it is gone: a fired gesture re-arms only after
# GESTURE_REARM_S of low hops (6 at the usual 0.1 s hop; never fewer than 3).
GESTURE_REARM_S = 0.6


def _rearm_after(base: GateSettings, rearm_s: float, hop_s: float) -> GateSettings:
    """``base`` re-armed after ``rearm_s`` of low hops ``hop_s`` apart (never fewer hops than base's)."""
    return replace(base, rearm_hops=max(base.rearm_hops, round(rearm_s / hop_s)))


def gesture_default(hop_s: float = 0.1) -> GateSettings:
    """The gesture default for a model whose hops are ``hop_s`` seconds apart."""
    return _rearm_after(GateSettings(), GESTURE_REARM_S, hop_s)


def posture_default(hop_s: float = 0.1) -> GateSettings:
    """POSTURE_DEFAULT for a model whose hops are ``hop_s`` seconds apart."""
    return _rearm_after(POSTURE_DEFAULT, POSTURE_REARM_S, hop_s)


def gate_settings_for(classes, stored: dict | None, kinds: dict[str, str] | None = None,
                      default: GateSettings | None = None, hop_s: float = 0.1) -> dict[str, GateSettings]:
    """Per-class settings from a model's stored decision table; missing entries take the
    default for the class's kind (``posture_default(hop_s)`` for postures, ``default`` or
    else ``gesture_default(hop_s)`` for gestures; hop_s in s)."""
    stored = stored or {}
    kinds = kinds or {}
    out = {}
    posture = posture_default(hop_s)
    default = gesture_default(hop_s) if default is None else default
    for c in classes:
        base = posture if kinds.get(c) == "posture" else default
        d = stored.get(c, {})
        out[c] = replace(base, **{k: type(getattr(base, k))(v) for k, v in d.items() if hasattr(base, k)})
    return out


def confident(agreeing: np.ndarray, min_confidence: float) -> bool:
    """Whether the agreeing hops' mean probability reaches ``min_confidence`` (a hair's
    tolerance, so that summing in another order, as the tune's walk does, decides alike)."""
    return float(np.sum(agreeing)) >= min_confidence * len(agreeing) - 1e-9


class Gate:
    """Decision state for one garment: recent hops, refractory clock, gestures waiting to
    re-arm, postures held."""

    def __init__(self, classes, kinds: dict[str, str], settings: dict[str, GateSettings] | None = None,
                 garment: str = "", hop_s: float = 0.1):
        self.classes = tuple(classes)
        self.kinds = dict(kinds)
        self.settings = (gate_settings_for(self.classes[1:], None, self.kinds, hop_s=hop_s) if settings is None
                         else dict(settings))
        self.garment = garment
        n_max = max(s.agree_n for s in self.settings.values())
        self.recent: deque[np.ndarray] = deque(maxlen=n_max)
        self.quiet_until_s = -np.inf
        self.held: dict[str, tuple[float, float]] = {}  # posture -> (entered at, confidence)
        self.held_next_s: dict[str, float] = {}        # posture -> when its next "held" event is due
        self.latched: dict[str, int] = {}              # fired gesture -> low hops in a row so far
        self.last_left: tuple[str, float] = ("", -np.inf)  # the posture last left, and when (s)

    def step(self, t_s: float, prob: np.ndarray) -> list[Event]:
        """Take one hop's probabilities (classes,) at stream time t_s; return the events decided."""
        self.recent.append(np.asarray(prob, dtype=float))
        self._rearm(self.recent[-1][None, :])
        events: list[Event] = []
        recent = np.array(self.recent)                   # (hops kept, classes), oldest first
        names = self.classes[1:]
        settings = [self.settings[c] for c in names]
        # Votes and low hops of every class at once, each over its own last n hops.
        cols = recent[:, 1:]
        inside = np.arange(len(recent))[:, None] >= len(recent) - np.array([s.agree_n for s in settings])
        voting = inside & (recent.argmax(axis=1)[:, None] == np.arange(1, len(self.classes))) \
            & (cols >= np.array([s.threshold for s in settings]))
        n_votes = voting.sum(axis=0)
        n_low = (inside & (cols < np.array([s.exit_threshold for s in settings]))).sum(axis=0)
        for j, name in enumerate(names):
            s = settings[j]
            agreed = n_votes[j] >= s.agree_k and (
                s.min_confidence <= 0 or confident(cols[voting[:, j], j], s.min_confidence))
            if self.kinds[name] == "posture":
                if name in self.held:
                    if n_low[j] >= s.agree_k:
                        entered_at, conf = self.held.pop(name)
                        self.last_left = (name, t_s)
                        self.held_next_s.pop(name, None)
                        events.append(Event(t_s, name, LEFT, conf, t_s - entered_at, self.garment))
                        # re-entered only once it has fallen away (this hop counts): a posture
                        # that flickers out and back in during one hold fires once
                        low_now = int(cols[-1, j] < s.rearm_below)
                        if low_now < s.rearm_hops:
                            self.latched[name] = low_now
                    elif s.held_every_s > 0 and t_s >= self.held_next_s[name] - 1e-9:
                        entered_at, conf = self.held[name]
                        # the next one counts from the schedule, not from this hop, so it does not drift
                        self.held_next_s[name] += s.held_every_s
                        events.append(Event(t_s, name, HELD, conf, t_s - entered_at, self.garment))
                elif agreed and name not in self.latched:
                    if self._after_posture(name, t_s):
                        self.latched[name] = 0
                        continue
                    conf = float(np.mean(cols[voting[:, j], j]))
                    self.held[name] = (t_s, conf)
                    self.held_next_s[name] = t_s + s.held_every_s
                    events.append(Event(t_s, name, ENTERED, conf, 0.0, self.garment))
            elif agreed and t_s >= self.quiet_until_s and name not in self.latched:
                if self._after_posture(name, t_s):
                    self.latched[name] = 0
                    continue
                events.append(Event(t_s, name, GESTURE, float(np.mean(cols[voting[:, j], j])), 0.0, self.garment))
                self.quiet_until_s = t_s + s.refractory_s
                self.latched[name] = 0
        return events

    def _after_posture(self, name: str, t_s: float) -> bool:
        """Whether ``name`` must stay silent at t_s: a posture other than it is held, or
        was left less than its ``after_posture_s`` ago (its own re-entry waits for re-arming)."""
        wait_s = self.settings[name].after_posture_s
        if wait_s < 0:
            return False
        left, left_s = self.last_left
        return any(p != name for p in self.held) or (left != name and t_s < left_s + wait_s - 1e-9)

    def _rearm(self, probs: np.ndarray) -> None:
        """Count the low hops of each latched gesture over hops (m, classes), oldest first;
        a gesture with ``rearm_hops`` of them in a row is armed again."""
        for name in list(self.latched):
            s = self.settings[name]
            low = probs[:, self.classes.index(name)] < s.rearm_below
            # run of low hops ending at each hop, continuing the run carried in
            i = np.arange(len(low))
            last_high = np.maximum.accumulate(np.where(low, -1, i))
            run = np.where(last_high >= 0, i - last_high, self.latched[name] + i + 1)
            if run.max(initial=0) >= s.rearm_hops:
                del self.latched[name]
            else:
                self.latched[name] = int(run[-1])

    def skip(self, probs: np.ndarray) -> None:
        """Hops (m, classes) at which nothing can be decided (see ``quiet_run``): they join
        the recent history and count towards re-arming, as ``step`` would count them."""
        probs = np.asarray(probs, dtype=float)
        if len(probs):
            self.recent.extend(probs)
            self._rearm(probs)

    def tallies(self, probs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per hop of a coming block (m, classes) and non-null class: (votes, low hops), each
        among the class's last n hops (this block's and the recent history's), (m, classes − 1)
        ints each, as ``step`` will count them at that hop. They depend on the
        probabilities alone, so a whole block is counted at once. Changes nothing.
        """
        probs = np.asarray(probs, dtype=float)
        past = list(self.recent)
        ext = np.concatenate([np.array(past).reshape(len(past), probs.shape[1]), probs]) if past else probs
        names = self.classes[1:]
        n = np.array([self.settings[c].agree_n for c in names])
        cols = ext[:, 1:]
        vote = (ext.argmax(axis=1)[:, None] == np.arange(1, len(self.classes))) \
            & (cols >= np.array([self.settings[c].threshold for c in names]))
        low = cols < np.array([self.settings[c].exit_threshold for c in names])
        idx = np.arange(len(past), len(ext)) + 1
        start = np.maximum(idx[:, None] - n[None, :], 0)
        cols_i = np.arange(len(names))[None, :]
        out = []
        for x in (vote, low):
            c = np.concatenate([np.zeros((1, len(names)), dtype=np.int64), np.cumsum(x, axis=0)])
            out.append(c[idx][:, :] - c[start, cols_i])
        return out[0], out[1]

    def decisive(self, probs: np.ndarray) -> np.ndarray:
        """(m,) bool: the hops of a coming block at which ``step`` could decide anything
        while no posture is held (some class has its k votes among its last n hops)."""
        votes, _ = self.tallies(probs)
        return (votes >= np.array([self.settings[c].agree_k for c in self.classes[1:]])).any(axis=1)

    def quiet_run(self, times_s: np.ndarray, votes: np.ndarray, low: np.ndarray, i: int) -> int:
        """The first hop ≥ i of a block (its ``tallies``) at which ``step`` could decide
        anything, given the postures held now: a class not held has its k votes, a held one
        its k low hops or its "held" repeat due. Len of the block if none. Before it, with
        the same postures held, ``step`` would only add hops to the history."""
        m = len(times_s)
        if i >= m:
            return m
        busy = np.zeros(m - i, dtype=bool)
        for j, name in enumerate(self.classes[1:]):
            s = self.settings[name]
            if name in self.held:
                busy |= low[i:, j] >= s.agree_k
                if s.held_every_s > 0:
                    busy |= np.asarray(times_s[i:]) >= self.held_next_s[name] - 1e-9
            else:
                busy |= votes[i:, j] >= s.agree_k
        hit = np.flatnonzero(busy)
        return i + int(hit[0]) if len(hit) else m

    def step_many(self, times_s, probs: np.ndarray) -> list[Event]:
        """``step`` for each hop of a block in turn: the same events, with less work per hop.

        ``step`` runs at the ``decisive`` hops and while a posture is held; the other hops
        just join the recent history.
        """
        probs = np.asarray(probs, dtype=float)
        m = len(probs)
        if m == 0:
            return []
        candidates = np.flatnonzero(self.decisive(probs))
        events: list[Event] = []
        i = 0
        while i < m:
            if self.held:
                events += self.step(float(times_s[i]), probs[i])
                i += 1
                continue
            j = candidates[np.searchsorted(candidates, i)] if np.searchsorted(candidates, i) < len(candidates) else m
            self.skip(probs[i:j])
            if j < m:
                events += self.step(float(times_s[j]), probs[j])
            i = j + 1
        return events

    def release_all(self, t_s: float) -> list[Event]:
        """End every held posture now (stop, disarm, no data): "left" events for each."""
        out = [Event(t_s, n, LEFT, c, t_s - t0, self.garment) for n, (t0, c) in self.held.items()]
        self.held.clear()
        self.held_next_s.clear()
        return out
