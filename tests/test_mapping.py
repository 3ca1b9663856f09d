"""Mapping files: every validation error names the file, the line and what to change."""

from pathlib import Path

import pytest

from bridge.decisions import Event
from bridge.mapping import MappingError, OscMessage, load_mapping, parse_mapping
from bridge.mapping.messages import KeyAction

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
    assert "show.toml:4: rule[1].address: missing" in problems[0]   # in the file's order
    assert "show.toml:7: rule[1].adress: unknown key" in problems[1]
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


def _hold_hand_on_heart(mapping, spans_s, hop_s=0.1):
    """Keys a mapping sends when the wearer holds hand_on_heart over each (start, end) span
    (s), through the live decision stage and router (as `drape replay` and the daemon do)."""
    from dataclasses import replace

    import numpy as np

    from bridge.decisions import Gate, gate_settings_for
    from bridge.garment import GESTURES
    from bridge.mapping import Router
    from bridge.mapping.messages import KeyAction

    classes = ("null", *GESTURES)
    every = mapping.held_every_s()
    settings = {c: replace(s, held_every_s=every.get(c, s.held_every_s))
                for c, s in gate_settings_for(classes[1:], None, dict(GESTURES), hop_s=hop_s).items()}
    gate, router = Gate(classes, dict(GESTURES), settings, hop_s=hop_s), Router(mapping)
    heart = classes.index("hand_on_heart")
    sent = []
    for t in np.arange(0, spans_s[-1][1] + 3.0, hop_s):
        p = np.full(len(classes), 0.01)
        p[heart if any(a <= t < b for a, b in spans_s) else 0] = 0.95
        sent += [(round(d.decided_s, 2), d.message.keys) for d in router.route(gate.step(float(t), p))
                 if isinstance(d.message, KeyAction)]
    return sent


def test_single_switch_confirms_once_per_hold():
    from bridge.garment import GESTURES, Jacket

    root = Path(__file__).resolve().parent.parent
    m = load_mapping(root / "mappings" / "single-switch.toml", ("null", *GESTURES), dict(GESTURES),
                     Jacket(seed=0).channel_names)
    sent = _hold_hand_on_heart(m, [(1.0, 9.0), (12.0, 16.0)])  # 8 s, then 4 s
    assert [k for _, k in sent] == [("space",), ("enter",), ("space",), ("enter",)]
    (t_select, _), (t_confirm, _), (t_select2, _), (t_confirm2, _) = sent
    assert t_confirm - t_select == pytest.approx(2.0) and t_confirm2 - t_select2 == pytest.approx(2.0)
    assert m.safety.start_armed  # as its comments say: a carer disarms over the control port


def test_a_hold_under_way_when_armed_sends_no_once_per_hold_key():
    """Single switch: the wearer is already holding when the carer arms (or the arming
    posture's own hold arms it). Its select was not sent; its confirm must not be sent alone
    (Enter on whatever the scan shows). Let go and hold again: both, once."""
    from bridge.garment import GESTURES, Jacket
    from bridge.mapping import Router

    root = Path(__file__).resolve().parent.parent
    m = load_mapping(root / "mappings" / "single-switch.toml", ("null", *GESTURES), dict(GESTURES),
                     Jacket(seed=0).channel_names)
    r = Router(m)
    r.route([Event(0.0, "", "disarmed", 1.0)])
    out = r.route([Event(1.0, "hand_on_heart", "entered", 0.9)])
    out += r.route([Event(1.5, "", "armed", 1.0)])                       # 0.5 s into the hold
    out += r.route([Event(3.0, "hand_on_heart", "held", 0.9, 2.0), Event(5.0, "hand_on_heart", "held", 0.9, 4.0),
                    Event(5.5, "hand_on_heart", "left", 0.9, 4.5)])
    assert [d.message.keys for d in out if isinstance(d.message, KeyAction)] == []
    out = r.route([Event(8.0, "hand_on_heart", "entered", 0.9), Event(10.0, "hand_on_heart", "held", 0.9, 2.0)])
    assert [d.message.keys for d in out if isinstance(d.message, KeyAction)] == [("space",), ("enter",)]


def _often_and(timing: str, address: str):
    """GOOD with two held rules on arms_crossed: one every 0.5 s to /often, one with ``timing`` to ``address``."""
    return parse_mapping(GOOD + f"""
[[rule]]
gesture = "arms_crossed"
on = "held"
every_s = 0.5
to = "desk"
address = "/often"

[[rule]]
gesture = "arms_crossed"
on = "held"
{timing}
to = "desk"
address = "{address}"
""", "show.toml", CLASSES, KINDS)


def test_once_after_s_beside_a_faster_repeat_and_while_disarmed():
    from bridge.mapping import Router

    m = _often_and("once_after_s = 1.2", "/once")
    assert m.held_every_s() == {"arms_crossed": 0.5}
    r = Router(m)

    def hold(t0, disarm_at=None):
        out = r.route([Event(t0, "arms_crossed", "entered", 0.9)])
        for k in range(1, 7):
            if disarm_at == k:
                r.route([Event(t0 + 0.5 * k, "", "disarmed", 1.0)])
            if disarm_at is not None and k == disarm_at + 2:
                r.route([Event(t0 + 0.5 * k, "", "armed", 1.0)])
            out += r.route([Event(t0 + 0.5 * k, "arms_crossed", "held", 0.9, 0.5 * k)])
        out += r.route([Event(t0 + 4, "arms_crossed", "left", 0.9, 4.0)])
        return [(d.decided_s - t0, d.message.address) for d in out if d.message.address in ("/once", "/often")]

    first = hold(0.0)
    assert [t for t, a in first if a == "/once"] == [1.5]  # the first held moment at or after 1.2 s
    assert len([a for _, a in first if a == "/often"]) == 6
    # disarmed across 1.5 s: the moment is spent, arming at 2.5 s does not send it late
    assert [a for _, a in hold(10.0, disarm_at=3) if a == "/once"] == []
    assert [t for t, a in hold(20.0) if a == "/once"] == [1.5]  # a new hold fires again


def test_each_repeating_held_rule_keeps_its_own_every_s():
    """Two repeating rules on one posture: held events come at the shorter repeat (0.5 s),
    and the 2 s rule fires once per 2 s of the hold, not at every held event."""
    from bridge.mapping import Router

    m = _often_and("every_s = 2.0", "/slow")
    assert m.held_every_s() == {"arms_crossed": 0.5}
    r = Router(m)
    out = r.route([Event(0.0, "arms_crossed", "entered", 0.9)])
    for k in range(1, 13):   # held 0.5 .. 6.0 s
        out += r.route([Event(0.5 * k, "arms_crossed", "held", 0.9, 0.5 * k)])
    out += r.route([Event(6.2, "arms_crossed", "left", 0.9, 6.2)])
    slow = [d.decided_s for d in out if d.message.address == "/slow"]
    assert slow == [2.0, 4.0, 6.0]
    assert len([d for d in out if d.message.address == "/often"]) == 12
    out = r.route([Event(10.0, "arms_crossed", "entered", 0.9), Event(12.0, "arms_crossed", "held", 0.9, 2.0)])
    assert [d.decided_s for d in out if d.message.address == "/slow"] == [12.0]   # a new hold counts afresh


def test_once_after_s_is_checked_with_lines():
    base = GOOD.replace('on = "left"', 'on = "{on}"')
    probs = errors(base.replace('"{on}"', '"left"\nonce_after_s = 2'))
    assert probs == ['show.toml:13: rule[2].once_after_s: once_after_s is for rules with on = "held" '
                     '(once per hold, after that long); remove it or set on = "held"']
    probs = errors(base.replace('"{on}"', '"held"\nonce_after_s = 2\nevery_s = 1'))
    assert probs == ["show.toml:14: rule[2].every_s: give every_s (repeats while held) or once_after_s "
                     "(once per hold), not both"]
    [p] = errors(base.replace('"{on}"', '"held"\nonce_after_s = 0'))
    assert p.startswith("show.toml:13: rule[2].once_after_s:")
