"""Docs and hints that cannot drift: every TOML snippet in README.md and docs/*.md, and every
`key = "value"` a hint or an example docstring names, goes through the real loaders.

A snippet is a daemon config when it has a garment table, else a piece of a mapping; the
mapping pieces of one document are read together (a rule names a destination another piece
declares), as a user pasting them into one file would.
"""

import ast
import re
import tomllib

import pytest

from bridge.decisions.continuous import LevelRange
from bridge.garment import GESTURES, Jacket
from bridge.mapping import loader
from bridge.mapping.loader import MappingError, parse_mapping
from bridge.service.config import GARMENT_KEYS, SERVICE_KEYS, load_config, load_service
from tests.conftest import ROOT

DOCS = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
CHANNELS = tuple(Jacket(seed=0).channel_names)
CLASSES = ("null", *GESTURES)


def fenced(path, lang):
    """(line, text) of each ```lang block of a Markdown file."""
    text = path.read_text(encoding="utf-8")
    return [(text[:m.start()].count("\n") + 2, m.group(1))
            for m in re.finditer(rf"^```{lang}\n(.*?)^```", text, re.S | re.M)]


def is_config(doc: dict) -> bool:
    return "garment" in doc


SNIPPETS = [(p, line, body) for p in DOCS for line, body in fenced(p, "toml")]


def test_the_docs_have_toml_snippets_to_check():
    assert len(SNIPPETS) >= 6
    assert {p.name for p, _, _ in SNIPPETS} >= {"README.md", "mappings.md", "acquisition.md"}


@pytest.mark.parametrize("path, line, body", [s for s in SNIPPETS if is_config(tomllib.loads(s[2]))],
                         ids=lambda v: str(v.name if hasattr(v, "name") else v)[:40])
def test_config_snippets_load(path, line, body, tmp_path):
    cfg = tmp_path / "show.toml"
    cfg.write_text(body)
    doc = tomllib.loads(body)
    loaded = (load_service if isinstance(doc["garment"], list) else load_config)(cfg)
    garments = loaded.garments if hasattr(loaded, "garments") else (loaded,)
    for g in garments:
        if g.input == "osc":  # channel names in an OSC-input example are the simulated jacket's
            assert [a for a in g.arguments if a not in ("t_s", "-")] == list(CHANNELS), f"{path.name}:{line}"


@pytest.mark.parametrize("path", sorted({p for p, _, b in SNIPPETS if not is_config(tomllib.loads(b))}),
                         ids=lambda p: p.name)
def test_mapping_snippets_load_with_the_demo_model(path, tmp_path):
    body = "\n".join(b for p, _, b in SNIPPETS if p == path and not is_config(tomllib.loads(b)))
    # A range file for snippets that name one, as `drape range` writes it.
    LevelRange(CHANNELS, (0.0,) * len(CHANNELS), (0.01,) * len(CHANNELS)).save(tmp_path / "wearer.range.json")
    try:
        parse_mapping(body, path.name, CLASSES, dict(GESTURES), CHANNELS, base_dir=tmp_path)
    except MappingError as exc:
        pytest.fail(f"{path.name}: its TOML snippets, read together, are refused by the loader:\n{exc}")


def test_channel_name_headers_in_the_docs_are_the_simulated_jackets():
    # Plain blocks showing the text protocol's header line: the same names everywhere.
    headers = []
    for p in DOCS:
        for line, body in fenced(p, ""):
            headers += [(p.name, line, l) for l in body.splitlines() if l.startswith("t_s,")]
    assert headers
    for name, line, header in headers:
        assert tuple(header.split(",")[1:]) == CHANNELS, f"{name}:{line}: {header}"
    firmware = (ROOT / "examples/firmware/counter_text/counter_text.ino").read_text()
    assert ", ".join(f'"{c}"' for c in CHANNELS) in firmware


def test_keys_in_the_docs_prose_are_keys_the_loaders_take():
    # Inline code such as `api = "..."` or `keys = "uinput"` in a sentence is a hint too.
    spans = []
    for p in DOCS:
        text = p.read_text(encoding="utf-8")
        spans += [(p.name, m.group(1)) for m in re.finditer(r"`([a-z_]+) = [^`]+`", text)]
    assert spans
    wrong = [(name, key) for name, key in spans if key not in MAPPING_KEYS | CONFIG_KEYS]
    assert not wrong, f"keys no loader takes: {wrong}"


# ---- keys named by hints and example docstrings ----

MAPPING_KEYS = (set(loader.DEST_KINDS) | set().union(*loader.DEST_EXTRA.values()) | loader.RULE_KEYS
                | loader.CONTROL_KEYS | loader.SAFETY_KEYS | {"to", "address", "first"})
CONFIG_KEYS = set(GARMENT_KEYS) | {k for ks in SERVICE_KEYS.values() for k in ks}
ASSIGNMENT = re.compile(r'\b([a-z_]+) = \\?"([^"\\]*)\\?"')


def named_keys(relative):
    """(line, key, value) for every `key = "value"` in the string constants of a module."""
    tree = ast.parse((ROOT / relative).read_text(encoding="utf-8"))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            out += [(node.lineno, m.group(1), m.group(2)) for m in ASSIGNMENT.finditer(node.value)]
    return out


@pytest.mark.parametrize("module, known", [
    *[(m, "mapping") for m in ("bridge/mapping/loader.py", "bridge/outputs/midi.py", "bridge/outputs/keys.py",
                               "bridge/outputs/sacn.py", "bridge/outputs/osc.py", "bridge/cli/live.py",
                               "bridge/cli/data.py", "bridge/cli/models.py", "bridge/cli/tools.py")],
    *[(m, "config") for m in ("bridge/service/config.py", "bridge/sources/oscinput.py",
                              "bridge/sources/protocols.py", "bridge/service/runner.py")],
])
def test_every_key_a_hint_names_is_one_the_loader_takes(module, known):
    keys = MAPPING_KEYS if known == "mapping" else CONFIG_KEYS
    found = named_keys(module)
    wrong = [(line, k) for line, k, _ in found if k not in keys]
    assert not wrong, f"{module} names keys the {known} loader does not take: {wrong}"


@pytest.mark.parametrize("hint, table", [
    ("midi", '[destinations.d]\nmidi = "drape out"\n'),
    ("keys", '[destinations.d]\n'),
])
def test_output_hints_are_accepted_by_the_mapping_loader(hint, table, monkeypatch):
    # The exact assignments the outputs' error messages tell a user to write.
    if hint == "midi":
        from bridge.outputs.midi import NO_MIDI_SYSTEM
        text = NO_MIDI_SYSTEM
    else:
        from bridge.outputs import keys
        from bridge.outputs.base import OutputUnavailable
        monkeypatch.delenv("DISPLAY", raising=False)
        monkeypatch.setattr(keys.sys, "platform", "linux")
        with pytest.raises(OutputUnavailable) as info:
            keys.PynputKeyboard()
        text = str(info.value)
    assigned = ASSIGNMENT.findall(text)
    assert assigned, text
    body = table + "".join(f'{k} = "{v}"\n' for k, v in assigned)
    parse_mapping(body, "hint.toml", CLASSES, dict(GESTURES), CHANNELS)
