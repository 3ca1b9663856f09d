"""Loading and checking mapping files (TOML).

Format (our own)::

    [destinations.desk]        # a named destination, declared once
    osc = "127.0.0.1:9000"     # OSC over UDP, host:port

    [[rule]]
    gesture = "raise_right"    # a class of the model
    on = "gesture"             # "gesture" for dynamic ones; "entered" or "left" for postures
    to = "desk"
    address = "/drape/cue"
    args = ["{gesture}", "{confidence}", 1]

Arguments: TOML integers become OSC int32, floats float32, strings strings, booleans T/F;
the strings "{gesture}", "{confidence}", "{duration_s}", "{garment}" are filled from the event.
"""

from __future__ import annotations

import difflib
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from ..decisions import Event
from .messages import Destination, Dispatch, OscMessage, Rule

EVENT_KINDS = ("gesture", "entered", "left")
FIELDS = {"{gesture}": "gesture", "{confidence}": "confidence", "{duration_s}": "duration_s", "{garment}": "garment"}
RULE_KEYS = {"gesture", "on", "to", "address", "args"}
_ADDRESS = re.compile(r"^/[^\s#*,?\[\]{}]*$")
INT32 = (-(2**31), 2**31 - 1)


class MappingError(ValueError):
    """Every problem found in a mapping file, one per line: file:line: key: what to change."""

    def __init__(self, problems: list[str]):
        self.problems = problems
        super().__init__("\n".join(problems))


@dataclass(frozen=True)
class Mapping:
    """Destinations and rules; `dispatches` turns one event into the messages it sends."""

    destinations: dict[str, Destination]
    rules: tuple[Rule, ...]
    source: str = ""

    def dispatches(self, event: Event) -> list[Dispatch]:
        out = []
        for r in self.rules:
            if r.gesture == event.gesture and r.on == event.kind:
                args = tuple(_fill(a, event) for a in r.args)
                out.append(Dispatch(r.to, OscMessage(r.address, args), event.t_s))
        return out


def _fill(arg, event: Event):
    if isinstance(arg, str) and arg in FIELDS:
        v = getattr(event, FIELDS[arg])
        return float(v) if isinstance(v, float) else v
    return arg


class _Lines:
    """Finds the line of a key inside the n-th [[rule]] or a [destinations.X] table."""

    def __init__(self, text: str):
        self.lines = text.splitlines()

    def of(self, header: str, nth: int = 0, key: str | None = None) -> int:
        count = -1
        start = None
        for i, line in enumerate(self.lines):
            s = line.strip()
            if s.replace(" ", "") == header:
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


def load_mapping(path: str | Path, classes=None, kinds: dict[str, str] | None = None) -> Mapping:
    """Read and check a mapping file; raise MappingError listing every problem."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise MappingError([f"{path}: no such mapping file"]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise MappingError([f"{path}: cannot read ({exc})"]) from None
    return parse_mapping(text, str(path), classes, kinds)


def parse_mapping(text: str, name: str = "<mapping>", classes=None, kinds: dict[str, str] | None = None) -> Mapping:
    """Check mapping text against the model's classes (when given) and build a Mapping."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise MappingError([f"{name}:{m.group(1) if m else 1}: not valid TOML ({exc})"]) from None
    lines = _Lines(text)
    problems: list[str] = []
    known = [c for c in (classes or []) if c != "null"]

    def bad(line: int, key: str, what: str):
        problems.append(f"{name}:{line}: {key}: {what}")

    for k in doc:
        if k not in ("destinations", "rule"):
            bad(1, k, "unknown top-level table; use [destinations.NAME] and [[rule]]")
    destinations: dict[str, Destination] = {}
    dests = doc.get("destinations", {})
    if not isinstance(dests, dict):
        bad(1, "destinations", "must be tables [destinations.NAME]")
        dests = {}
    for dname, d in dests.items():
        header = f"[destinations.{dname}]"
        if not isinstance(d, dict) or "osc" not in d:
            bad(lines.of(header), f"destinations.{dname}", 'needs osc = "HOST:PORT"')
            continue
        at = lines.of(header, 0, "osc")
        target = d["osc"]
        m = re.match(r"^\s*([^:\s]+):(\d+)\s*$", target) if isinstance(target, str) else None
        if not m:
            bad(at, f"destinations.{dname}.osc", f'write "HOST:PORT", e.g. "127.0.0.1:9000" (got {target!r})')
            continue
        port = int(m.group(2))
        if not 1 <= port <= 65535:
            bad(at, f"destinations.{dname}.osc", f"port {port} out of range: use 1 to 65535")
            continue
        destinations[dname] = Destination(dname, "osc", m.group(1), port)
    raw_rules = doc.get("rule", [])
    if not isinstance(raw_rules, list):
        bad(1, "rule", "write each rule as a [[rule]] table")
        raw_rules = []
    rules = []
    for i, r in enumerate(raw_rules):
        def at(key=None):
            return lines.of("[[rule]]", i, key)
        path = f"rule[{i + 1}]"
        for k in sorted(set(r) - RULE_KEYS):
            bad(at(k), f"{path}.{k}", f"unknown key; a rule has {', '.join(sorted(RULE_KEYS))}")
        missing = [k for k in ("gesture", "to", "address") if k not in r]
        for k in missing:
            bad(at(), f"{path}.{k}", "missing")
        if missing:
            continue
        gesture = r["gesture"]
        if not isinstance(gesture, str):
            bad(at("gesture"), f"{path}.gesture", "must be a string")
            continue
        if classes is not None and gesture not in known:
            near = difflib.get_close_matches(gesture, known, n=1)
            hint = f"did you mean {near[0]!r}?" if near else f"the model knows {', '.join(known)}"
            bad(at("gesture"), f"{path}.gesture", f"unknown gesture {gesture!r}: {hint}")
        kind = (kinds or {}).get(gesture)
        on = r.get("on", "entered" if kind == "posture" else "gesture")
        if on not in EVENT_KINDS:
            bad(at("on"), f"{path}.on", f"{on!r} is not an event; use one of {', '.join(EVENT_KINDS)}")
        elif kind == "posture" and on == "gesture":
            bad(at("on"), f"{path}.on", f"{gesture} is a posture: use on = \"entered\" or \"left\"")
        elif kind == "gesture" and on != "gesture":
            bad(at("on"), f"{path}.on", f"{gesture} is a dynamic gesture: use on = \"gesture\"")
        if r["to"] not in destinations and r["to"] not in dests:
            bad(at("to"), f"{path}.to", f"unknown destination {r['to']!r}; declare [destinations.{r['to']}] or use one of {', '.join(dests) or 'none declared'}")
        address = r["address"]
        if not isinstance(address, str) or not _ADDRESS.match(address):
            bad(at("address"), f"{path}.address", f"OSC addresses start with '/' and hold no spaces or # * , ? [ ] {{ }} (got {address!r})")
        args = r.get("args", [])
        if not isinstance(args, list):
            bad(at("args"), f"{path}.args", "must be a list, e.g. args = [1, 0.5, \"go\"]")
            args = []
        for a in args:
            if isinstance(a, bool) or isinstance(a, float):
                continue
            if isinstance(a, int):
                if not INT32[0] <= a <= INT32[1]:
                    bad(at("args"), f"{path}.args", f"{a} does not fit an OSC int32")
            elif isinstance(a, str):
                if a.startswith("{") and a.endswith("}") and a not in FIELDS:
                    bad(at("args"), f"{path}.args", f"unknown field {a}; use one of {', '.join(FIELDS)}")
            else:
                bad(at("args"), f"{path}.args", f"{a!r}: arguments are numbers, strings or booleans")
        rules.append(Rule(gesture, on, r["to"], address, tuple(args), at()))
    if problems:
        raise MappingError(problems)
    return Mapping(destinations, tuple(rules), name)
