"""Loading and checking mapping files (TOML). The format is our own:

    [destinations.desk]            # named destinations, declared once; one kind key each:
    osc = "127.0.0.1:9000"         #   osc = "HOST:PORT" (UDP)    osc_tcp = "HOST:PORT"
                                   #   midi = "PORT NAME"          midi_file = "take.mid"
                                   #   keys = "x11" | "uinput"     sacn = UNIVERSE
    [[rule]]
    gesture = "raise_right"        # a class of the model
    on = "gesture"                 # gesture | entered | held (every_s, or once_after_s) | left
    to = "desk"
    address = "/drape/cue"         # what it does: address (+ args), bundle, note, cc,
    args = ["{gesture}", 1]        # program, keys, levels, or set_layer

    [[control]]                    # a continuous control: a channel mix as 0..1
    name = "reach"
    mix = { right_sleeve = 1.0 }
    relaxed = 0.0                  # or range = "wearer.range.json" (from `drape range`)
    closest = 0.05
    to = "synth"
    cc = 1

    [safety]                       # arming and panic
    [status]                       # where armed/disarmed/panic/layer changes are reported
    [layers]                       # first = "act1"

Every problem is reported as ``file:line: key.path: what to change``; all of them at once.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from pathlib import Path
from typing import Callable, Iterator

from ..decisions import OneEuroSettings, RangeError, SafetySettings, load_range
from .keynames import check_key_name
from .messages import Destination
from .rules import (FIELDS, UNIT_FIELDS, ControlRule, Mapping, PlayNote, PressKeys, Rule, SendBundle, SendOsc,
                    SetControl, SetLights, SetProgram, StatusTarget, SwitchLayer)

EVENT_KINDS = ("gesture", "entered", "held", "left")
ACTIONS = ("address", "bundle", "note", "cc", "program", "keys", "levels", "set_layer")
RULE_KEYS = {"gesture", "on", "to", "layer", "every_s", "once_after_s", "args", "velocity", "channel", "length_s", "hold",
             "value", "fade_s", *ACTIONS}
CONTROL_KEYS = {"name", "mix", "range", "relaxed", "closest", "min_cutoff_hz", "beta", "d_cutoff_hz",
                "only_while", "to", "address", "args", "cc", "channel", "max_rate_hz", "min_change", "layer"}
SAFETY_KEYS = {"arm_posture", "arm_hold_s", "idle_disarm_s", "start", "panic_gesture", "panic_disarms"}
DEST_KINDS = {"osc": "osc", "osc_tcp": "osc-tcp", "midi": "midi", "midi_file": "midi-file", "keys": "keys",
              "sacn": "sacn"}
DEST_EXTRA = {"osc": {"broadcast"}, "osc-tcp": {"framing"}, "midi": {"virtual", "api"}, "midi-file": set(),
              "keys": set(), "sacn": {"host", "port", "priority", "label", "safe", "interface", "keepalive_s", "safe_at_start"}}
NEEDS = {  # action → destination kinds that can carry it
    "address": ("osc", "osc-tcp"), "bundle": ("osc", "osc-tcp"), "note": ("midi", "midi-file"),
    "cc": ("midi", "midi-file"), "program": ("midi", "midi-file"), "keys": ("keys",), "levels": ("sacn",),
}
_ADDRESS = re.compile(r"^/[^\s#*,?\[\]{}]*$")
INT32 = (-(2**31), 2**31 - 1)
FLOAT32_MAX = 3.4028234663852886e38  # the largest finite IEEE 754 binary32 value: OSC 'f' arguments


class MappingError(ValueError):
    """Every problem found in a mapping file, one per line: file:line: key: what to change."""

    def __init__(self, problems: list[str]):
        self.problems = problems
        super().__init__("\n".join(problems))


class _Lines:
    """Finds the line of a key inside the n-th table with a given header."""

    def __init__(self, text: str):
        self.lines = text.splitlines()

    def of(self, header: str, nth: int = 0, key: str | None = None) -> int:
        count = -1
        start = None
        for i, line in enumerate(self.lines):
            s = line.strip()
            if s.split("#")[0].replace(" ", "") == header:
                count += 1
                if count == nth:
                    start = i
                    if key is None:
                        return i + 1
                    continue
            if start is not None:
                if s.startswith("["):
                    break
                if key and re.match(rf"^{re.escape(key)}\s*=", s):
                    return i + 1
        return (start + 1) if start is not None else 1


def load_mapping(path: str | Path, classes=None, kinds: dict[str, str] | None = None,
                 channel_names=None) -> Mapping:
    """Read and check a mapping file; raise MappingError listing every problem."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise MappingError([f"{path}: no such mapping file"]) from None
    except UnicodeDecodeError:
        raise MappingError([f"{path}: not a mapping file (binary; a model?): a mapping is TOML text"]) from None
    except OSError as exc:
        raise MappingError([f"{path}: cannot read ({exc})"]) from None
    return parse_mapping(text, str(path), classes, kinds, channel_names, base_dir=path.resolve().parent)


def _near(word: str, known, what: str) -> str:
    near = difflib.get_close_matches(word, list(known), n=1)
    return f"did you mean {near[0]!r}?" if near else f"{what}: {', '.join(known) or 'none'}"


def _unknown(key: str, known, what: str) -> str:
    """'unknown key 'adress'; did you mean 'address'?' or the keys there are."""
    return f"unknown key {key!r}; {_near(str(key), sorted(known), what)}"


TOP_TABLES = ("destinations", "rule", "control", "safety", "status", "layers")


class _Checker:
    def __init__(self, name, lines, classes, kinds, channel_names, base_dir):
        self.name, self.lines = name, lines
        self.classes = classes
        self.known = [c for c in (classes or []) if c != "null"]
        self.kinds = kinds or {}
        self.channel_names = tuple(channel_names) if channel_names is not None else None
        self.base_dir = base_dir
        self.problems: list[str] = []
        self.problem_lines: list[int] = []   # the line of each problem, to list them in file order
        self.layer_refs: list[tuple[int, str, str]] = []  # (line, key path, layer) of each set_layer

    def bad(self, line: int, key: str, what: str) -> None:
        self.problems.append(f"{self.name}:{line}: {key}: {what}")
        self.problem_lines.append(line if isinstance(line, int) else 0)

    # -- small checks returning None when the value is bad (and reported) -------------------
    def gesture(self, at, key, g, posture_only=False):
        if not isinstance(g, str):
            self.bad(at, key, "must be a string, the name of a gesture of the model")
            return None
        if self.classes is not None and g not in self.known:
            self.bad(at, key, f"unknown gesture {g!r}: {_near(g, self.known, 'the model knows')}")
            return None
        if posture_only and self.kinds.get(g, "posture") != "posture":
            postures = [c for c in self.known if self.kinds.get(c) == "posture"]
            self.bad(at, key, f"{g} is a dynamic gesture; this needs a posture ({', '.join(postures)})")
            return None
        return g

    def integer(self, at, key, v, lo, hi, what):
        if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
            self.bad(at, key, f"{what} must be a whole number {lo} to {hi} (got {v!r})")
            return None
        return v

    def number(self, at, key, v, lo, hi, what):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or not lo <= v <= hi:
            self.bad(at, key, f"{what} must be a number {lo:g} to {hi:g} (got {v!r})")
            return None
        return float(v)

    def midi_value(self, at, key, v, what):
        if isinstance(v, str):
            if v in UNIT_FIELDS:
                return v
            self.bad(at, key, f"{what} is 0 to 127 or one of {', '.join(UNIT_FIELDS)} (scaled to 0–127) (got {v!r})")
            return None
        return self.integer(at, key, v, 0, 127, f"MIDI {what}")

    def host_port(self, at, key, target, example="127.0.0.1:9000"):
        m = re.match(r"^\s*([^:\s]+):(\d+)\s*$", target) if isinstance(target, str) else None
        if not m:
            self.bad(at, key, f'write "HOST:PORT", e.g. "{example}" (got {target!r})')
            return None
        port = int(m.group(2))
        if not 1 <= port <= 65535:
            self.bad(at, key, f"port {port} out of range: use 1 to 65535")
            return None
        return m.group(1), port

    def address(self, at, key, a):
        if not isinstance(a, str) or not _ADDRESS.match(a):
            self.bad(at, key, f"OSC addresses start with '/' and hold no spaces or # * , ? [ ] {{ }} (got {a!r})")
            return None
        return a

    def osc_args(self, at, key, args):
        if not isinstance(args, list):
            self.bad(at, key, "must be a list, e.g. args = [1, 0.5, \"go\"]")
            return None
        for a in args:
            if isinstance(a, float) and math.isfinite(a) and abs(a) > FLOAT32_MAX:
                self.bad(at, key, f"{a} does not fit an OSC float32 (at most ±{FLOAT32_MAX:.7g})")
            if isinstance(a, (bool, float)):
                continue
            if isinstance(a, int):
                if not INT32[0] <= a <= INT32[1]:
                    self.bad(at, key, f"{a} does not fit an OSC int32")
            elif isinstance(a, str):
                if a.startswith("{") and a.endswith("}") and a not in FIELDS:
                    self.bad(at, key, f"unknown field {a}; use one of {', '.join(FIELDS)}")
            else:
                self.bad(at, key, f"{a!r}: arguments are numbers, strings or booleans")
        return tuple(args)


def parse_mapping(text: str, name: str = "<mapping>", classes=None, kinds: dict[str, str] | None = None,
                  channel_names=None, base_dir: Path | None = None) -> Mapping:
    """Check mapping text against the model's classes and channels (when given); build a Mapping.

    ``base_dir`` is where relative paths in the file (range files) are looked up.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise MappingError([f"{name}:{m.group(1) if m else 1}: not valid TOML ({exc})"]) from None
    ck = _Checker(name, _Lines(text), classes, kinds, channel_names, base_dir or Path.cwd())
    for k in doc:
        if k not in TOP_TABLES:
            near = difflib.get_close_matches(k, TOP_TABLES, n=1)
            ck.bad(1, k, f"unknown top-level table {k!r}; " + (f"did you mean {near[0]!r}?" if near else
                         "use [destinations.NAME], [[rule]], [[control]], [safety], [status] or [layers]"))
    dests, declared = _destinations(ck, doc.get("destinations", {}))
    rules = _rules(ck, doc.get("rule", []), dests, declared)
    controls = _controls(ck, doc.get("control", []), dests, declared)
    safety = _safety(ck, doc.get("safety", {}))
    status = _status(ck, doc.get("status"), dests, declared)
    layers: list[str] = []
    for item in list(rules) + list(controls):
        if item.layer and item.layer not in layers:
            layers.append(item.layer)
    for line, key, layer in ck.layer_refs:
        if layer not in layers:
            ck.bad(line, key, f"no rule is in layer {layer!r}: {_near(layer, layers, 'layers in this file')}")
    first = ""
    lay = doc.get("layers", {})
    if not isinstance(lay, dict):
        ck.bad(1, "layers", 'write [layers] with first = "NAME"')
        lay = {}
    for k in set(lay) - {"first"}:
        ck.bad(ck.lines.of("[layers]", 0, k), f"layers.{k}",
               f"unknown key {k!r}; " + ("did you mean 'first'?" if difflib.get_close_matches(k, ["first"]) else
                                         '[layers] has first = "NAME"'))
    if "first" in lay:
        first = lay["first"]
        if first not in layers:
            ck.bad(ck.lines.of("[layers]", 0, "first"), "layers.first",
                   f"no rule is in layer {first!r}: {_near(str(first), layers, 'layers in this file')}")
    elif layers:
        first = layers[0]
    if ck.problems:   # in the file's order, as an editor walks it (checks run table by table)
        order = sorted(range(len(ck.problems)), key=lambda i: ck.problem_lines[i])
        raise MappingError([ck.problems[i] for i in order])
    return Mapping(dests, tuple(rules), tuple(controls), tuple(layers), first, safety, status, name)


def _destinations(ck: _Checker, dests) -> tuple[dict, dict]:
    out: dict[str, Destination] = {}
    if not isinstance(dests, dict):
        ck.bad(1, "destinations", "must be tables [destinations.NAME]")
        return out, {}
    for dname, d in dests.items():
        header = f"[destinations.{dname}]"
        path = f"destinations.{dname}"
        kinds = [k for k in DEST_KINDS if isinstance(d, dict) and k in d]
        if len(kinds) != 1:
            extras = set().union(*DEST_EXTRA.values())
            typos = [(k, difflib.get_close_matches(k, list(DEST_KINDS), n=1)) for k in (d if isinstance(d, dict) else {})
                     if k not in DEST_KINDS and k not in extras]
            hint = "".join(f"; unknown key {k!r}, did you mean {near[0]!r}?" for k, near in typos if near)
            ck.bad(ck.lines.of(header), path, f"needs exactly one of {', '.join(DEST_KINDS)} "
                                              f"(e.g. osc = \"127.0.0.1:9000\"){'; found ' + ', '.join(kinds) if kinds else ''}"
                                              + hint)
            continue
        key = kinds[0]
        kind = DEST_KINDS[key]
        at = lambda k=key: ck.lines.of(header, 0, k)
        for k in sorted(set(d) - {key} - DEST_EXTRA[kind]):
            near = difflib.get_close_matches(k, sorted(DEST_EXTRA[kind]), n=1)
            ck.bad(at(k), f"{path}.{k}", f"unknown key {k!r} for {key} destinations"
                                          + (f"; did you mean {near[0]!r}?" if near else
                                             f"{'; it takes ' + ', '.join(sorted(DEST_EXTRA[kind])) if DEST_EXTRA[kind] else ''}"))
        v = d[key]
        if kind in ("osc", "osc-tcp"):
            hp = ck.host_port(at(), f"{path}.{key}", v)
            if hp is None:
                continue
            framing = d.get("framing", "1.1")
            if framing not in ("1.0", "1.1"):
                ck.bad(at("framing"), f"{path}.framing", f'use "1.1" (SLIP) or "1.0" (length prefix) (got {framing!r})')
                continue
            out[dname] = Destination(dname, kind, hp[0], hp[1], broadcast=bool(d.get("broadcast", False)),
                                     osc_framing=framing)
        elif kind == "midi":
            if not isinstance(v, str) or not v:
                ck.bad(at(), f"{path}.midi", f'the MIDI port name, e.g. midi = "drape out" (got {v!r})')
                continue
            out[dname] = Destination(dname, kind, port_name=v, virtual=bool(d.get("virtual", False)),
                                     midi_api=str(d.get("api", "")))
        elif kind == "midi-file":
            if not isinstance(v, str) or not v.endswith((".mid", ".midi")):
                ck.bad(at(), f"{path}.midi_file", f'a file name ending in .mid (got {v!r})')
                continue
            out[dname] = Destination(dname, kind, path=str((ck.base_dir / v).resolve()))  # next to the mapping
        elif kind == "keys":
            if v not in ("x11", "uinput"):
                ck.bad(at(), f"{path}.keys", f'use "x11" (the focused window) or "uinput" (Linux input layer) (got {v!r})')
                continue
            out[dname] = Destination(dname, kind, key_backend=v)
        elif kind == "sacn":
            u = ck.integer(at(), f"{path}.sacn", v, 1, 63999, "sACN universe")
            port = ck.integer(at("port"), f"{path}.port", d.get("port", 5568), 1, 65535, "port")
            prio = ck.integer(at("priority"), f"{path}.priority", d.get("priority", 100), 0, 200, "sACN priority")
            safe = _slots(ck, at("safe"), f"{path}.safe", d.get("safe", {}))
            at_start = d.get("safe_at_start", True)
            if not isinstance(at_start, bool):
                ck.bad(at("safe_at_start"), f"{path}.safe_at_start", f"must be true or false (got {at_start!r})")
                continue
            if None in (u, port, prio, safe):
                continue
            out[dname] = Destination(dname, kind, host=str(d.get("host", "")), port=port, universe=u,
                                     priority=prio, source_label=str(d.get("label", "drape")),
                                     safe_levels=tuple(sorted(safe.items())), interface=str(d.get("interface", "")),
                                     keepalive_s=float(d.get("keepalive_s", 0.8)), safe_at_start=at_start)
    return out, dests


def _slots(ck: _Checker, at, key, levels):
    if not isinstance(levels, dict) or not levels and key.endswith("levels"):
        ck.bad(at, key, "write slot = level pairs, e.g. { 1 = 255, 2 = 128 }")
        return None
    out = {}
    for slot, level in levels.items():
        if not slot.isdigit() or not 1 <= int(slot) <= 512:
            ck.bad(at, key, f"DMX slot {slot!r} must be 1 to 512")
            return None
        if ck.integer(at, key, level, 0, 255, f"level of slot {slot}") is None:
            return None
        out[int(slot)] = level
    return out


def _dest_ok(ck, at, path, to, dests, declared, action) -> bool:
    if not isinstance(to, str):
        ck.bad(at, path, f"the name of a destination, a string (got {to!r})")
        return False
    if to not in dests:
        if to not in declared:
            ck.bad(at, path, f"unknown destination {to!r}; declare [destinations.{to}] or use one of "
                             f"{', '.join(declared) or 'none declared'}")
        return False
    need = NEEDS[action]
    if dests[to].kind not in need:
        ck.bad(at, path, f"destination {to!r} is {dests[to].kind}; {action} needs "
                         f"{'an' if need[0] in ('osc', 'osc-tcp', 'sacn') else 'a'} {' or '.join(need)} destination")
        return False
    return True


def _tables(ck: _Checker, raw, name: str, known) -> Iterator[tuple[int, dict, Callable, str]]:
    """Each [[name]] table of ``raw`` as (index, table, at(key) → line, path), after
    reporting a value that is not a table and keys outside ``known``."""
    if not isinstance(raw, list):
        ck.bad(1, name, f"write each {name} as a [[{name}]] table")
        return
    for i, t in enumerate(raw):
        def at(key=None, i=i):
            return ck.lines.of(f"[[{name}]]", i, key)
        path = f"{name}[{i + 1}]"
        if not isinstance(t, dict):
            ck.bad(at(), path, f"write each {name} as a [[{name}]] table")
            continue
        for k in sorted(set(t) - known):
            ck.bad(at(k), f"{path}.{k}", _unknown(k, known, f"a {name} has"))
        yield i, t, at, path


def _rules(ck: _Checker, raw, dests, declared) -> list[Rule]:
    rules = []
    numbers = []  # each kept rule's number in the file (rule[N]), for naming a duplicate's twin
    for i, r, at, path in _tables(ck, raw, "rule", RULE_KEYS):
        acts = [a for a in ACTIONS if a in r]
        if "gesture" not in r:
            ck.bad(at(), f"{path}.gesture", "missing: which gesture of the model this rule answers")
        if not acts:
            ck.bad(at(), f"{path}.address", "missing: give the rule what to do: address (OSC message), bundle, "
                                            "note, cc, program, keys, levels or set_layer")
        elif len(acts) > 1:
            ck.bad(at(acts[1]), f"{path}.{acts[1]}", f"a rule does one thing; this one has {' and '.join(acts)}: "
                                                     "split it into two rules")
        if "to" not in r and acts and acts[0] != "set_layer":
            ck.bad(at(), f"{path}.to", "missing: the destination to send to")
        if "gesture" not in r or len(acts) != 1 or ("to" not in r and acts[0] != "set_layer"):
            continue
        act = acts[0]
        gesture = ck.gesture(at("gesture"), f"{path}.gesture", r["gesture"])
        kind = ck.kinds.get(gesture)
        on = r.get("on", "entered" if kind == "posture" else "gesture")
        if on not in EVENT_KINDS:
            ck.bad(at("on"), f"{path}.on", f"{on!r} is not an event; use one of {', '.join(EVENT_KINDS)}")
        elif kind == "posture" and on == "gesture":
            ck.bad(at("on"), f"{path}.on", f"{gesture} is a posture: use on = \"entered\", \"held\" or \"left\"")
        elif kind == "gesture" and on != "gesture":
            ck.bad(at("on"), f"{path}.on", f"{gesture} is a dynamic gesture: use on = \"gesture\"")
        every_s = once_after_s = 0.0
        if on == "held" and "once_after_s" in r:
            once_after_s = ck.number(at("once_after_s"), f"{path}.once_after_s", r["once_after_s"], 0.05, 3600,
                                     "once_after_s")
            if "every_s" in r:
                ck.bad(at("every_s"), f"{path}.every_s", "give every_s (repeats while held) or once_after_s "
                                                         "(once per hold), not both")
        elif on == "held":
            every_s = ck.number(at("every_s"), f"{path}.every_s", r.get("every_s", 1.0), 0.05, 3600, "every_s")
        else:
            if "every_s" in r:
                ck.bad(at("every_s"), f"{path}.every_s", 'only rules with on = "held" repeat; remove it or set on = "held"')
            if "once_after_s" in r:
                ck.bad(at("once_after_s"), f"{path}.once_after_s", 'once_after_s is for rules with on = "held" '
                                                                   '(once per hold, after that long); remove it or set on = "held"')
        hold = r.get("hold", False)
        if not isinstance(hold, bool):
            ck.bad(at("hold"), f"{path}.hold", "must be true or false")
            hold = False
        if hold and (act not in ("note", "keys") or on != "entered"):
            ck.bad(at("hold"), f"{path}.hold", 'hold = true is for a note or keys on = "entered" of a posture '
                                               '(they are let go when the posture is left)')
        layer = r.get("layer", "")
        if not isinstance(layer, str):
            ck.bad(at("layer"), f"{path}.layer", "the layer's name, a string")
            layer = ""
        to = r.get("to", "")
        # keep checking the rest even when the destination is bad, so every problem shows at once
        dest_ok = act == "set_layer" or _dest_ok(ck, at("to"), f"{path}.to", to, dests, declared, act)
        channel = ck.integer(at("channel"), f"{path}.channel", r.get("channel", 1), 1, 16, "MIDI channel") \
            if act in ("note", "cc", "program") else 1
        action = None
        if act == "address":
            a = ck.address(at("address"), f"{path}.address", r["address"])
            args = ck.osc_args(at("args"), f"{path}.args", r.get("args", []))
            if a is not None and args is not None:
                action = SendOsc(a, args)
        elif act == "bundle":
            action = _bundle(ck, at("bundle"), f"{path}.bundle", r["bundle"])
        elif act == "note":
            note = ck.integer(at("note"), f"{path}.note", r["note"], 0, 127, "MIDI note")
            vel = ck.midi_value(at("velocity"), f"{path}.velocity", r.get("velocity", 100), "velocity")
            length = ck.number(at("length_s"), f"{path}.length_s", r.get("length_s", 0.0 if hold else 0.5), 0, 600, "length_s")
            if length == 0 and not hold:
                ck.bad(at("length_s"), f"{path}.length_s", "a note needs length_s > 0, or hold = true on a posture")
            elif None not in (note, vel, length, channel):
                action = PlayNote(channel, note, vel, length, hold)
        elif act == "cc":
            cc = ck.integer(at("cc"), f"{path}.cc", r["cc"], 0, 127, "MIDI controller")
            val = ck.midi_value(at("value"), f"{path}.value", r.get("value", 127), "value")
            if None not in (cc, val, channel):
                action = SetControl(channel, cc, val)
        elif act == "program":
            prog = ck.integer(at("program"), f"{path}.program", r["program"], 0, 127, "MIDI program")
            if None not in (prog, channel):
                action = SetProgram(channel, prog)
        elif act == "keys":
            keys = r["keys"]
            keys = [keys] if isinstance(keys, str) else keys
            if not isinstance(keys, list) or not keys:
                ck.bad(at("keys"), f"{path}.keys", 'a key name or a list for a combination, e.g. keys = ["ctrl", "s"]')
            else:
                probs = [p for p in (check_key_name(k) for k in keys) if p]
                for p in probs:
                    ck.bad(at("keys"), f"{path}.keys", p)
                if not probs:
                    action = PressKeys(tuple(keys), hold)
        elif act == "levels":
            levels = _slots(ck, at("levels"), f"{path}.levels", r["levels"])
            fade = ck.number(at("fade_s"), f"{path}.fade_s", r.get("fade_s", 0.0), 0, 3599, "fade_s")
            if levels is not None and fade is not None and dest_ok:
                action = SetLights(dests[to].universe, tuple(sorted(levels.items())), fade)
        elif act == "set_layer":
            if not isinstance(r["set_layer"], str) or not r["set_layer"]:
                ck.bad(at("set_layer"), f"{path}.set_layer", "the name of the layer to switch to")
            else:
                action = SwitchLayer(r["set_layer"])
                ck.layer_refs.append((at("set_layer"), f"{path}.set_layer", r["set_layer"]))
        if action is not None and dest_ok and gesture is not None and None not in (every_s, once_after_s):
            rule = Rule(gesture, on, to, action, layer, at(), every_s, once_after_s)
            twin = next((k for k, other in enumerate(rules) if _same_cue(other, rule)), None)
            if twin is not None:
                # a copied rule sends its cue twice on one event (a cue list skips one)
                ck.bad(at(), path, f"does the same as rule[{numbers[twin]}] (line {rules[twin].line}) on the same "
                                   "event, so the cue would go out twice; remove one of them")
            else:
                rules.append(rule)
                numbers.append(i + 1)
    return rules


def _same_cue(a: Rule, b: Rule) -> bool:
    """Whether two rules send the same thing on the same event in some layer (a rule without
    a layer is in every layer)."""
    return ((a.gesture, a.on, a.to, a.action, a.every_s, a.once_after_s)
            == (b.gesture, b.on, b.to, b.action, b.every_s, b.once_after_s)
            and (a.layer == b.layer or "" in (a.layer, b.layer)))


def _bundle(ck, at, key, items):
    if not isinstance(items, list) or not items:
        ck.bad(at, key, 'a list of messages, e.g. bundle = [{ address = "/a", args = [1] }, { address = "/b" }]')
        return None
    msgs = []
    for j, m in enumerate(items):
        if not isinstance(m, dict) or "address" not in m or set(m) - {"address", "args"}:
            ck.bad(at, f"{key}[{j + 1}]", "each message is { address = \"/...\", args = [...] }")
            return None
        a = ck.address(at, f"{key}[{j + 1}].address", m["address"])
        args = ck.osc_args(at, f"{key}[{j + 1}].args", m.get("args", []))
        if a is None or args is None:
            return None
        msgs.append(SendOsc(a, args))
    return SendBundle(tuple(msgs))


def _controls(ck: _Checker, raw, dests, declared) -> list[ControlRule]:
    out = []
    for i, c, at, path in _tables(ck, raw, "control", CONTROL_KEYS):
        missing = [k for k in ("name", "mix", "to") if k not in c]
        for k in missing:
            ck.bad(at(), f"{path}.{k}", "missing")
        acts = [k for k in ("address", "cc") if k in c]
        if len(acts) != 1:
            ck.bad(at(), f"{path}.address", "a control sends either address (an OSC float) or cc (MIDI), one of them")
        if missing or len(acts) != 1:
            continue
        n_bad = len(ck.problems)
        mix = c["mix"]
        if not isinstance(mix, dict) or not mix:
            ck.bad(at("mix"), f"{path}.mix", "channel = weight pairs, e.g. mix = { right_sleeve = 1.0 }")
            mix = {}
        for ch, w in mix.items():
            if ck.channel_names is not None and ch not in ck.channel_names:
                ck.bad(at("mix"), f"{path}.mix", f"unknown channel {ch!r}: {_near(ch, ck.channel_names, 'the model has')}")
            ck.number(at("mix"), f"{path}.mix.{ch}", w, 0, 1e6, "a weight")
        if mix and sum(w for w in mix.values() if isinstance(w, (int, float))) <= 0:
            ck.bad(at("mix"), f"{path}.mix", "at least one weight must be above 0")
        rng = relaxed = closest = None
        if "range" in c:
            if "relaxed" in c or "closest" in c:
                ck.bad(at("range"), f"{path}.range", "give either range (a file) or relaxed and closest, not both")
            else:
                try:
                    rng = load_range(ck.base_dir / str(c["range"]))
                    gone = [ch for ch in mix if ch not in rng.channel_names]
                    if gone:
                        ck.bad(at("range"), f"{path}.range", f"the range file has no {', '.join(gone)}: capture it again")
                except RangeError as exc:
                    ck.bad(at("range"), f"{path}.range", str(exc))
        else:
            relaxed = ck.number(at("relaxed"), f"{path}.relaxed", c.get("relaxed", 0.0), -10, 10, "relaxed (ΔC/C0)")
            closest = ck.number(at("closest"), f"{path}.closest", c.get("closest", 0.05), -10, 10, "closest (ΔC/C0)")
            if relaxed is not None and closest is not None and not closest > relaxed:
                ck.bad(at("closest"), f"{path}.closest", "must be above relaxed; or run `drape range` and give range = FILE")
        f = [ck.number(at(k), f"{path}.{k}", c.get(k, d), lo, 1e6, k)
             for k, d, lo in (("min_cutoff_hz", 1.0, 1e-3), ("beta", 0.0, 0.0), ("d_cutoff_hz", 1.0, 1e-3))]
        only = c.get("only_while", "")
        if only:
            only = ck.gesture(at("only_while"), f"{path}.only_while", only, posture_only=True) or ""
        rate = ck.number(at("max_rate_hz"), f"{path}.max_rate_hz", c.get("max_rate_hz", 50.0), 0.1, 1000, "max_rate_hz")
        change = ck.number(at("min_change"), f"{path}.min_change", c.get("min_change", 0.005), 0, 1, "min_change")
        to = c["to"]
        act = acts[0]
        _dest_ok(ck, at("to"), f"{path}.to", to, dests, declared, act)
        if act == "address":
            a = ck.address(at("address"), f"{path}.address", c["address"])
            args = ck.osc_args(at("args"), f"{path}.args", c.get("args", ["{level}"]))
            action = SendOsc(a, args)
        else:
            cc = ck.integer(at("cc"), f"{path}.cc", c["cc"], 0, 127, "MIDI controller")
            ch = ck.integer(at("channel"), f"{path}.channel", c.get("channel", 1), 1, 16, "MIDI channel")
            action = SetControl(ch, cc, "{level}")
        if not isinstance(c["name"], str) or not c["name"]:
            ck.bad(at("name"), f"{path}.name", "a name for the control, e.g. \"reach\"")
        if len(ck.problems) > n_bad:
            continue
        out.append(ControlRule(c["name"], tuple(sorted((k, float(v)) for k, v in mix.items())), relaxed, closest, rng,
                               OneEuroSettings(f[0], f[1], f[2]), only, to, action, rate, change,
                               str(c.get("layer", "")), at()))
    return out


def _safety(ck: _Checker, s) -> SafetySettings:
    if not isinstance(s, dict):
        ck.bad(1, "safety", "write [safety] as a table")
        return SafetySettings()
    at = lambda k=None: ck.lines.of("[safety]", 0, k)
    for k in sorted(set(s) - SAFETY_KEYS):
        ck.bad(at(k), f"safety.{k}", _unknown(k, SAFETY_KEYS, "[safety] has"))
    arm = s.get("arm_posture", "")
    if arm:
        arm = ck.gesture(at("arm_posture"), "safety.arm_posture", arm, posture_only=True) or ""
    panic = s.get("panic_gesture", "")
    if panic:
        panic = ck.gesture(at("panic_gesture"), "safety.panic_gesture", panic) or ""
    hold = ck.number(at("arm_hold_s"), "safety.arm_hold_s", s.get("arm_hold_s", 2.0), 0, 60, "arm_hold_s")
    idle = ck.number(at("idle_disarm_s"), "safety.idle_disarm_s", s.get("idle_disarm_s", 0.0), 0, 86400, "idle_disarm_s")
    start = s.get("start", "disarmed" if arm else "armed")
    if start not in ("armed", "disarmed"):
        ck.bad(at("start"), "safety.start", f'use "armed" or "disarmed" (got {start!r})')
    disarms = s.get("panic_disarms", True)
    if not isinstance(disarms, bool):
        ck.bad(at("panic_disarms"), "safety.panic_disarms", "must be true or false")
        disarms = True
    return SafetySettings(arm, hold or 0.0, idle or 0.0, start != "disarmed", panic, disarms)


def _status(ck: _Checker, s, dests, declared) -> StatusTarget | None:
    if s is None:
        return None
    at = lambda k=None: ck.lines.of("[status]", 0, k)
    if not isinstance(s, dict) or "to" not in s:
        ck.bad(at(), "status", 'needs to = "DESTINATION" and address = "/..." (an OSC destination)')
        return None
    for k in sorted(set(s) - {"to", "address"}):
        ck.bad(at(k), f"status.{k}", _unknown(k, ("to", "address"), "[status] has"))
    if not _dest_ok(ck, at("to"), "status.to", s["to"], dests, declared, "address"):
        return None
    a = ck.address(at("address"), "status.address", s.get("address", "/drape/status"))
    return StatusTarget(s["to"], a) if a else None
