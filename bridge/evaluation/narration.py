"""Saying, as a simulated performance runs, what was performed and what drape decided of it.

The demo knows what its simulated wearer does (the source's ``truth`` intervals), so each
decision can be printed beside the gesture it answers, and misses and false triggers can be
named as they become certain. The judging is ``matching.match_events``, the same rule the
evaluation and tuning use: as the stream only moves forward, a verdict given for an event or
a missed interval never changes later, so the closing sums equal the lines printed.
"""

from __future__ import annotations


from .matching import FIRING, match_events


KIND_WORDS = {  # how a false firing is marked, by the matcher's field for its kind
    "ordinary": "FALSE TRIGGER: not performed",
    "doubles": "FALSE TRIGGER: fired again for the same gesture",
    "wrong_name": "FALSE TRIGGER: another gesture was performed",
}


class Narrator:
    """Lines about a live simulated performance.

    intervals: the source's growing list of performed intervals (start_s, end_s, label).
    say: where lines go (one string each). slack_s: how long after a gesture's end a decision
    still counts for it, s (the matcher's rule).
    """

    WINDOW_S = 120.0  # far longer than any gesture or held posture plus the slack

    def __init__(self, intervals, say=print, slack_s: float = 2.5):
        self.intervals = intervals
        self.say = say
        self.slack_s = slack_s
        self.events: list = []        # firing events so far
        self._announced = 0           # intervals announced as being performed
        self._settled: set[int] = set()  # id() of intervals judged (hit or missed) after their window
        self._judged_to_s = 0.0       # misses are final up to this stream time

    def _started(self, now_s: float) -> list:
        return [iv for iv in self.intervals if iv.start_s <= now_s]

    def _match_near(self, now_s: float):
        """match_events over the last ``WINDOW_S`` only: an event is judged by intervals that began at
        most a gesture's length plus the slack before it, so the verdicts equal a match over everything
        while a long demo stays cheap."""
        cutoff = now_s - self.WINDOW_S
        return match_events([e for e in self.events if e.t_s >= cutoff],
                            [iv for iv in self.intervals if cutoff <= iv.start_s <= now_s], self.slack_s)

    def on_read(self, now_s: float) -> None:
        """The stream has reached ``now_s``: announce what began, report what is now surely missed.

        Misses are judged one read late: the block just read has not been decided on yet."""
        judged, self._judged_to_s = self._judged_to_s, now_s
        for iv in self.intervals[self._announced:]:  # in performance order
            if iv.start_s > now_s:
                break
            self._announced += 1
            self.say(f"{iv.start_s:9.2f} s  performing {iv.label}")
        due = [iv for iv in self._started(judged)
               if iv.end_s + self.slack_s <= judged and id(iv) not in self._settled]
        if not due:
            return
        m = self._match_near(judged)
        missed = {id(iv) for iv in m.missed}
        for iv in due:
            self._settled.add(id(iv))
            if id(iv) in missed:
                self.say(f"{iv.end_s + self.slack_s:9.2f} s    MISSED {iv.label}: no decision within "
                         f"{self.slack_s:g} s of its end")

    def on_event(self, e, disarmed: bool = False) -> bool:
        """Say a decision, marked as the answer to a performed gesture or as a false trigger,
        and when ``disarmed`` that nothing was sent for it.

        False for events it leaves to the caller (control values, arming, panic, layers)."""
        line = self._line(e)
        if line:
            self.say(line + ("  (disarmed: not sent)" if disarmed else ""))
        return line is not None

    def _line(self, e) -> str | None:
        if e.kind not in FIRING:
            if e.kind in ("held", "left"):
                return f"{e.t_s:9.2f} s      {e.gesture} {e.kind}, {e.duration_s:.1f} s in"
            return None
        self.events.append(e)
        m = self._match_near(e.t_s)
        for iv, hit in m.hits:
            if hit is e:
                if e.kind == "entered":
                    return f"{e.t_s:9.2f} s    → {e.gesture} entered {e.confidence:.2f}, {_after(e.t_s - iv.start_s, 'began')}"
                return f"{e.t_s:9.2f} s    → {e.gesture} {e.confidence:.2f}, {_after(e.t_s - iv.end_s, 'ended')}"
        for kind, words in KIND_WORDS.items():
            if any(x is e for x in getattr(m, kind)):
                return f"{e.t_s:9.2f} s    → {e.gesture} {e.confidence:.2f}  {words}"
        return f"{e.t_s:9.2f} s    → {e.gesture} {e.confidence:.2f}"

    def summary(self, end_s: float) -> dict:
        """Sums over the performance up to ``end_s``: performed, recognised, missed, false triggers.

        A gesture whose decision window was still open at the end is counted apart (``open``)."""
        m = match_events(self.events, self._started(end_s), self.slack_s)
        missed = [iv for iv in m.missed if iv.end_s + self.slack_s <= end_s]
        out = {"performed": len(m.hits) + len(missed), "recognised": len(m.hits), "missed": len(missed),
               "false_triggers": len(m.false), "open": len(m.missed) - len(missed),
               "doubles": len(m.doubles), "wrong_name": len(m.wrong_name), "ordinary": len(m.ordinary)}
        return out


def _after(dt_s: float, what: str) -> str:
    """'180 ms after it ended', '0.40 s before it ended'."""
    word = "after" if dt_s >= 0 else "before"
    dt = abs(dt_s)
    amount = f"{dt * 1000:.0f} ms" if dt < 1.0 else f"{dt:.2f} s"
    return f"{amount} {word} it {what}"
