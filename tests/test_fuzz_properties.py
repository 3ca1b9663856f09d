"""Property-based tests of the loaders and ports that read outside input: whatever arrives,
only the loader's own error type comes out (MappingError, ModelError, ProtocolUndecided), and
the control port never raises and never acts without its token. Examples are kept few here;
`drape bench --fuzz N` runs millions (see docs/robustness.md)."""

import io
import json
import math
import random
import tomllib
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from pythonosc.osc_message import OscMessage
from pythonosc.osc_message_builder import OscMessageBuilder

from bridge.evaluation import fuzz as F
from bridge.mapping import MappingError, parse_mapping
from bridge.recognition import ModelError, load_model
from bridge.service.control import ControlPort
from bridge.sources.textline import ProtocolUndecided, TextLineParser

ROOT = Path(__file__).resolve().parent.parent
FEW = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                    HealthCheck.too_slow])

# ---- text lines, layout not stated (the parser holds lines, then decides or refuses) ---------


@FEW
@given(st.lists(st.one_of(st.binary(max_size=80), st.sampled_from(
    [b"t_s,a,b\n", b"1,2,3\n", b"1 2\n", b"# x\n", b"nan,inf,-1\n", b"1e999 5\n", b"\xff\n", b"a b c d\n"])),
    max_size=40), st.sampled_from([None, True, False]))
def test_text_parser_detecting_its_layout_only_refuses_with_its_own_error(pieces, timestamp):
    p = TextLineParser(n_channels=None, timestamp=timestamp)
    out = []
    try:
        for piece in pieces:
            out += p.feed(piece)
    except ProtocolUndecided:
        return
    for t, values in out:
        assert len(values) == p.n_channels
        assert all(math.isfinite(v) and v > 0 for v in values)
        assert t is None or math.isfinite(t)


# ---- mapping files --------------------------------------------------------------------------

CLASSES, KINDS, CHANNELS = F._Mapping.CLASSES, F._Mapping.KINDS, F._Mapping.CHANNELS
MAPPING_TEXTS = [p.read_text(encoding="utf-8") for p in sorted((ROOT / "mappings").glob("*.toml"))]

toml_scalars = st.one_of(st.integers(min_value=-(2 ** 63), max_value=2 ** 63 - 1), st.floats(allow_nan=True),
                         st.booleans(), st.text(max_size=30), st.sampled_from(
                             ["{gesture}", "{duration_s}", "127.0.0.1:9000", "x11", "raise_right", "arms_crossed",
                              "entered", "left", "show", "act1", "/drape/x", "note.mid", "../range.json"]))
toml_values = st.recursive(toml_scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.text(min_size=1, max_size=12), inner, max_size=4)), max_leaves=12)


def _replace_somewhere(doc, rnd: random.Random, value):
    """The document with one value (at a random path) replaced, or a key added."""
    node = doc
    for _ in range(6):
        keys = list(node) if isinstance(node, dict) else list(range(len(node))) if isinstance(node, list) else []
        if not keys:
            break
        k = keys[rnd.randrange(len(keys))]   # the same draw as choice() over keys
        if rnd.random() < 0.4 or not isinstance(node[k], (dict, list)):
            node[k] = value
            return doc
        node = node[k]
    if isinstance(node, dict):
        node[rnd.choice(["gesture", "on", "to", "cc", "keys", "hold", "every_s", "first", "extra"])] = value
    return doc


@settings(max_examples=25, deadline=None)
@given(st.integers(0, len(MAPPING_TEXTS) - 1), st.randoms(use_true_random=False), st.lists(toml_values, min_size=1, max_size=3))
def test_mapping_loader_only_raises_mapping_error_for_wrong_types_and_ranges(which, rnd, values):
    doc = tomllib.loads(MAPPING_TEXTS[which])
    for v in values:
        doc = _replace_somewhere(doc, rnd, v)
    text = F.to_toml(doc)
    try:
        parse_mapping(text, "fuzz.toml", CLASSES, KINDS, CHANNELS, base_dir=ROOT / "mappings")
    except MappingError as exc:
        assert all(p.startswith("fuzz.toml") for p in exc.problems)


@FEW
@given(st.integers(0, len(MAPPING_TEXTS) - 1), st.binary(max_size=40), st.integers(0, 10_000))
def test_mapping_loader_on_damaged_text(which, noise, at):
    text = MAPPING_TEXTS[which]
    at = at % (len(text) + 1)
    damaged = text[:at] + noise.decode("utf-8", "replace") + text[at + len(noise):]
    try:
        parse_mapping(damaged, "damaged.toml", CLASSES, KINDS, CHANNELS)
    except MappingError:
        pass


def test_mapping_loader_names_a_destination_that_is_not_a_string():
    # found by the fuzzer: `to = { a = 1 }` used to raise TypeError (unhashable dict)
    text = MAPPING_TEXTS[0].replace('to = "show"', 'to = { a = 1 }', 1)
    with pytest.raises(MappingError, match="the name of a destination"):
        parse_mapping(text, "m.toml", CLASSES, KINDS, CHANNELS)
    with pytest.raises(MappingError, match=r"rule\[1\]: write each rule"):
        parse_mapping("rule = [1, 2]\n", "m.toml", CLASSES, KINDS, CHANNELS)


# ---- model files ------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def model_members():
    return F.model_seed_members()


meta_values = st.one_of(toml_values, st.just(10 ** 400), st.just(-(10 ** 30)), st.just(float("nan")),
                        st.just(float("inf")), st.none())


@FEW
@given(st.data())
def test_model_loader_only_raises_model_error_for_crafted_metadata(model_members, tmp_path_factory, data):
    members = dict(data.draw(st.sampled_from(model_members)))
    meta = json.loads(np.lib.format.read_array(io.BytesIO(members["meta_json.npy"])).tobytes())
    for _ in range(data.draw(st.integers(1, 3))):
        key = data.draw(st.sampled_from(sorted(meta) + ["length", "n_templates", "radius", "threshold"]))
        if isinstance(meta.get(key), dict) and meta[key] and data.draw(st.booleans()):
            meta[key][data.draw(st.sampled_from(sorted(meta[key])))] = data.draw(meta_values)
        else:
            meta[key] = data.draw(meta_values)
    members["meta_json.npy"] = F._npy(np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8))
    path = tmp_path_factory.mktemp("m") / "m.npz"
    path.write_bytes(F.zip_members(members))
    try:
        load_model(path)
    except ModelError:
        pass


@FEW
@given(st.data())
def test_model_loader_only_raises_model_error_for_crafted_arrays(model_members, tmp_path_factory, data):
    members = dict(data.draw(st.sampled_from(model_members)))
    name = data.draw(st.sampled_from(sorted(members)))
    kind = data.draw(st.sampled_from(["shape", "dtype", "object", "nan", "short", "bytes"]))
    if kind == "shape":
        shape = data.draw(st.lists(st.integers(0, 10 ** 13), min_size=0, max_size=3))
        members[name] = F._raw_npy(f"{{'descr': '<f8', 'fortran_order': False, 'shape': {tuple(shape)!r}, }}", b"\0" * 80)
    elif kind == "dtype":
        dt = data.draw(st.sampled_from(["<c16", "<U4", "|S8", "<M8[s]", "|b1", "<f2", "|V8", "<i8", "|O", ">f8"]))
        members[name] = F._raw_npy(f"{{'descr': '{dt}', 'fortran_order': False, 'shape': (2,), }}", b"\1" * 64)
    elif kind == "object":
        members[name] = F._object_npy()
    elif kind == "nan":
        a = np.lib.format.read_array(io.BytesIO(members[name]))
        if a.dtype.kind == "f" and a.size:
            a = a.copy()
            a.flat[data.draw(st.integers(0, a.size - 1))] = data.draw(st.sampled_from([np.nan, np.inf, -np.inf]))
            members[name] = F._npy(a)
    elif kind == "short":
        members[name] = members[name][:data.draw(st.integers(0, len(members[name])))]
    else:
        members[name] = data.draw(st.binary(max_size=200))
    path = tmp_path_factory.mktemp("m") / "m.npz"
    path.write_bytes(F.zip_members(members))
    try:
        model = load_model(path)
    except ModelError:
        return
    # it loaded: then it must also be a usable model (finite weights, a sane shape)
    assert all(np.isfinite(getattr(model, k)).all() for k in ("feature_mean", "feature_scale") if hasattr(model, k))


# ---- the control port ------------------------------------------------------------------------

TOKEN = "correct-horse-7b1e"


def _msg(address, args):
    b = OscMessageBuilder(address)
    for a in args:
        b.add_arg(a)
    try:
        return b.build().dgram
    except Exception:  # noqa: BLE001 - the builder refuses some texts (e.g. with NUL): send the bare address
        return OscMessageBuilder(address).build().dgram


@pytest.fixture(scope="module")
def ports():
    open_port, guarded = ControlPort("127.0.0.1", 0), ControlPort("127.0.0.1", 0, TOKEN)
    yield open_port, guarded
    open_port.close()
    guarded.close()


osc_args = st.lists(st.one_of(st.text(max_size=20), st.integers(-2 ** 31, 2 ** 31 - 1), st.floats(width=32),
                              st.booleans(), st.just(TOKEN), st.binary(max_size=8)), max_size=4)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.one_of(st.binary(max_size=200),
                 st.builds(_msg, st.sampled_from(["/drape/arm", "/drape/panic", "/drape/layer", "/drape/status",
                                                  "/drape/keys", "/drape/reload", "/x"]), osc_args)))
def test_control_port_never_raises_and_never_acts_without_the_token(ports, data):
    open_port, guarded = ports
    peer = ("198.51.100.4", 40000)
    for port in ports:
        got = port.handle(data, peer)
        if got is None:
            continue
        assert got[0] in ("arm", "disarm", "panic", "layer", "reload", "rebaseline", "status")
        if port is guarded:
            params = list(OscMessage(data).params)
            assert params and params[0] == TOKEN


def test_control_port_token_checks_both_ways(ports):
    _, guarded = ports
    peer = ("198.51.100.4", 40000)
    assert guarded.handle(_msg("/drape/panic", []), peer) is None
    assert guarded.handle(_msg("/drape/panic", ["correct-horse-7b1f"]), peer) is None
    assert guarded.handle(_msg("/drape/panic", [TOKEN[:-1]]), peer) is None
    assert guarded.handle(_msg("/drape/panic", [TOKEN]), peer) == ("panic", "", "", peer)
    assert guarded.handle(_msg("/drape/layer", [TOKEN, "act2", "coat"]), peer) == ("layer", "act2", "coat", peer)


# ---- the long fuzzer itself, a few hundred inputs per target: nothing escapes ---------------

@pytest.mark.parametrize("target", F.TARGETS)
def test_fuzzer_smoke_run_finds_no_crash(target):
    r = F.fuzz(target, 150 if target in ("mapping", "model") else 1500, seed=7)
    assert r.inputs > 0 and not r.crashes and not r.violations, r.line()


def test_mutator_is_reproducible():
    a = F.Mutator([b"hello world\n", b"1,2,3\n"], random.Random(5))
    b = F.Mutator([b"hello world\n", b"1,2,3\n"], random.Random(5))
    assert [a() for _ in range(50)] == [b() for _ in range(50)]
    assert Counter(len(a()) for _ in range(200)).most_common(1)[0][1] < 200  # it does vary the lengths
