"""Small immutable values passed from mapping to outputs.

Each value checks its own ranges when made, so an output never sees a note 200 or a
channel 0. Units are in the field names (``fade_s``, ``timetag`` in Unix seconds).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType


def _check_int(what: str, value, low: int, high: int) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise ValueError(f"{what} must be an integer {low} to {high} (got {value!r})")


@dataclass(frozen=True)
class OscMessage:
    """An OSC message: address and typed arguments (int → i, float → f, str → s, bool → T/F)."""

    address: str
    args: tuple = ()


# OSC time tags are NTP times: 32-bit seconds since 1900, which run out 2**32 s later (2036).
LAST_TIMETAG_S = 2**32 - 2208988800


@dataclass(frozen=True)
class OscBundle:
    """OSC messages (or nested bundles) to be applied together.

    ``timetag`` is the moment to apply them, in Unix seconds (``time.time()`` scale), or
    None for "immediately".
    """

    messages: tuple = ()
    timetag: float | None = None

    def __post_init__(self):
        for m in self.messages:
            if not isinstance(m, (OscMessage, OscBundle)):
                raise ValueError(f"a bundle holds OscMessage or OscBundle values (got {type(m).__name__})")
        if self.timetag is not None and not 0 <= self.timetag < LAST_TIMETAG_S:
            raise ValueError(f"timetag is Unix seconds from 0 to {LAST_TIMETAG_S} (NTP era 0 ends "
                             f"in February 2036; got {self.timetag!r})")


@dataclass(frozen=True)
class MidiNote:
    """A MIDI note on (``on=True``) or off. Channel 1–16 as printed on gear; note, velocity 0–127."""

    channel: int
    note: int
    velocity: int = 100
    on: bool = True

    def __post_init__(self):
        _check_int("MIDI channel", self.channel, 1, 16)
        _check_int("MIDI note", self.note, 0, 127)
        _check_int("MIDI velocity", self.velocity, 0, 127)


@dataclass(frozen=True)
class MidiControl:
    """A MIDI control change: channel 1–16, controller 0–127, value 0–127."""

    channel: int
    controller: int
    value: int

    def __post_init__(self):
        _check_int("MIDI channel", self.channel, 1, 16)
        _check_int("MIDI controller", self.controller, 0, 127)
        _check_int("MIDI controller value", self.value, 0, 127)


@dataclass(frozen=True)
class MidiProgram:
    """A MIDI program change: channel 1–16, program 0–127 (gear often prints it as 1–128)."""

    channel: int
    program: int

    def __post_init__(self):
        _check_int("MIDI channel", self.channel, 1, 16)
        _check_int("MIDI program", self.program, 0, 127)


KEY_ACTIONS = ("tap", "down", "up")


@dataclass(frozen=True)
class KeyAction:
    """Keys to act on, by our own key names (see ``bridge.mapping.keynames``).

    ``tap``: press the keys in order, then release them in reverse (a combination such as
    ("ctrl", "s")). ``down``: press and keep holding until an ``up`` for the same keys, a
    ``Release``, or the output closes. ``up``: release the named keys.
    """

    keys: tuple[str, ...]
    action: str = "tap"

    def __post_init__(self):
        if self.action not in KEY_ACTIONS:
            raise ValueError(f"key action must be one of {', '.join(KEY_ACTIONS)} (got {self.action!r})")
        if isinstance(self.keys, str) or not self.keys:
            raise ValueError("keys is a non-empty tuple of key names, e.g. ('ctrl', 's')")
        from .keynames import check_key_name
        for k in self.keys:
            problem = check_key_name(k)
            if problem:
                raise ValueError(problem)


DMX_SLOTS = 512


@dataclass(frozen=True)
class LightLevels:
    """Levels for slots of one sACN universe, reached over ``fade_s`` seconds.

    ``levels`` is either a dict {slot 1–512: level 0–255} (slots not named keep their
    level) or a tuple of levels for slots 1, 2, 3, … in order.
    """

    universe: int
    levels: object
    fade_s: float = 0.0

    def __post_init__(self):
        _check_int("sACN universe", self.universe, 1, 63999)
        if isinstance(self.levels, dict) or isinstance(self.levels, MappingProxyType):
            items = dict(self.levels)
        elif isinstance(self.levels, (tuple, list)):
            items = {i + 1: v for i, v in enumerate(self.levels)}
        else:
            raise ValueError("levels is a dict {slot: level} or a tuple of levels from slot 1")
        for slot, level in items.items():
            _check_int("DMX slot", slot, 1, DMX_SLOTS)
            _check_int(f"level of slot {slot}", level, 0, 255)
        if not (self.fade_s >= 0 and self.fade_s < 3600):
            raise ValueError(f"fade_s must be 0 to 3600 seconds (got {self.fade_s!r})")
        # stored read-only so the value stays immutable
        object.__setattr__(self, "levels", MappingProxyType(items))

    def __hash__(self):
        return hash((self.universe, tuple(sorted(self.levels.items())), self.fade_s))


@dataclass(frozen=True)
class Release:
    """Panic: release everything held (keys up, notes off, lights to the safe state).

    An output that holds nothing ignores it. ``disarm=True`` also makes a key output ignore
    key actions until an ``Arm``.
    """

    disarm: bool = False


@dataclass(frozen=True)
class Arm:
    """Let a key output act on key actions again after a disarming ``Release``."""


DESTINATION_KINDS = ("osc", "osc-tcp", "midi", "midi-file", "keys", "sacn")


@dataclass(frozen=True)
class Destination:
    """Where messages go, declared once in a mapping file and referred to by name.

    Which fields matter depends on ``kind``:

    - ``osc``: host, port (UDP); ``broadcast`` to allow a broadcast address.
    - ``osc-tcp``: host, port; ``osc_framing`` "1.1" (SLIP, default) or "1.0" (length prefix).
    - ``midi``: ``port_name``; ``virtual`` to create the port instead of opening one;
      ``midi_api`` a mido backend such as "mido.backends.rtmidi/UNIX_JACK" (empty: mido's default).
    - ``midi-file``: ``path`` of the Standard MIDI File written when the output closes.
    - ``keys``: ``key_backend`` "x11" (pynput, the focused window) or "uinput" (Linux kernel).
    - ``sacn``: host (unicast) or empty for multicast; ``universe``, ``priority`` 0–200,
      ``source_label``, ``safe_levels`` ((slot, level), …) for stop and panic, ``interface``
      (local IPv4 address for multicast), ``keepalive_s`` between repeats of steady levels,
      ``safe_at_start`` to send the safe look as soon as the output opens (receivers see the
      source from the start, not from the first cue).
    """

    name: str
    kind: str        # one of DESTINATION_KINDS
    host: str = ""
    port: int = 0
    broadcast: bool = False
    osc_framing: str = "1.1"
    port_name: str = ""
    virtual: bool = False
    midi_api: str = ""
    path: str = ""
    key_backend: str = "x11"
    universe: int = 1
    priority: int = 100
    source_label: str = "drape"
    safe_levels: tuple = field(default=())
    interface: str = ""
    keepalive_s: float = 0.8
    safe_at_start: bool = True


@dataclass(frozen=True)
class Dispatch:
    """A message bound for a named destination, with the time its event was decided."""

    destination: str
    message: object
    decided_s: float = 0.0
