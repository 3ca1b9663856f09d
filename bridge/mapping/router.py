"""Routing events through the current mapping: layers, arming, held notes and keys, panic,
timed note-offs and rate-limited continuous controls.

The ``Router`` owns the mapping stage's state (the scipy.signal idiom: all of it in plain
attributes): the active layer, whether armed, what is held down and what lets it go, the
note-offs still due and, per continuous-control rule, the last value sent.

Safety rules kept here:

- What a rule holds down (a note or keys held with a posture) is let go when the posture
  is left, by the release recorded when it was pressed, even if the mapping was reloaded
  or the layer switched in between. Disarming and panic let go of everything at once.
- While disarmed only status messages go out (and releases of what was held).
- A once-per-hold rule (``once_after_s``) fires at most once between a posture's
  "entered" and "left", so one long hold is one action. Its moment, once passed, is spent
  even while disarmed: arming later in the same hold does not send it late. A hold
  under way when the garment is armed sends no once-per-hold action at all (it began
  while nothing was meant to go out, or it is the arming posture's own hold): let go and
  hold again.
- A repeating held rule fires once for each ``every_s`` the hold has lasted, at the first
  "held" event at or after each multiple, whatever the other held rules of the posture
  ask (the decision stage repeats "held" at the shortest of them).
- Commands (arm, disarm, panic, layer switch) never press keys: ``command`` drops any
  ``KeyAction`` it would produce, and key outputs are let go with ``Release``. Network
  control messages reach the router only as commands.
"""

from __future__ import annotations

from ..decisions import Event
from .messages import Arm, Dispatch, KeyAction, OscMessage, Release
from .rules import Mapping, PlayNote, PressKeys, Rule, SwitchLayer

COMMANDS = ("armed", "disarmed", "panic", "layer")
HELD_SLACK_S = 1e-6  # a held event due at exactly once_after_s may carry a duration a rounding below it


class Router:
    def __init__(self, mapping: Mapping):
        self.mapping = mapping
        self.layer = mapping.first_layer
        self.armed = mapping.safety.start_armed
        self.holding: dict[str, list[Dispatch]] = {}   # posture → releases due when it is left
        self.due_offs: list[tuple[float, Dispatch]] = []  # (stream time, note-off)
        self.control_sent: dict[int, tuple[float, float]] = {}  # control rule index → (t_s, value)
        self.fired: dict[str, dict[Rule, int]] = {}     # posture → held rule → times fired this hold
        self.in_hold: set[str] = set()                   # postures entered and not yet left
        self.warnings: list[str] = []

    # -- mapping swaps -----------------------------------------------------------------------
    def swap(self, mapping: Mapping) -> None:
        """Use a new mapping from the next event on. Held notes and keys keep their releases;
        the layer carries over if the new mapping still has it; a once-per-hold rule left
        unchanged does not fire again in the hold under way."""
        self.mapping = mapping
        if self.layer not in mapping.layers:
            self.layer = mapping.first_layer
        self.control_sent.clear()

    # -- events --------------------------------------------------------------------------------
    def route(self, events: list[Event]) -> list[Dispatch]:
        """Dispatches for events in order (gesture, posture, control and command events)."""
        out: list[Dispatch] = []
        for e in events:
            if e.kind in COMMANDS:
                out += self.command(e)
            elif e.kind == "control":
                if self.armed:
                    out += self._control(e)
            else:
                out += self._event(e)
        return out

    def due(self, t_s: float) -> list[Dispatch]:
        """Note-offs whose time has come (stream time ``t_s``)."""
        if not self.due_offs:
            return []
        now = [d for t, d in self.due_offs if t <= t_s]
        self.due_offs = [(t, d) for t, d in self.due_offs if t > t_s]
        return now

    def let_go(self, t_s: float) -> list[Dispatch]:
        """Every release held or due, now (disarm, stop)."""
        out = [d for ds in self.holding.values() for d in ds] + [d for _, d in self.due_offs]
        self.holding.clear()
        self.due_offs.clear()
        return [Dispatch(d.destination, d.message, t_s) for d in out]

    def _event(self, e: Event) -> list[Dispatch]:
        out = []
        if e.kind == "left" and e.gesture in self.holding:
            out += [Dispatch(d.destination, d.message, e.t_s) for d in self.holding.pop(e.gesture)]
        if e.kind in ("entered", "left"):
            self.fired.pop(e.gesture, None)  # a new hold: held rules count from the start again
            (self.in_hold.add if e.kind == "entered" else self.in_hold.discard)(e.gesture)
        layer = self.layer  # a layer switch takes effect after all of this event's rules
        # (held rules count their moments here even when disarmed, see the module's docstring)
        rules = [r for r in self.mapping.rules
                 if r.gesture == e.gesture and r.on == e.kind and r.layer in ("", layer) and self._due(r, e)]
        if not self.armed:
            return out
        for r in rules:
            a = r.action
            if isinstance(a, SwitchLayer):
                out += self._switch(e.t_s, a.layer, f"gesture {e.gesture}")
                continue
            out.append(Dispatch(r.to, a.build(e), e.t_s))
            if isinstance(a, (PlayNote, PressKeys)) and a.hold:
                self.holding.setdefault(e.gesture, []).append(Dispatch(r.to, a.release(), e.t_s))
            elif isinstance(a, PlayNote):
                self.due_offs.append((e.t_s + a.length_s, Dispatch(r.to, a.release(), e.t_s)))
        return out

    def _due(self, r: Rule, e: Event) -> bool:
        """Whether rule ``r`` answers event ``e``: always but for a held event, which a
        once-per-hold rule answers the first time the hold has lasted its ``once_after_s``,
        and a repeating one each time the hold has lasted one more of its ``every_s``
        (held events come at the shortest repeat of the posture's rules)."""
        if e.kind != "held":
            return True
        fired = self.fired.setdefault(e.gesture, {})
        done = fired.get(r, 0)
        if r.once_after_s:
            due = 1 if e.duration_s >= r.once_after_s - HELD_SLACK_S else 0
        else:
            due = int((e.duration_s + HELD_SLACK_S) // r.every_s) if r.every_s > 0 else done + 1
        if r.once_after_s and done or due <= done:
            return False
        fired[r] = due
        return True

    def _control(self, e: Event) -> list[Dispatch]:
        out = []
        for i, c in enumerate(self.mapping.controls):
            if c.name != e.gesture or c.layer not in ("", self.layer):
                continue
            last = self.control_sent.get(i)
            if last is not None:
                t0, v0 = last
                if e.t_s - t0 < 1.0 / c.max_rate_hz - 1e-9 or abs(e.level - v0) < c.min_change:
                    continue
            msg = c.action.build(e)
            if last is not None and hasattr(msg, "value") and c.action.build(Event(0, "", "", 0, 0, "", last[1])) == msg:
                continue  # the same MIDI value again: nothing to say
            self.control_sent[i] = (e.t_s, e.level)
            out.append(Dispatch(c.to, msg, e.t_s))
        return out

    # -- commands: arming, panic, layers (from the garment's safety stage or the network) -----
    def command(self, e: Event) -> list[Dispatch]:
        out = self._command(e)
        return [d for d in out if not isinstance(d.message, KeyAction)]  # commands never press keys

    def _status(self, t_s: float, what: str, detail: str) -> list[Dispatch]:
        st = self.mapping.status
        return [Dispatch(st.to, OscMessage(st.address, (what, detail)), t_s)] if st else []

    def _keys(self):
        return [n for n, d in self.mapping.destinations.items() if d.kind == "keys"]

    def can_switch(self, layer: str, why: str) -> bool:
        """Whether ``layer`` exists; if not, a warning says so and that the layer stays."""
        if layer in self.mapping.layers:
            return True
        self.warnings.append(f"no layer {layer!r} in {self.mapping.source} ({why}); staying in {self.layer!r}")
        return False

    def _switch(self, t_s: float, layer: str, why: str) -> list[Dispatch]:
        if not self.can_switch(layer, why):
            return []
        self.layer = layer
        return self._status(t_s, "layer", layer)

    def _command(self, e: Event) -> list[Dispatch]:
        t = e.t_s
        if e.kind == "panic":
            self.holding.clear()
            self.due_offs.clear()
            self.control_sent.clear()
            return [Dispatch(n, Release(), t) for n in self.mapping.destinations] + self._status(t, "panic", e.detail)
        if e.kind == "disarmed":
            was = self.armed
            self.armed = False
            out = self.let_go(t) + [Dispatch(n, Release(disarm=True), t) for n in self._keys()]
            return out + (self._status(t, "disarmed", e.detail) if was else [])
        if e.kind == "armed":
            was = self.armed
            self.armed = True
            if not was:   # a hold under way sends no once-per-hold action (see the module's docstring)
                for r in self.mapping.rules:
                    if r.on == "held" and r.once_after_s and r.gesture in self.in_hold:
                        self.fired.setdefault(r.gesture, {})[r] = 1
            return [Dispatch(n, Arm(), t) for n in self._keys()] + ([] if was else self._status(t, "armed", e.detail))
        if e.kind == "layer":
            return self._switch(t, e.detail, "control message")
        return []
