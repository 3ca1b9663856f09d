"""What a mapping file resolves to: actions, rules, continuous-control rules, the whole mapping.

All values are frozen. An action is what one rule does; ``build`` turns it and an event
into a message value of ``bridge.mapping.messages``. Fields that come from the event are
written "{gesture}", "{confidence}", "{duration_s}", "{level}", "{garment}".
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..decisions import ControlSettings, Event, LevelRange, OneEuroSettings, SafetySettings
from .messages import Destination, KeyAction, LightLevels, MidiControl, MidiNote, MidiProgram, OscBundle, OscMessage

FIELDS = {"{gesture}": "gesture", "{confidence}": "confidence", "{duration_s}": "duration_s",
          "{level}": "level", "{garment}": "garment"}
UNIT_FIELDS = ("{confidence}", "{level}")  # 0..1 values, scaled to 0–127 where a MIDI value is wanted


def fill(arg, event: Event):
    """An argument with event fields filled in."""
    if isinstance(arg, str) and arg in FIELDS:
        v = getattr(event, FIELDS[arg])
        return float(v) if isinstance(v, float) else v
    return arg


def midi_value(v, event: Event) -> int:
    """A 0–127 value: an integer as written, or a 0..1 field scaled (clipped) to 0–127."""
    if isinstance(v, str):
        x = float(getattr(event, FIELDS[v]))
        return int(round(min(1.0, max(0.0, x)) * 127))
    return v


@dataclass(frozen=True)
class SendOsc:
    address: str
    args: tuple = ()

    def build(self, e: Event):
        return OscMessage(self.address, tuple(fill(a, e) for a in self.args))

    def describe(self) -> str:
        return f"OSC {self.address} {list(self.args)}"


@dataclass(frozen=True)
class SendBundle:
    messages: tuple  # of SendOsc

    def build(self, e: Event):
        return OscBundle(tuple(m.build(e) for m in self.messages))

    def describe(self) -> str:
        return "OSC bundle " + "; ".join(m.describe()[4:] for m in self.messages)


@dataclass(frozen=True)
class PlayNote:
    channel: int
    note: int
    velocity: object = 100      # int 0–127 or "{confidence}"/"{level}"
    length_s: float = 0.0       # note-off after this long (0 with hold: at "left")
    hold: bool = False

    def build(self, e: Event):
        return MidiNote(self.channel, self.note, midi_value(self.velocity, e))

    def release(self):
        return MidiNote(self.channel, self.note, 0, on=False)

    def describe(self) -> str:
        how = "held with the posture" if self.hold else f"for {self.length_s:g} s"
        return f"MIDI note {self.note} ch {self.channel} vel {self.velocity} {how}"


@dataclass(frozen=True)
class SetControl:
    channel: int
    controller: int
    value: object = 127         # int 0–127 or "{confidence}"/"{level}"

    def build(self, e: Event):
        return MidiControl(self.channel, self.controller, midi_value(self.value, e))

    def describe(self) -> str:
        return f"MIDI CC {self.controller} ch {self.channel} = {self.value}"


@dataclass(frozen=True)
class SetProgram:
    channel: int
    program: int

    def build(self, e: Event):
        return MidiProgram(self.channel, self.program)

    def describe(self) -> str:
        return f"MIDI program {self.program} ch {self.channel}"


@dataclass(frozen=True)
class PressKeys:
    keys: tuple
    hold: bool = False          # down at "entered", up at "left"; else a tap

    def build(self, e: Event):
        return KeyAction(self.keys, "down" if self.hold else "tap")

    def release(self):
        return KeyAction(self.keys, "up")

    def describe(self) -> str:
        return f"keys {'+'.join(self.keys)} {'down while held' if self.hold else 'tap'}"


@dataclass(frozen=True)
class SetLights:
    universe: int
    levels: tuple               # ((slot, level), ...)
    fade_s: float = 0.0

    def build(self, e: Event):
        return LightLevels(self.universe, dict(self.levels), self.fade_s)

    def describe(self) -> str:
        return f"lights u{self.universe} {dict(self.levels)} fade {self.fade_s:g} s"


@dataclass(frozen=True)
class SwitchLayer:
    layer: str

    def describe(self) -> str:
        return f"switch to layer {self.layer}"


@dataclass(frozen=True)
class Rule:
    """On an event of kind ``on`` for ``gesture`` (in ``layer``, or in every layer when
    empty), do ``action`` at destination ``to``."""

    gesture: str
    on: str
    to: str
    action: object
    layer: str = ""
    line: int = 0
    every_s: float = 0.0        # on = "held": how often it repeats, s
    once_after_s: float = 0.0   # on = "held": instead, once per hold, when held this long, s (0: repeats)

    # the OSC fields, for callers that only know OSC rules
    @property
    def address(self) -> str:
        return getattr(self.action, "address", "")

    @property
    def args(self) -> tuple:
        return getattr(self.action, "args", ())


@dataclass(frozen=True)
class ControlRule:
    """A continuous control and where its value goes (OSC float or MIDI CC)."""

    name: str
    mix: tuple                  # ((channel name, weight), ...)
    relaxed: object             # float for every channel, or None when a range file is given
    closest: object
    range_file: object          # LevelRange read from the range file, or None
    filter: OneEuroSettings
    only_while: str
    to: str
    action: object              # SendOsc or SetControl
    max_rate_hz: float = 50.0
    min_change: float = 0.005
    layer: str = ""
    line: int = 0

    def settings_for(self, channel_names) -> ControlSettings:
        """The decision stage's settings, with weights and range in the model's channel order."""
        names = tuple(channel_names)
        mix = dict(self.mix)
        weights = tuple(float(mix.get(n, 0.0)) for n in names)
        if self.range_file is not None:
            r = self.range_file
            lo = tuple(r.relaxed[r.channel_names.index(n)] if n in r.channel_names else 0.0 for n in names)
            hi = tuple(r.closest[r.channel_names.index(n)] if n in r.channel_names else 1.0 for n in names)
            rng = LevelRange(names, lo, hi)
        else:
            rng = LevelRange(names, (float(self.relaxed),) * len(names), (float(self.closest),) * len(names))
        return ControlSettings(self.name, weights, rng, self.filter, self.only_while)


@dataclass(frozen=True)
class StatusTarget:
    to: str
    address: str


@dataclass(frozen=True)
class Mapping:
    """A checked mapping file. Stateless: ``bridge.mapping.Router`` does the routing."""

    destinations: dict
    rules: tuple = ()
    controls: tuple = ()
    layers: tuple = ()          # layer names used, in order of first use
    first_layer: str = ""
    safety: SafetySettings = field(default_factory=SafetySettings)
    status: StatusTarget | None = None
    source: str = ""

    def held_every_s(self) -> dict[str, float]:
        """Per posture, how often "held" events are wanted (the shortest any rule asks for;
        a once-per-hold rule asks for its delay, so its first held event comes on time)."""
        out: dict[str, float] = {}
        for r in self.rules:
            if r.on == "held":
                every = r.once_after_s or r.every_s
                out[r.gesture] = min(out.get(r.gesture, every), every)
        return out

    def arming_at_start(self, opened=None) -> str:
        """Whether cues go out from the first recognised gesture, in words for the operator.
        ``opened``: the destinations actually open (a keys destination left out presses nothing)."""
        sf = self.safety
        if not sf.start_armed:
            how = f"hold {sf.arm_posture} {sf.arm_hold_s:g} s or `drape send arm`" if sf.arm_posture else "`drape send arm`"
            return f"disarmed at start: nothing is sent until armed ({how})"
        keys = [n for n, d in self.destinations.items() if d.kind == "keys" and (opened is None or n in opened)]
        return "armed at start" + (f": keys ({', '.join(keys)}) go to whichever window has the focus" if keys else "")

    def dispatches(self, event: Event, layer: str | None = None) -> list:
        """Messages for one gesture event, ignoring arming and held state (offline listings).
        The live path goes through a Router, which also releases held notes and keys."""
        from .messages import Dispatch
        layer = self.first_layer if layer is None else layer
        out = []
        for r in self.rules:
            if r.gesture == event.gesture and r.on == event.kind and r.layer in ("", layer) \
                    and not isinstance(r.action, SwitchLayer):
                out.append(Dispatch(r.to, r.action.build(event), event.t_s))
        return out


def describe_destination(d: Destination) -> str:
    if d.kind in ("osc", "osc-tcp"):
        return f"{d.kind} {d.host}:{d.port}"
    if d.kind == "midi":
        return f"midi port {d.port_name!r}{' (virtual)' if d.virtual else ''}"
    if d.kind == "midi-file":
        return f"midi file {d.path}"
    if d.kind == "keys":
        return f"keys ({d.key_backend})"
    if d.kind == "sacn":
        return f"sacn universe {d.universe} {'to ' + d.host if d.host else 'multicast'}"
    return d.kind

