"""Matching decided events to labelled intervals, for tuning and quick checks.

A dynamic gesture's "gesture" event matches an interval of the same label when it is
decided between the interval's start and ``slack_s`` after its end (the classifier's
window must first hold the whole movement); a posture matches by its "entered" event
inside the interval (to ``slack_s`` after its end). Each interval takes at most one event
and each event matches at most one interval, earliest first. Every other firing event
("gesture" or "entered") is a false trigger.

Latency of a match: decision time minus the interval's end for a dynamic gesture (the
moment the movement is complete), minus its start for a posture (the moment it begins).
"""

from __future__ import annotations

from dataclasses import dataclass

FIRING = ("gesture", "entered")


@dataclass(frozen=True)
class Match:
    hits: tuple        # ((interval, event), ...)
    missed: tuple      # intervals with no event
    false: tuple       # firing events matching no interval

    @property
    def latencies_s(self) -> list[float]:
        return [e.t_s - (iv.start_s if e.kind == "entered" else iv.end_s) for iv, e in self.hits]


def match_events(events, intervals, slack_s: float = 2.5) -> Match:
    """Match events (objects with t_s, gesture, kind) to intervals (start_s, end_s, label)."""
    firing = sorted((e for e in events if e.kind in FIRING), key=lambda e: e.t_s)
    used = set()
    hits, missed = [], []
    for iv in sorted(intervals, key=lambda iv: iv.start_s):
        for i, e in enumerate(firing):
            if i not in used and e.gesture == iv.label and iv.start_s <= e.t_s <= iv.end_s + slack_s:
                used.add(i)
                hits.append((iv, e))
                break
        else:
            missed.append(iv)
    false = tuple(e for i, e in enumerate(firing) if i not in used)
    return Match(tuple(hits), tuple(missed), false)
