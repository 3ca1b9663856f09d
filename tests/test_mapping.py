"""Mapping files: every validation error names the file, the line and what to change."""

from pathlib import Path

import pytest

from bridge.decisions import Event
from bridge.mapping import MappingError, OscMessage, load_mapping, parse_mapping

CLASSES = ("null", "raise_right", "arms_crossed")
KINDS = {"raise_right": "gesture", "arms_crossed": "posture"}

GOOD = """\
[destinations.desk]
osc = "127.0.0.1:9000"

[[rule]]
gesture = "raise_right"
to = "desk"
address = "/show/next"
args = ["{gesture}", "{confidence}", 3, true]

[[rule]]
gesture = "arms_crossed"
on = "left"
to = "desk"
address = "/light/warm"
args = ["{duration_s}"]
"""


def errors(text):
    with pytest.raises(MappingError) as info:
        parse_mapping(text, "show.toml", CLASSES, KINDS)
    return info.value.problems


def test_good_mapping_dispatches_filled_messages():
    m = parse_mapping(GOOD, "show.toml", CLASSES, KINDS)
    ev = Event(1.5, "raise_right", "gesture", 0.875)
    [d] = m.dispatches(ev)
    assert d.destination == "desk"
    assert d.message == OscMessage("/show/next", ("raise_right", 0.875, 3, True))
    [d] = m.dispatches(Event(9.0, "arms_crossed", "left", 0.9, 2.5))
    assert d.message == OscMessage("/light/warm", (2.5,))
    assert m.dispatches(Event(9.0, "arms_crossed", "entered", 0.9)) == []


def test_unknown_gesture_names_line_and_suggests():
    [p] = errors(GOOD.replace('gesture = "raise_right"', 'gesture = "raise_rigth"'))
    assert p.startswith("show.toml:5: rule[1].gesture:") and "did you mean 'raise_right'" in p


def test_bad_address_port_destination_and_event_kind():
    text = GOOD.replace('"/show/next"', '"show next"').replace("9000", "70000")
    problems = errors(text)
    assert any(p.startswith("show.toml:2: destinations.desk.osc: port 70000 out of range") for p in problems)
    assert any(p.startswith("show.toml:7: rule[1].address:") for p in problems)
    problems = errors(GOOD.replace('to = "desk"\naddress = "/light', 'to = "lamp"\naddress = "/light'))
    assert problems == ["show.toml:13: rule[2].to: unknown destination 'lamp'; declare [destinations.lamp] or use one of desk"]
    problems = errors(GOOD.replace('on = "left"', 'on = "gesture"'))
    assert problems[0].startswith("show.toml:12: rule[2].on: arms_crossed is a posture")


def test_unknown_key_missing_key_bad_args():
    problems = errors(GOOD.replace('address = "/show/next"', 'adress = "/show/next"'))
    assert "show.toml:7: rule[1].adress: unknown key" in problems[0]
    assert "show.toml:4: rule[1].address: missing" in problems[1]
    problems = errors(GOOD.replace("3, true", "3, {x = 1}"))
    assert problems[0].startswith("show.toml:8: rule[1].args:")
    problems = errors(GOOD.replace("3, true", '"{velocity}"'))
    assert "unknown field {velocity}" in problems[0]
    problems = errors(GOOD.replace("3, true", "4294967296"))
    assert "int32" in problems[0]


def test_toml_syntax_error_has_line():
    [p] = errors(GOOD.replace('to = "desk"\naddress = "/show/next"', 'to = "desk\naddress = "/show/next"'))
    assert p.startswith("show.toml:6: not valid TOML")


def test_missing_file(tmp_path):
    with pytest.raises(MappingError, match="no such mapping file"):
        load_mapping(tmp_path / "nope.toml")


def test_shipped_demo_mapping_is_valid_against_the_simulated_vocabulary():
    from bridge.garment import GESTURES

    root = Path(__file__).resolve().parent.parent
    m = load_mapping(root / "mappings" / "demo.toml", ("null", *GESTURES), dict(GESTURES))
    assert {r.gesture for r in m.rules} == set(GESTURES)
    assert m.destinations["show"].port == 9000
