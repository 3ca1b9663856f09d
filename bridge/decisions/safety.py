"""Arming and panic: whether the garment's decisions may reach the outputs at all.

Arming: holding an arming posture for ``arm_hold_s`` toggles between armed and disarmed
(once per hold: keep holding and nothing more happens). Optionally, a stretch of
``idle_disarm_s`` with no gesture and no posture held disarms by itself, so a wearer who
walks off stage and forgets cannot fire cues from the wings.

Panic: a panic gesture (or, outside this stage, a control message or SIGUSR1) gives a
"panic" event; the mapping turns it into a ``Release`` for every output. With
``panic_disarms`` it also disarms.

State is the ``Safety`` object's attributes; ``step`` takes the gate's events and the
postures it holds after each hop and returns the state changes as events.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .gate import Event

ARMED, DISARMED, PANIC = "armed", "disarmed", "panic"


@dataclass(frozen=True)
class SafetySettings:
    arm_posture: str = ""        # posture that toggles arming when held arm_hold_s (empty: none)
    arm_hold_s: float = 2.0
    idle_disarm_s: float = 0.0   # disarm after this long with nothing recognised, s (0: never)
    start_armed: bool = True
    panic_gesture: str = ""      # gesture (or posture, on entering) that panics (empty: none)
    panic_disarms: bool = True

    def __post_init__(self):
        if self.arm_hold_s < 0 or self.idle_disarm_s < 0:
            raise ValueError("arm_hold_s and idle_disarm_s must be >= 0")


class Safety:
    """Armed or not, when the last thing was recognised, and whether this hold already toggled."""

    def __init__(self, settings: SafetySettings = SafetySettings(), garment: str = ""):
        self.settings = settings
        self.garment = garment
        self.armed = settings.start_armed
        self.last_activity_s: float | None = None
        self.toggled_this_hold = False

    def configure(self, settings: SafetySettings) -> None:
        """New settings from a mapping reload; the armed state carries over."""
        self.settings = settings

    def _event(self, t_s: float, kind: str, why: str) -> Event:
        return Event(t_s, "", kind, 1.0, 0.0, self.garment, 0.0, why)

    def set_armed(self, t_s: float, armed: bool, why: str) -> list[Event]:
        """Arm or disarm now (a control message, the arming posture); an event when it changes."""
        if armed == self.armed:
            return []
        self.armed = armed
        self.last_activity_s = t_s
        return [self._event(t_s, ARMED if armed else DISARMED, why)]

    def panic(self, t_s: float, why: str) -> list[Event]:
        out = [self._event(t_s, PANIC, why)]
        if self.settings.panic_disarms and self.armed:
            self.armed = False
            out.append(self._event(t_s, DISARMED, "panic"))
        return out

    def quiet_until(self, times_s: np.ndarray, held: dict | None = None) -> int:
        """For a run of hops at ``times_s`` with no gate events and the same postures
        ``held`` throughout: do what ``step`` would do at each of them and return how many
        that covers, stopping before the first hop at which ``step`` would act (the arming
        hold reached, the idle disarm). The caller then runs ``step`` at that hop."""
        n = len(times_s)
        if n == 0:
            return 0
        s = self.settings
        times_s = np.asarray(times_s, dtype=float)
        q = n
        if held:
            if s.arm_posture in held and not self.toggled_this_hold:
                due = np.flatnonzero(times_s - held[s.arm_posture][0] >= s.arm_hold_s - 1e-9)
                if len(due):
                    q = int(due[0])
            if s.idle_disarm_s > 0 and self.armed and s.idle_disarm_s <= 1e-9:
                q = 0   # activity is "now" at every held hop; only a zero-length idle fires
            if q:
                self.last_activity_s = float(times_s[q - 1])
                if s.arm_posture and s.arm_posture not in held:
                    self.toggled_this_hold = False
            return q
        if self.last_activity_s is None:
            self.last_activity_s = float(times_s[0])
        if s.arm_posture:
            self.toggled_this_hold = False
        if s.idle_disarm_s > 0 and self.armed:
            due = np.flatnonzero(times_s - self.last_activity_s >= s.idle_disarm_s - 1e-9)
            if len(due):
                return int(due[0])
        return n

    def step(self, t_s: float, events: list[Event], held: dict) -> list[Event]:
        """After one hop: ``events`` the gate decided, ``held`` the postures it holds
        {name: (entered at s, confidence)}. Returns armed/disarmed/panic events."""
        s = self.settings
        out: list[Event] = []
        if self.last_activity_s is None:
            self.last_activity_s = t_s
        for e in events:
            if e.kind in ("gesture", "entered"):
                self.last_activity_s = t_s
                if s.panic_gesture and e.gesture == s.panic_gesture:
                    out += self.panic(t_s, f"gesture {e.gesture}")
        if held:
            self.last_activity_s = t_s
        if s.arm_posture:
            if s.arm_posture in held:
                if not self.toggled_this_hold and t_s - held[s.arm_posture][0] >= s.arm_hold_s - 1e-9:
                    self.toggled_this_hold = True
                    out += self.set_armed(t_s, not self.armed, f"held {s.arm_posture} {s.arm_hold_s:g} s")
            else:
                self.toggled_this_hold = False
        if s.idle_disarm_s > 0 and self.armed and t_s - self.last_activity_s >= s.idle_disarm_s - 1e-9:
            out += self.set_armed(t_s, False, f"nothing recognised for {s.idle_disarm_s:g} s")
        return out
