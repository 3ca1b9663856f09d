"""Guided capture: prompt a wearer through each gesture, record the whole stream, label as it goes.

The session runs on stream time (samples received / rate), not the wall clock, so a garment,
a real-time simulation and a fast simulation all behave the same. For each prompt:

    countdown  "next: NAME" for countdown_s (the wearer gets ready; null activity)
    perform    "now: NAME" for window_s (gestures) or hold_s (postures); the label covers it
    rest       a random stretch of null activity before the next countdown

After the last prompt, ``ordinary_s`` of ordinary movement: the wearer stands, walks,
talks with the hands and adjusts the garment, performing none of the gestures. It is the
null class the model learns to stay silent on; too little of it, and the garment fires
cues during ordinary movement.

Everything is written as it arrives (RecordingWriter: a crash loses at most a second). Keys:
``r`` redo the last prompt (its label is withdrawn and it is asked again next), ``s`` skip
the current (or coming) prompt, ``q`` finish early. A session that ends before its ordinary
movement is over (``q``, a signal, the garment gone) says where it stood and what it did not
record (``shortfall``), for the take's ``#cut`` line.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import numpy as np

COUNTDOWN, PERFORM, REST, ORDINARY, DONE = "countdown", "perform", "rest", "ordinary", "done"
ORDINARY_HINT = "stand, walk, talk with your hands, adjust the garment; perform none of the gestures"


@dataclass(frozen=True)
class CaptureSettings:
    """Times in seconds of stream time."""

    repetitions: int = 5
    countdown_s: float = 3.0
    window_s: float = 3.0      # time given for a gesture after "now"
    hold_s: float = 5.0        # time a posture is held after "now"
    rest_s: tuple = (2.0, 4.0)
    lead_s: float = 4.0        # null activity before the first countdown
    ordinary_s: float = 180.0  # ordinary movement after the last prompt


def capture_plan(rng: np.random.Generator, gestures, repetitions: int) -> list[str]:
    """Each gesture ``repetitions`` times: rounds of a shuffled order, never the same twice in a row."""
    gestures = list(gestures)
    plan: list[str] = []
    for _ in range(repetitions):
        order = [gestures[i] for i in rng.permutation(len(gestures))]
        if plan and len(order) > 1 and order[0] == plan[-1]:
            order[0], order[1] = order[1], order[0]
        plan += order
    return plan


@dataclass
class CaptureSession:
    """The prompting state machine. ``advance(now_s)`` moves it along stream time and returns
    announcements (one line each); ``key(k)`` applies a key. ``writer`` receives labels,
    voids and skips; ``prompt(label, within_s)`` (optional) is told at each "now" (a simulated
    wearer). ``take_plan`` is the plan a take's header states (see ``RecordingWriter``).
    """

    plan: list
    kinds: dict
    settings: CaptureSettings
    writer: object
    rng: np.random.Generator
    prompt: object = None
    phase: str = REST
    index: int = 0                 # the prompt under way or coming
    phase_end_s: float = 0.0
    go_s: float = 0.0
    done: list = field(default_factory=list)      # (start_s, end_s, label) written
    skipped: list = field(default_factory=list)
    redone: int = 0
    finished_early: bool = False
    locate: object = None          # locate(start_s, end_s) -> (a_s, b_s) or None: where the movement was
    now_s: float = 0.0             # stream time of the last advance, s
    stopped: tuple | None = None   # where a "q" found it: (step, prompts left, ordinary left s)

    def __post_init__(self):
        self.phase_end_s = self.settings.lead_s
        self.total = len(self.plan)

    @staticmethod
    def take_plan(plan, settings: CaptureSettings) -> dict:
        """What a take's header states of this capture before it starts: the prompts (label:
        count) and the ordinary movement after them, s. A take killed outright writes no
        ``#cut`` line; its reader compares the take with this."""
        return {"prompts": dict(Counter(plan)), "ordinary_s": settings.ordinary_s}

    def window_s(self, label: str) -> float:
        return self.settings.hold_s if self.kinds.get(label) == "posture" else self.settings.window_s

    @property
    def current(self) -> str | None:
        return self.plan[self.index] if self.index < len(self.plan) else None

    def advance(self, now_s: float) -> list[str]:
        self.now_s = now_s
        out = []
        while self.phase != DONE and now_s >= self.phase_end_s:
            t = self.phase_end_s
            if self.phase == ORDINARY:
                self.phase = DONE
                out.append("ordinary movement done: all done")
                break
            if self.phase == REST:
                if self.current is None:
                    if self.settings.ordinary_s > 0:
                        self.phase, self.phase_end_s = ORDINARY, t + self.settings.ordinary_s
                        ordinary_s = self.settings.ordinary_s
                        how_long = f"{ordinary_s / 60:.3g} min" if ordinary_s >= 60 else f"{ordinary_s:.3g} s"
                        out.append(f"all prompts done; now {how_long} of ordinary movement: "
                                   f"{ORDINARY_HINT}")
                        continue
                    self.phase = DONE
                    out.append("all prompts done")
                    break
                self.phase, self.phase_end_s = COUNTDOWN, t + self.settings.countdown_s
                out.append(f"next: {self.current}")
            elif self.phase == COUNTDOWN:
                label = self.current
                self.phase, self.go_s = PERFORM, t
                self.phase_end_s = t + self.window_s(label)
                if self.prompt:
                    self.prompt(label, self.window_s(label))
                out.append(f"now: {label}" + (" (hold it)" if self.kinds.get(label) == "posture" else ""))
            elif self.phase == PERFORM:
                label = self.current
                span = self.locate(self.go_s, self.phase_end_s) if self.locate else None
                a, b = span if span else (self.go_s, self.phase_end_s)
                a, b = round(a, 4), round(b, 4)
                self.writer.label(a, b, label)
                self.done.append((a, b, label))
                self.index += 1
                self.phase, self.phase_end_s = REST, t + float(self.rng.uniform(*self.settings.rest_s))
                note = "" if span or not self.locate else "; no clear movement seen, r to redo"
                out.append(f"done: {label} {a:.1f}-{b:.1f} s ({self.progress_text()}{note})")
        return out

    def key(self, k: str, now_s: float) -> list[str]:
        k = k.strip().lower()[:1]
        if k == "q":
            if self.phase != DONE:
                self.now_s = max(self.now_s, now_s)
                self.stopped = self._where()
            self.phase, self.finished_early = DONE, True
            return ["finishing early"]
        if k == "s":
            if self.current is None or self.phase == DONE:
                return []
            label = self.plan.pop(self.index)
            self.skipped.append(label)
            self.writer.skip(label)   # skipped on purpose: a reader of the take's plan does not miss it
            if self.phase in (COUNTDOWN, PERFORM):
                self.phase, self.phase_end_s = REST, now_s + self.settings.rest_s[0]
            return [f"skipped: {label}"]
        if k == "r":
            if self.phase == PERFORM:  # redo the one under way: no label, ask again after a rest
                self.redone += 1
                self.phase, self.phase_end_s = REST, now_s + self.settings.rest_s[0]
                return [f"again: {self.current} (after a short rest)"]
            if not self.done:
                return []
            start, end, label = self.done.pop()
            self.writer.void(start, end, label)
            self.redone += 1
            self.index -= 1  # the plan keeps its entry: step back onto it
            if self.phase == COUNTDOWN:  # the coming prompt waits; the redone one comes first
                self.phase, self.phase_end_s = REST, now_s + self.settings.rest_s[0]
            return [f"again: {label} (its last take withdrawn)"]
        return []

    def _where(self) -> tuple:
        """(the step under way, ((label, count), ...) prompts not recorded, ordinary movement
        not recorded in s), at ``now_s``."""
        n, i, label = len(self.plan), self.index, self.current
        if self.phase == COUNTDOWN:
            step = f"the countdown to prompt {i + 1} of {n} ({label})"
        elif self.phase == PERFORM:
            step = f"prompt {i + 1} of {n} ({label}), while it was performed"
        elif self.phase == ORDINARY:
            done_s = self.settings.ordinary_s - max(0.0, self.phase_end_s - self.now_s)
            step = f"the ordinary movement after the prompts ({done_s:.0f} s of {self.settings.ordinary_s:.0f} s)"
        elif not self.done and i == 0:
            step = "the lead-in before the first prompt"
        else:
            step = f"the rest after prompt {i} of {n}"
        left = tuple(Counter(self.plan[i:]).items())
        ordinary = (max(0.0, self.phase_end_s - self.now_s) if self.phase == ORDINARY
                    else 0.0 if self.phase == DONE else self.settings.ordinary_s)
        return step, left, ordinary

    def shortfall(self) -> tuple | None:
        """None when the session ran to its end; else (step, ((label, count), ...) prompts not
        recorded, ordinary movement not recorded in s) where it stopped (``q``, or now)."""
        if self.finished_early:
            return self.stopped
        return None if self.phase == DONE else self._where()

    def progress_text(self) -> str:
        return f"{len(self.done)}/{len(self.plan)}"

    def status_line(self, now_s: float, width: int = 24) -> str:
        """The line shown under the announcements: progress bar, phase and countdown."""
        n_all = max(1, len(self.plan))
        filled = int(round(width * len(self.done) / n_all))
        bar = "[" + "#" * filled + "." * (width - filled) + f"] {self.progress_text()}"
        left = max(0.0, self.phase_end_s - now_s)
        if self.phase == COUNTDOWN:
            return f"{bar}  next: {self.current} in {int(np.ceil(left))}"
        if self.phase == PERFORM:
            span = self.window_s(self.current)
            k = int(round(10 * (1 - left / span)))
            return f"{bar}  NOW: {self.current} " + ">" * k + " " * (10 - k)
        if self.phase == REST:
            return f"{bar}  rest, stand easy ({left:.0f} s)"
        if self.phase == ORDINARY:
            return f"{bar}  ordinary movement, no gestures ({left:.0f} s left)"
        return f"{bar}  done"


def movement_span(freq_hz: np.ndarray, rate_hz: float, go_index: int, baseline_s: float = 1.0,
                  min_z: float = 8.0, fraction: float = 0.25, pad_s: float = 0.0) -> tuple[int, int] | None:
    """Where in ``freq_hz[go_index:]`` the wearer moved: (first, last) sample index, or None.

    The ``baseline_s`` before go_index is the still reference: per channel, log-frequency
    deviation from its median, in units of its robust spread (MAD; at least one count of the
    counter). A sample is active when the largest deviation, smoothed over 0.1 s, exceeds
    ``fraction`` of the peak and ``min_z``; the span runs from the first to the last active
    sample, padded by pad_s. None when nothing stands out (the wearer did not move).
    """
    nb = max(2, int(round(baseline_s * rate_hz)))
    lo = max(0, go_index - nb)
    x = np.log(np.asarray(freq_hz, dtype=float))
    base = x[lo:go_index] if go_index - lo >= 2 else x[go_index:go_index + 2]
    med = np.median(base, axis=0)
    mad = 1.4826 * np.median(np.abs(base - med), axis=0)
    floor = rate_hz / np.exp(med)  # one count of a counter gated at 1/rate, as a log step
    z = np.max(np.abs(x[go_index:] - med) / np.maximum(mad, floor), axis=1)
    k = max(1, int(round(0.1 * rate_hz)))
    z = np.convolve(z, np.ones(k) / k, mode="same")
    if z.size == 0 or z.max() < min_z:
        return None
    active = np.flatnonzero(z >= max(min_z, fraction * z.max()))
    pad = int(round(pad_s * rate_hz))
    return go_index + max(0, active[0] - pad), go_index + min(z.size - 1, active[-1] + pad)


def run_capture(source, session: CaptureSession, writer, stop=None, on_text=None, on_status=None, keys=None,
                first=None):
    """Read ``source`` into ``writer`` until the session is done or ``stop`` is set.

    ``first``: a block already read from the source (to learn its channels), taken as the
    start of the stream.

    Samples are written with stream time t = index / rate (a uniform grid), the time the
    labels use. keys(): returns keys pressed since the last call (may be empty). on_text(line)
    hears announcements; on_status(line) the status line about ten times a second of stream.
    Returns the number of samples written.
    """
    n = 0
    rate = source.rate_hz
    last_status = -1
    keep = int(round(30 * rate))  # recent samples, for locating the movement in each window
    recent = np.empty((0, len(source.channel_names)))

    def locate(start_s, end_s):
        first = n - recent.shape[0]
        a, b = int(round(start_s * rate)) - first, int(round(end_s * rate)) - first
        if a < 0 or b > recent.shape[0]:
            return None
        span = movement_span(recent[:b], rate, a)
        return None if span is None else ((first + span[0]) / rate, (first + span[1] + 1) / rate)

    session.locate = locate
    # The session moves on every 50 ms of stream, however the samples come: a source hands
    # over all that has arrived as one block, and after a stall (or from a fast sender) one
    # block can hold many seconds, which the prompts must still step through in order.
    step = max(1, int(round(0.05 * rate)))
    while session.phase != DONE and not (stop is not None and stop.stopped) and (first is not None or not source.ended):
        block, first = (first, None) if first is not None else (source.read(), None)
        pressed = keys() if keys else []
        for a in range(0, max(len(block), 1), step):
            part = block.freq_hz[a:a + step]
            if len(part):
                writer.samples((n + np.arange(len(part))) / rate, part)
                n += len(part)
                recent = np.concatenate([recent, part])[-keep:]
            now = n / rate
            for k in pressed:
                for line in session.key(k, now):
                    on_text and on_text(line)
            pressed = []
            for line in session.advance(now):
                on_text and on_text(line)
            tick = int(now * 10)
            if on_status and tick != last_status:
                last_status = tick
                on_status(session.status_line(now))
    return n
