"""Output failures told as they happen, not only in the counters printed on stop.

Each output counts what it could not send (``OutputStats.dropped``, ``last_error``) in its
own worker thread. The loop polls those counters between blocks (no thread here) and says
so when a destination starts failing: at once the first time, then at most once per
``every_s`` per destination while it goes on failing, with how many messages were lost
since the last notice. A destination that sends again after failing is told once too.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class _Seen:
    output_id: int
    dropped: int        # the output's dropped count at the last notice (or when first seen)
    error: str          # its last_error then
    told_s: float       # host time of the last notice, s
    failing: bool = False
    sent: int = 0


class OutputWatch:
    """``poll(outputs, now_s)`` returns the notices due: a list of text lines."""

    def __init__(self, every_s: float = 5.0):
        self.every_s = float(every_s)
        self._seen: dict[str, _Seen] = {}

    def poll(self, outputs: dict, now_s: float) -> list[str]:
        notices = []
        for name, o in outputs.items():
            s = o.stats
            seen = self._seen.get(name)
            if seen is None or seen.output_id != id(o):  # new, or reopened by a reload
                self._seen[name] = _Seen(id(o), s.dropped, s.last_error, float("-inf"), sent=s.sent)
                continue
            lost = s.dropped - seen.dropped
            new_error = s.last_error and s.last_error != seen.error
            if (lost > 0 or new_error) and s.last_error:
                if now_s - seen.told_s >= self.every_s:
                    notices.append(f"output {name} failing: {s.last_error}; {lost} message(s) not sent since "
                                   f"{'the last notice' if seen.failing else 'it last worked'} ({s.dropped} in all)")
                    seen.dropped, seen.error, seen.told_s, seen.failing = s.dropped, s.last_error, now_s, True
            elif seen.failing and s.sent > seen.sent and s.dropped == seen.dropped and now_s - seen.told_s >= self.every_s:
                notices.append(f"output {name} sending again")
                seen.failing, seen.told_s = False, now_s
            seen.sent = s.sent
        for name in set(self._seen) - set(outputs):
            del self._seen[name]
        return notices

    def failing(self) -> str:
        """Outputs told as failing and not told as sending again since, in words for a status
        answer or a state note ("" when none): a dead keys output is no switch that works."""
        return "; ".join(f"output {name} FAILING: {seen.error}" for name, seen in sorted(self._seen.items())
                         if seen.failing)
