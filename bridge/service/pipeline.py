"""One garment's processing chain. Live daemon, demo and offline replay all run this class."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..decisions import Controls, Event, Gate, Safety, SafetySettings, gate_settings_for
from ..mapping import Dispatch, Mapping, Router
from ..recognition import Model, make_recogniser
from ..signal import Conditioner, ConditionerState, plausible_rows
from ..signal.shift import ShiftDetector

CALIBRATING, SETTLING = "calibrating", "settling"


@dataclass(frozen=True)
class Settling:
    """How a pipeline calibrates and re-settles (None in ``Pipeline``: it never does).

    hold_still_s: length of a hold-still capture, s of stream time; it takes
    max(1, round(hold_still_s · rate_hz)) usable samples, whatever the blocks.
    detect_shift: re-settle after a sudden sustained shift (``ShiftDetector``).
    start_holding: begin with a capture ("calibrating") before anything is recognised.
    """

    hold_still_s: float = 1.0
    detect_shift: bool = True
    start_holding: bool = True

    def __post_init__(self):
        if not (0 <= float(self.hold_still_s) <= 3600):
            raise ValueError(f"hold_still_s must be 0 to 3600 s (got {self.hold_still_s!r})")

    def hold_samples(self, rate_hz: float) -> int:
        return max(1, int(round(self.hold_still_s * rate_hz)))


@dataclass
class Hold:
    """One hold-still capture: why, and the stream samples it began and ended at (``samples``
    before its first sample and after its last; end None while under way). ``done`` is False
    for a capture cut short by a rebaseline."""

    state: str
    why: str
    start_sample: int
    end_sample: int | None = None
    done: bool = False
    channels: tuple[int, ...] = ()  # the channels that shifted, for "settling"


class Pipeline:
    """conditioning → (continuous controls | recognition → decisions) → mapping for one garment.

    ``feed`` takes a block of frequencies (n, channels) in Hz and returns the events it
    completes, in time order: "control" events (one per continuous control and sample),
    the gate's events, and the safety stage's armed/disarmed/panic events. Rows with
    non-finite, non-positive or implausible values (``plausible_rows``) are counted and skipped. ``dispatches`` routes events
    through the mapping (``Router``); ``swap_mapping`` changes the mapping between blocks.

    With ``settle`` (a ``Settling``) the pipeline also calibrates and re-settles, sample-exact:
    while ``holding`` ("calibrating" at start and on ``rebaseline``, "settling" after a sudden
    sustained shift seen while no posture is held) samples go into a hold-still capture, not
    to the classifier, and stream time still advances; the capture's median per channel
    becomes the resting frequency and the recogniser starts afresh, and the rest of that
    block goes on as usual in the same ``feed``. ``holds`` lists every capture (``Hold``), so
    a caller learns of one a shift began. Events do not depend on how the stream is blocked.
    """

    def __init__(self, model: Model, mapping: Mapping | None = None, garment: str = "",
                 record_hops: bool = False, settle: Settling | None = None):
        self.model = model
        self.garment = garment
        self.conditioner = Conditioner(model.conditioning)
        self.recogniser = make_recogniser(model)
        self.base_settings = gate_settings_for(model.classes[1:], model.decision, model.kinds,
                                               hop_s=model.windows.hop_s)
        self.gate = Gate(model.classes, model.kinds, dict(self.base_settings), garment)
        self.controls = Controls((), garment)
        self.safety = Safety(SafetySettings(), garment)
        self.mapping = None
        self.router = None
        self.samples = 0
        self.skipped = 0
        self.last_probabilities = np.zeros(len(model.classes))
        self.hops: list | None = [] if record_hops else None  # (t_s, probabilities) per hop, for tuning
        self.settle = settle
        self.shift = ShiftDetector(model.rate_hz) if settle is not None and settle.detect_shift else None
        self.holding: str | None = None       # None, CALIBRATING or SETTLING
        self.holds: list[Hold] = []
        self._held_rows: list[np.ndarray] = []  # the capture under way
        self._held_n = 0
        self._origin = 0                      # stream sample at which the recogniser started
        if mapping is not None:
            self.swap_mapping(mapping)
        if settle is not None and settle.start_holding:
            self._begin_hold(CALIBRATING, "hold still: calibrating")

    @property
    def t_s(self) -> float:
        """Stream time now: samples seen / rate, s."""
        return self.samples / self.model.rate_hz

    def swap_mapping(self, mapping: Mapping) -> None:
        """Use ``mapping`` from the next block on (between windows: never inside one)."""
        first = self.mapping is None
        self.mapping = mapping
        if first:
            self.router = Router(mapping)
            self.safety = Safety(mapping.safety, self.garment)
        else:
            self.router.swap(mapping)
            self.safety.configure(mapping.safety)
        every = mapping.held_every_s()
        self.gate.settings = {c: replace(s, held_every_s=every.get(c, s.held_every_s))
                              for c, s in self.base_settings.items()}
        self.controls.configure([c.settings_for(self.model.channel_names) for c in mapping.controls])

    def feed(self, freq_hz: np.ndarray, early=None) -> list[Event]:
        """Process one block. ``early(events)``, when given, receives the block's "control"
        events before the classifier runs, so continuous controls do not wait for it."""
        f = np.asarray(freq_hz, dtype=float)
        if f.ndim != 2 or f.shape[1] != self.model.n_channels:
            raise ValueError(f"block has shape {f.shape}; expected (n, {self.model.n_channels})")
        if self.settle is None:
            return self._feed(f, early)
        events: list[Event] = []
        i, n = 0, f.shape[0]
        while i < n:  # segments: a capture's rows, or rows for the classifier up to a shift
            if self.holding:
                i += self._hold_rows(f[i:])
                continue
            rest = f[i:]
            ok = plausible_rows(rest, self.conditioner.state.centre_hz)
            rows = np.flatnonzero(ok)
            if self.shift is None or rows.size == 0:
                events += self._feed(rest, early, ok)
                break
            moved = self.shift.step(rest[rows], stop=True)
            if not moved:
                events += self._feed(rest, early, ok)
                break
            cut = int(rows[self.shift.fired_at]) + 1  # up to and including the sample it fired at
            known = self.conditioner.state.centre_hz is not None  # else the rows' median stood in for rest
            events += self._feed(rest[:cut], early, ok[:cut] if known else None)
            i += cut
            if self.gate.held:  # a posture holds a step too: not a shift, and its end is none either
                self.shift.dismiss()
                continue
            names = ", ".join(self.model.channel_names[c] for c in moved)
            events += self._begin_hold(
                SETTLING, f"sudden lasting change on {names} (something near the garment?); re-settling", moved)
        return events

    def rebaseline(self, why: str = "hold still: re-baselining") -> list[Event]:
        """Start a hold-still capture ("calibrating") now; returns the "left" events of the
        postures it releases. A capture under way is abandoned and begins again."""
        if self.settle is None:
            raise ValueError("this pipeline has no settling settings (Pipeline(settle=Settling(...)))")
        return self._begin_hold(CALIBRATING, why)

    def _begin_hold(self, state: str, why: str, channels=()) -> list[Event]:
        if self.holding and self.holds:
            self.holds[-1].end_sample = self.samples  # cut short
        self.holding = state
        self.holds.append(Hold(state, why, self.samples, channels=tuple(int(c) for c in channels)))
        self._held_rows, self._held_n = [], 0
        return self.gate.release_all(self.t_s)  # nothing stays held through it

    def _hold_rows(self, f: np.ndarray) -> int:
        """Take the capture's rows from the front of ``f``; returns how many rows it used up."""
        centre = self.conditioner.state.centre_hz
        if centre is None:  # no rest known yet: only unreadable rows are left out (the median copes)
            ok = np.isfinite(f).all(axis=1) & (f > 0).all(axis=1)
        else:
            ok = plausible_rows(f, centre)
        rows = np.flatnonzero(ok)
        total = self.settle.hold_samples(self.model.rate_hz)
        need = total - self._held_n
        if rows.size >= need:
            rows = rows[:need]
            used = int(rows[-1]) + 1
        else:
            used = f.shape[0]
        self.skipped += used - rows.size
        self._held_rows.append(f[rows])
        self._held_n += rows.size
        self.samples += rows.size  # stream time goes on: note-offs come due
        if self._held_n >= total:
            self._end_hold()
        return used

    def _end_hold(self) -> None:
        """The capture's median per channel becomes the resting frequency; the chain restarts."""
        f = np.concatenate(self._held_rows)
        self.conditioner.state = ConditionerState(np.median(f, axis=0))
        self.recogniser = make_recogniser(self.model)  # no window mixes old and new rest
        self._origin = self.samples
        if self.shift is not None:
            self.shift.reset(self.conditioner.state.centre_hz)  # the capture is the rest
        h = self.holds[-1]
        h.end_sample, h.done = self.samples, True
        self.holding, self._held_rows, self._held_n = None, [], 0

    def _feed(self, f: np.ndarray, early, ok: np.ndarray | None = None) -> list[Event]:
        """The normal path over rows of one block (after any capture): what ``feed`` does.
        ``ok``: ``plausible_rows`` of these rows when the caller has it already."""
        if ok is None:
            ok = plausible_rows(f, self.conditioner.state.centre_hz)  # NaN, inf, <= 0, or a glitch far from rest
        if not ok.all():
            self.skipped += int((~ok).sum())
            f = f[ok]
        if f.shape[0] == 0:
            return []
        rate = self.model.rate_hz
        first = self.samples
        level, motion = self.conditioner.process(f)
        controls = self.controls.step((first + 1 + np.arange(f.shape[0])) / rate, level, self.gate.held) \
            if self.controls.settings else []
        if early is not None and controls:
            early(controls)
            controls = []
        ends, probs = self.recogniser.push(level, motion)
        if self._origin:
            ends = [self._origin + e for e in ends]  # the recogniser counts from its own start
        events = self._decide(ends, probs, level, first)
        if len(probs):
            self.last_probabilities = probs[-1]
        self.samples += f.shape[0]
        if controls:
            events = sorted(controls + events, key=lambda e: e.t_s)  # stable: a hop's events after its samples
        return events

    def _decide(self, ends, probs: np.ndarray, level: np.ndarray, first: int) -> list[Event]:
        """Gate and safety over a block's hops: exactly the events of ``_decide_each``.

        Most hops decide nothing: no class not held has its k of n votes, no held posture
        its k low hops or its repeat due (``Gate.quiet_run``), and no arming hold or idle
        disarm is due (``Safety.quiet_until``). Runs of such hops only join the gate's
        history and move the safety clock, in one step each; every other hop runs ``_hop``
        as the hop-by-hop loop does.
        """
        m = len(ends)
        if m == 0:
            return []
        times = np.asarray(ends, dtype=float) / self.model.rate_hz
        votes, low = self.gate.tallies(probs)
        events: list[Event] = []
        i = 0
        while i < m:
            j = self.gate.quiet_run(times, votes, low, i)
            if j > i:
                j = i + self.safety.quiet_until(times[i:j], self.gate.held)
                self.gate.skip(probs[i:j])
                if self.hops is not None:
                    self.hops.extend((float(times[h]), np.asarray(probs[h], dtype=float)) for h in range(i, j))
            if j < m:
                events += self._hop(ends[j], times[j], probs[j], level, first)
            i = j + 1
        return events

    def _decide_each(self, ends, probs: np.ndarray, level: np.ndarray, first: int) -> list[Event]:
        """Gate and safety hop by hop: the definition ``_decide`` must match."""
        events: list[Event] = []
        for end, p in zip(ends, probs):
            events += self._hop(end, end / self.model.rate_hz, p, level, first)
        return events

    def _hop(self, end: int, t: float, p: np.ndarray, level: np.ndarray, first: int) -> list[Event]:
        """One hop through the gate and the safety stage; its events, with the strongest level."""
        t = float(t)
        decided = self.gate.step(t, p)
        if decided:
            i = min(max(int(end) - 1 - first, 0), level.shape[0] - 1)
            strongest = float(level[i].max())
            decided = [replace(e, level=strongest) for e in decided]
        out = decided + self.safety.step(t, decided, self.gate.held)
        if self.hops is not None:
            self.hops.append((t, np.asarray(p, dtype=float)))
        return out

    def command(self, kind: str, detail: str = "") -> list[Event]:
        """Events for a command from outside the garment (control message, signal):
        "arm", "disarm", "panic" or "layer" (detail: the layer). They never press keys."""
        t = self.t_s
        why = detail or "control message"
        if kind == "arm":
            return self.safety.set_armed(t, True, why)
        if kind == "disarm":
            return self.safety.set_armed(t, False, why)
        if kind == "panic":
            return self.safety.panic(t, why)
        if kind == "layer":
            if self.router is not None and not self.router.can_switch(detail, "control message"):
                return []  # no layer event: nothing may report a switch that did not happen (the router warns)
            return [Event(t, "", "layer", 1.0, 0.0, self.garment, 0.0, detail)]
        raise ValueError(f"unknown command {kind!r}; use arm, disarm, panic or layer")

    def dispatches(self, events: list[Event]) -> list[Dispatch]:
        """Messages for these events, plus note-offs that have come due by now."""
        if self.router is None:
            return []
        return self.router.route(events) + self.router.due(self.t_s)

    def dispatches_marked(self, events: list[Event]) -> tuple[list[Dispatch], list[str]]:
        """``dispatches(events)``, and for each event why nothing went out for it ("" when
        something did): "disarmed" (a gesture or posture event that produced no message while
        the garment was disarmed), "no rule due" (one that produced none while armed: no rule
        for it, or a once-per-hold rule already sent) or "no mapping" (``router`` None: every
        event), so logs and views never show such an event as sent."""
        r = self.router
        if r is None:
            return [], ["no mapping"] * len(events)
        out, why_not = [], []
        for e in events:  # the arming state can change within the list
            armed = r.armed
            ds = r.route([e])
            out += ds
            quiet = e.kind in ("gesture", "entered", "held", "left") and not ds
            why_not.append(("no rule due" if armed else "disarmed") if quiet else "")
        return out + r.due(self.t_s), why_not

    def stop(self) -> list[Event]:
        """Release held postures: the "left" events to send before shutting down."""
        return self.gate.release_all(self.t_s)

    def let_go(self) -> list[Dispatch]:
        """Releases of every held note and key and every note-off still due (on stop)."""
        return self.router.let_go(self.t_s) if self.router else []
