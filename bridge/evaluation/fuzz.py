"""Fuzzing: a seeded mutator throws millions of broken inputs at every parser that reads
bytes from outside (serial text lines, binary frames, OSC input datagrams, control-port
datagrams, mapping files, model files) and counts what comes out.

Each target says which exceptions are its documented refusals (``MappingError`` from the
mapping loader, ``ModelError`` from the model loader, ``ProtocolUndecided`` from a text parser
told to detect its layout); any other exception is a crash, counted by type with the first
input that raised it saved for a reproduction. Some targets also check a property of what
they return (finite positive frequencies; no control command without the token).

The mutator is plain ``random.Random(seed)``: byte flips, interesting bytes, truncation,
insertion, deletion, duplication, splicing of two valid inputs and random bytes of random
length, one to four at a time. Mapping and model files are also mutated structurally (values
of the wrong type or range, huge numbers, deep nesting, huge declared array shapes, object
and pickled arrays), since byte noise rarely gets past TOML, zip and CRC checks.

``python -m bridge bench --fuzz N`` runs N inputs per target (see docs/robustness.md).
"""

from __future__ import annotations

import io
import json
import math
import os
import random
import resource
import struct
import tempfile
import time
import zipfile
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

INTERESTING = (b"\x00", b"\xff", b"\x7f", b"\x80", b"\n", b"\r", b",", b" ", b"-", b".", b"e", b"9", b"#",
               b"nan", b"inf", b"1e999", b"-0", b"\x93NUMPY", b"[", b"]", b"{", b"}", b'"', b"=", b"/", b"\xc0")


class Mutator:
    """Seeded byte-level mutations of a set of valid inputs."""

    def __init__(self, seeds: list[bytes], rng: random.Random):
        self.seeds = [bytes(s) for s in seeds if s]
        self.rng = rng

    def __call__(self) -> bytes:
        r = self.rng
        if r.random() < 0.03:  # pure noise of a random length
            return r.randbytes(r.choice((0, 1, 2, 7, 16, 64, 300, 5000)))
        data = bytearray(r.choice(self.seeds))
        for _ in range(r.randint(1, 4)):
            op = r.randrange(8)
            n = len(data)
            if op == 0 and n:                       # bit flips
                for _ in range(r.randint(1, 8)):
                    i = r.randrange(n)
                    data[i] ^= 1 << r.randrange(8)
            elif op == 1 and n:                     # interesting bytes over the data
                s = r.choice(INTERESTING)
                i = r.randrange(n)
                data[i:i + len(s)] = s
            elif op == 2 and n:                     # truncation
                del data[r.randrange(n):]
            elif op == 3:                           # insertion of random bytes
                i = r.randrange(n + 1)
                data[i:i] = r.randbytes(r.choice((1, 2, 4, 8, 33, 200)))
            elif op == 4 and n:                     # deletion of a range
                i = r.randrange(n)
                del data[i:i + r.randint(1, 64)]
            elif op == 5 and n:                     # duplication of a range
                i = r.randrange(n)
                j = min(n, i + r.randint(1, 128))
                data[j:j] = data[i:j] * r.randint(1, 4)
            elif op == 6:                           # splice with another valid input
                other = r.choice(self.seeds)
                data = data[:r.randrange(n + 1)] + other[r.randrange(len(other) + 1):]
            elif op == 7 and n:                     # overwrite with a random integer field
                i = r.randrange(n)
                data[i:i + 4] = struct.pack("<I", r.choice((0, 1, 0xFFFF, 0x7FFFFFFF, 0xFFFFFFFF, r.getrandbits(32))))
        return bytes(data)


@dataclass
class FuzzResult:
    target: str
    inputs: int
    wall_s: float
    refused: int = 0                            # documented refusals (the target's own error type)
    crashes: Counter = field(default_factory=Counter)
    violations: Counter = field(default_factory=Counter)
    peak_rss_mb: float = 0.0

    @property
    def rate(self) -> float:
        return self.inputs / max(self.wall_s, 1e-9)

    def line(self) -> str:
        crashes = ", ".join(f"{k} {v}" for k, v in self.crashes.items()) or "none"
        viol = ", ".join(f"{k} {v}" for k, v in self.violations.items()) or "none"
        return (f"{self.target:8} {self.inputs:>9} inputs in {self.wall_s:7.1f} s ({self.rate:8.0f}/s); "
                f"refused by design {self.refused}; unhandled exceptions: {crashes}; property violations: {viol}; "
                f"peak RSS {self.peak_rss_mb:.0f} MB")


# ---- seeds: valid inputs of each kind -----------------------------------------------------

def _text_seeds(rng: random.Random) -> list[bytes]:
    from ..sources.textline import format_line
    out = [b"t_s,left_sleeve,right_sleeve,left_front,right_front\n", b"# counter v2\n",
           b"left right front back\n"]
    for k in range(40):
        vals = [rng.uniform(1e5, 5e5) for _ in range(4)]
        out.append(format_line(vals, k * 0.01 if k % 2 else None))
    out.append(b"".join(out[3:20]))
    out.append(b"0.01 172100 245200 327800 431000\r\n0.02 172200 245300 327700 430900\r\n")
    return out


def _frame_seeds(rng: random.Random) -> list[bytes]:
    from ..sources.frames import encode_frame
    out = []
    for k in range(30):
        n = rng.choice((1, 4, 4, 4, 8, 16))
        out.append(encode_frame(k, k * 0.01, [rng.uniform(1e5, 5e5) for _ in range(n)]))
    out.append(b"".join(out[:10]))
    out.append(b"\x00" + b"".join(encode_frame(65534 + k, 4294.96 + k * 0.01, [2e5] * 4) for k in range(4)))
    return out


def _osc_msg(address: str, args) -> bytes:
    from pythonosc.osc_message_builder import OscMessageBuilder
    b = OscMessageBuilder(address)
    for a in args:
        b.add_arg(a)
    return b.build().dgram


def _osc_bundle(msgs: list[bytes]) -> bytes:
    body = b"".join(struct.pack(">i", len(m)) + m for m in msgs)
    return b"#bundle\x00" + struct.pack(">Q", 1) + body


def _osc_input_seeds(rng: random.Random) -> list[bytes]:
    out = []
    for k in range(20):
        out.append(_osc_msg("/jacket/antennas", [k * 0.01] + [rng.uniform(1e5, 5e5) for _ in range(4)]))
    out.append(_osc_msg("/jacket/antennas", [1, 2, 3]))
    out.append(_osc_msg("/jacket/antennas", ["a", b"blob", True, None, 1.5]))
    out.append(_osc_msg("/other", [1.0]))
    out.append(_osc_bundle(out[:3]))
    out.append(_osc_bundle([_osc_bundle(out[3:5]), out[6]]))
    return out


TOKEN = "stage-left-7f3a91c2"


def _control_seeds(rng: random.Random) -> list[bytes]:
    out = []
    for addr in ("/drape/arm", "/drape/disarm", "/drape/panic", "/drape/reload", "/drape/rebaseline", "/drape/status"):
        out += [_osc_msg(addr, []), _osc_msg(addr, [TOKEN]), _osc_msg(addr, [TOKEN, "jacket"]), _osc_msg(addr, ["jacket"])]
    out += [_osc_msg("/drape/layer", ["act2"]), _osc_msg("/drape/layer", [TOKEN, "act2", "jacket"]),
            _osc_msg("/drape/layer", [TOKEN, 3]), _osc_msg("/drape/keys", [TOKEN, "ctrl+q"]),
            _osc_bundle([_osc_msg("/drape/arm", [TOKEN])])]
    return out


# ---- targets: each returns "ok", "refused", or raises; may add property violations ----------

def _run_text(data: bytes, r: random.Random, viol: Counter) -> str:
    from ..sources.textline import ProtocolUndecided, TextLineParser
    p = TextLineParser(n_channels=r.choice((None, 4, 4, 1, 16)), timestamp=r.choice((None, True, False)))
    cut = sorted(r.randrange(len(data) + 1) for _ in range(2))
    out = []
    try:
        for piece in (data[:cut[0]], data[cut[0]:cut[1]], data[cut[1]:]):
            out += p.feed(piece)
    except ProtocolUndecided:
        return "refused"
    for t, vals in out:
        if not all(math.isfinite(v) and v > 0 for v in vals) or (t is not None and not math.isfinite(t)):
            viol["non-finite or non-positive sample"] += 1
        if len(vals) != p.n_channels:
            viol["sample of another channel count"] += 1
    return "ok"


def _run_frames(data: bytes, r: random.Random, viol: Counter) -> str:
    from ..sources.frames import FrameParser
    p = FrameParser(n_channels=r.choice((None, 4)))
    cut = r.randrange(len(data) + 1)
    out = p.feed(data[:cut]) + p.feed(data[cut:] + b"\x00")
    for t, vals in out:
        if not (math.isfinite(t) and all(math.isfinite(v) and v > 0 for v in vals)):
            viol["non-finite or non-positive sample"] += 1
    return "ok"


class _OscInput:
    def __init__(self):
        from ..sources.oscinput import OscUdpSource
        self.src = OscUdpSource("127.0.0.1:0", "/jacket/antennas",
                                ["t_s", "left_sleeve", "right_sleeve", "left_front", "right_front"], 100.0)

    def __call__(self, data: bytes, r: random.Random, viol: Counter) -> str:
        self.src.feed_datagram(data)
        got, self.src._got = self.src._got, []
        for t, vals in got:
            if not all(math.isfinite(v) and v > 0 for v in vals) or (t is not None and not math.isfinite(t)):
                viol["non-finite or non-positive sample"] += 1
        return "ok"

    def close(self):
        self.src.close()


class _Control:
    """Two ports: loopback without a token, and one that needs ``TOKEN`` (as off loopback)."""

    def __init__(self):
        from ..service.control import ControlPort
        self.open = ControlPort("127.0.0.1", 0)
        self.guarded = ControlPort("127.0.0.1", 0, TOKEN)

    def __call__(self, data: bytes, r: random.Random, viol: Counter) -> str:
        from pythonosc.osc_message import OscMessage
        from ..service.control import PORT_COMMANDS
        peer = ("192.0.2.7", 5000)
        for port in (self.open, self.guarded):
            got = port.handle(data, peer)
            if got is None:
                continue
            cmd = got[0]
            if cmd not in PORT_COMMANDS.values():
                viol["unknown command produced"] += 1
            if port is self.guarded:  # it acted: the datagram must carry the token first
                params = list(OscMessage(data).params)
                if not params or params[0] != TOKEN:
                    viol["acted without the token"] += 1
        return "ok"

    def close(self):
        self.open.close()
        self.guarded.close()


# -- mapping files --

def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v == math.inf else "-inf" if v == -math.inf else repr(v))
    if isinstance(v, str):
        return json.dumps(v)  # a TOML basic string is JSON-escaped text
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{json.dumps(str(k))} = {_toml_value(x)}" for k, x in v.items()) + " }"
    return json.dumps(str(v))


def to_toml(doc: dict) -> str:
    """A small TOML writer for the fuzzer's documents (tables of scalars, arrays of tables)."""
    lines = []
    for key, val in doc.items():
        if isinstance(val, dict) and all(isinstance(x, dict) for x in val.values()) and val:
            for sub, table in val.items():
                lines.append(f"[{json.dumps(str(key))}.{json.dumps(str(sub))}]")
                lines += [f"{json.dumps(str(k))} = {_toml_value(x)}" for k, x in table.items()]
        elif isinstance(val, dict):
            lines.append(f"[{json.dumps(str(key))}]")
            lines += [f"{json.dumps(str(k))} = {_toml_value(x)}" for k, x in val.items()]
        elif isinstance(val, list) and val and all(isinstance(x, dict) for x in val):
            for table in val:
                lines.append(f"[[{json.dumps(str(key))}]]")
                lines += [f"{json.dumps(str(k))} = {_toml_value(x)}" for k, x in table.items()]
        else:
            lines.insert(0, f"{json.dumps(str(key))} = {_toml_value(val)}")
    return "\n".join(lines) + "\n"


WEIRD_VALUES = (None, True, False, 0, -1, 1, 2 ** 31, -(2 ** 63), 2 ** 63 - 1, 0.0, -0.0, 1e308, -1e308, math.nan,
                math.inf, -math.inf, "", "x", "1", "-1", "/", "null", "127.0.0.1:0", "127.0.0.1:99999", ":9000",
                "a" * 5000, "{gesture}", "{nope}", "ü\u202e", [], [1, "a", None], {}, {"1": 300, "x": 1},
                {"right_sleeve": "1"}, "../../../etc/passwd", "nonexistent.range.json", "file.mid")


def _mutate_doc(v, r: random.Random, depth: int = 0):
    """A copy of a parsed document with a few values replaced, removed or added."""
    if isinstance(v, dict):
        out = {}
        for k, x in v.items():
            roll = r.random()
            if roll < 0.04:
                continue  # drop a key
            out[k] = _mutate_doc(x, r, depth + 1) if roll > 0.12 else _weird(r)
        if r.random() < 0.05:
            out[r.choice(("extra", "gesture", "on", "to", "cc", "note", "keys", "levels", "range", "mix", "first",
                          "every_s", "fade_s", "safe", "port"))] = _weird(r)
        return out
    if isinstance(v, list):
        out = [_mutate_doc(x, r, depth + 1) for x in v if r.random() > 0.03]
        if out and r.random() < 0.05:
            out.append(r.choice(out))
        return out
    return _weird(r) if r.random() < 0.1 else v


def _weird(r: random.Random):
    v = r.choice(WEIRD_VALUES)
    if v is None:  # TOML has no null: a random number instead
        return r.uniform(-1e6, 1e6)
    return v


class _Mapping:
    CLASSES = ("null", "raise_right", "raise_left", "sweep_across", "tap_left_sleeve", "push_forward", "bow",
               "arms_crossed", "hands_on_hips", "hand_on_heart")
    KINDS = {"raise_right": "gesture", "raise_left": "gesture", "sweep_across": "gesture", "tap_left_sleeve": "gesture",
             "push_forward": "gesture", "bow": "gesture", "arms_crossed": "posture", "hands_on_hips": "posture",
             "hand_on_heart": "posture"}
    CHANNELS = ("left_sleeve", "right_sleeve", "left_front", "right_front")

    def __init__(self, texts: list[str], base_dir: Path):
        import tomllib
        self.texts = texts
        self.docs = [tomllib.loads(t) for t in texts]
        self.base_dir = base_dir
        self.bytes_mut = Mutator([t.encode() for t in texts], random.Random(0))

    def next_input(self, r: random.Random) -> str:
        self.bytes_mut.rng = r
        if r.random() < 0.5:
            return self.bytes_mut().decode("utf-8", "replace")
        return to_toml(_mutate_doc(r.choice(self.docs), r))

    def __call__(self, text: str, r: random.Random, viol: Counter) -> str:
        from ..mapping import MappingError, parse_mapping
        try:
            parse_mapping(text, "fuzz.toml", self.CLASSES, self.KINDS, self.CHANNELS, base_dir=self.base_dir)
        except MappingError:
            return "refused"
        return "ok"


# -- model files --

def _npy(a: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, a, allow_pickle=False)
    return buf.getvalue()


# What numpy writes as the data of an object array: a pickle (here of [{'a': 1}, None]).
# Kept as fixed bytes so the package never imports a pickler; the loader must refuse the
# array from its header ('|O') before these bytes are ever looked at.
_PICKLED_LIST = b"\x80\x03]q\x00(}q\x01X\x01\x00\x00\x00aq\x02K\x01sNe."


def _object_npy() -> bytes:
    return _raw_npy("{'descr': '|O', 'fortran_order': False, 'shape': (2,), }", _PICKLED_LIST)


def _raw_npy(header: str, body: bytes = b"") -> bytes:
    """A .npy file with a hand-written header dict (declares whatever it likes)."""
    h = header.encode("latin1")
    pad = 64 - (10 + len(h) + 1) % 64
    h = h + b" " * pad + b"\n"
    return b"\x93NUMPY\x01\x00" + struct.pack("<H", len(h)) + h + body


def _array_or_none(data: bytes):
    """A seed's (trusted, possibly already mutated) member as an array, or None."""
    try:
        return np.lib.format.read_array(io.BytesIO(data), allow_pickle=False)
    except Exception:  # noqa: BLE001 - the fuzzer's own input generation, not the code under test
        return None


def zip_members(members: dict[str, bytes]) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_STORED) as z:
        for name, data in members.items():
            z.writestr(name, data)
    return buf.getvalue()


def _deep_json(r: random.Random) -> bytes:
    n = r.choice((100, 1000, 100_000, 400_000))
    return (b"[" * n + b"]" * n) if r.random() < 0.5 else (b'{"a":' * n + b"1" + b"}" * n)


class _ModelFiles:
    def __init__(self, seed_members: list[dict[str, bytes]], path: Path):
        self.seeds = seed_members
        self.path = path
        self.byte_mut = Mutator([zip_members(m) for m in seed_members], random.Random(0))
        self.loaded = 0
        self.block = 2e5 + np.random.default_rng(0).normal(size=(120, 2)).cumsum(axis=0) * 50

    def next_input(self, r: random.Random) -> bytes:
        roll = r.random()
        if roll < 0.25:
            self.byte_mut.rng = r
            return self.byte_mut()
        members = dict(r.choice(self.seeds))
        names = [n for n in members if n.endswith(".npy")]
        for _ in range(r.randint(1, 3)):
            name = r.choice(names)
            what = r.randrange(9)
            if what == 0:  # metadata values of the wrong type or range
                a = _array_or_none(members.get("meta_json.npy", b""))
                try:
                    meta = json.loads(a.tobytes()) if a is not None else {}
                except (ValueError, RecursionError):
                    meta = {}
                meta = _mutate_doc(meta, r) if isinstance(meta, dict) else {}
                if r.random() < 0.3:
                    meta[r.choice(("temperature", "length", "n_templates", "n_features", "n_dilations", "radius",
                                   "threshold", "input_channels", "version", "edges"))] = r.choice(
                        (10 ** 400, -(10 ** 30), 1e308, 0, -1, "1", [1], {"a": 1}, True, 2 ** 62))
                raw = json.dumps(meta, allow_nan=True).encode()
                members["meta_json.npy"] = _npy(np.frombuffer(raw, dtype=np.uint8))
            elif what == 1:  # deep or huge JSON
                members["meta_json.npy"] = _npy(np.frombuffer(_deep_json(r), dtype=np.uint8))
            elif what == 2:  # a header declaring a huge array (no data behind it)
                shape = r.choice(("(1000000000000,)", "(1000000, 1000000)", "(2147483648, 4)", "(-1,)", "(10**12,)",
                                  "(99999999999999999999999,)"))
                members[name] = _raw_npy(f"{{'descr': '<f8', 'fortran_order': False, 'shape': {shape}, }}", b"\0" * 64)
            elif what == 3:  # an object array: its data is a pickle
                members[name] = _object_npy()
            elif what == 4:  # another dtype
                dt = r.choice(("<c16", "<U8", "|S8", "<M8[s]", "|b1", "<f2", "|V16", "<i8", "<u1", "<f16"))
                members[name] = _raw_npy(f"{{'descr': '{dt}', 'fortran_order': False, 'shape': (4,), }}", b"\1" * 256)
            elif what == 5:  # NaN / inf in the values
                a = _array_or_none(members[name])
                if a is not None and a.dtype.kind == "f" and a.size:
                    a = a.copy()
                    a.flat[r.randrange(a.size)] = r.choice((np.nan, np.inf, -np.inf))
                    members[name] = _npy(a)
            elif what == 6:  # mismatched length
                a = _array_or_none(members[name])
                if a is not None and a.dtype.kind in "fiu":
                        members[name] = _npy(a.reshape(-1)[: max(0, a.size - r.randint(1, 3))] if r.random() < 0.5
                                         else np.concatenate([a.reshape(-1), a.reshape(-1)[:1]]))
            elif what == 7:  # a hostile header text
                members[name] = _raw_npy(r.choice(("{'descr': __import__('os').system('true'), }",
                                                   "{'descr': '<f8', 'fortran_order': False, 'shape': (" + "(" * 500 + ")}",
                                                   "x" * 20000, "{'descr': [('a', '<f8')] * 100000, }",
                                                   "{'descr': 'O', 'fortran_order': False, 'shape': (1,), }")))
            else:  # a member removed
                members.pop(name, None)
                names = [n for n in members if n.endswith(".npy")] or names
        return zip_members(members)

    def __call__(self, data: bytes, r: random.Random, viol: Counter) -> str:
        from ..recognition import ModelError, load_model
        self.path.write_bytes(data)
        try:
            model = load_model(self.path)
        except ModelError:
            return "refused"
        self.loaded += 1
        from ..service import Pipeline  # a model that loads must also run: a block through it
        Pipeline(model).feed(self.block[:, :model.n_channels] if model.n_channels <= 2 else
                             np.full((self.block.shape[0], model.n_channels), 2e5))
        return "ok"


def model_seed_members() -> list[dict[str, bytes]]:
    """The members of a small model file of each classifier (zip member name → bytes)."""
    from ..recognition.classifiers import fit_cases
    from ..recognition.windows import WindowSpec
    from ..signal import BandPass
    rng = np.random.default_rng(0)
    spec = WindowSpec(100.0, 0.5, 0.1)
    X = rng.normal(size=(18, 2, spec.length)).cumsum(axis=2) * 0.01
    y = np.array(["a"] * 6 + ["b"] * 6 + ["null"] * 6)
    out = []
    with tempfile.TemporaryDirectory() as d:
        for name, options in (("linear", {}), ("linear", {"fourier_features": 16}), ("minirocket", {}),
                              ("minirocket", {"edges": "valid"}), ("dtw", {})):
            model = fit_cases(name, X, y, ["a", "b"], rate_hz=100.0, windows=spec, conditioning=BandPass(100.0),
                              channel_names=("c0", "c1"), stream="level", **options)
            p = model.save(Path(d) / "m.npz")
            with zipfile.ZipFile(p) as z:
                out.append({n: z.read(n) for n in z.namelist()})
    return out


def _mapping_texts() -> tuple[list[str], Path]:
    """The shipped example mappings (seeds for the mapping fuzzer) and a folder for relative paths."""
    from ..examples_data import NAMES, example_path, example_text
    return [example_text(n) for n in NAMES], example_path("demo.toml").parent


TARGETS = ("text", "frames", "osc", "control", "mapping", "model")


def fuzz(target: str, n: int, seed: int = 1, crash_dir: str | Path | None = None, report=None,
         time_limit_s: float | None = None) -> FuzzResult:
    """``n`` mutated inputs into ``target`` (one of TARGETS). Crashing inputs are written to
    ``crash_dir`` (first of each exception type). Stops early after ``time_limit_s``."""
    r = random.Random(f"{target}-{seed}")
    cleanup = []
    if target == "text":
        gen, run = Mutator(_text_seeds(r), r), _run_text
    elif target == "frames":
        gen, run = Mutator(_frame_seeds(r), r), _run_frames
    elif target == "osc":
        gen, run = Mutator(_osc_input_seeds(r), r), _OscInput()
        cleanup.append(run.close)
    elif target == "control":
        gen, run = Mutator(_control_seeds(r), r), _Control()
        cleanup.append(run.close)
    elif target == "mapping":
        texts, base = _mapping_texts()
        m = _Mapping(texts, base)
        gen, run = (lambda: m.next_input(r)), m
    elif target == "model":
        tmp = tempfile.TemporaryDirectory(prefix="drape-fuzz-", dir="/dev/shm" if os.path.isdir("/dev/shm") else None)
        cleanup.append(tmp.cleanup)
        mf = _ModelFiles(model_seed_members(), Path(tmp.name) / "m.npz")
        gen, run = (lambda: mf.next_input(r)), mf
    else:
        raise ValueError(f"unknown fuzz target {target!r}; use {', '.join(TARGETS)}")
    res = FuzzResult(target, 0, 0.0)
    import logging
    logging.disable(logging.WARNING)  # python-osc logs a warning per undecodable argument
    cleanup.append(lambda: logging.disable(logging.NOTSET))
    t0 = time.perf_counter()
    last_report = t0
    try:
        for i in range(n):
            data = gen()
            try:
                if run(data, r, res.violations) == "refused":
                    res.refused += 1
            except Exception as exc:  # noqa: BLE001 - the point: count whatever escapes
                key = type(exc).__name__
                if key not in res.crashes and crash_dir is not None:
                    d = Path(crash_dir)
                    d.mkdir(parents=True, exist_ok=True)
                    raw = data.encode("utf-8", "surrogatepass") if isinstance(data, str) else data
                    (d / f"{target}-{key}.bin").write_bytes(raw)
                    (d / f"{target}-{key}.txt").write_text(f"{exc!r}\n", encoding="utf-8")
                res.crashes[key] += 1
            res.inputs = i + 1
            if (i & 1023) == 0:
                now = time.perf_counter()
                if report and now - last_report > 30:
                    last_report = now
                    report(f"  {target}: {res.inputs} inputs, {res.inputs / (now - t0):.0f}/s, "
                           f"crashes {sum(res.crashes.values())}")
                if time_limit_s is not None and now - t0 > time_limit_s:
                    break
    finally:
        for c in cleanup:
            c()
    res.wall_s = time.perf_counter() - t0
    res.peak_rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    return res
