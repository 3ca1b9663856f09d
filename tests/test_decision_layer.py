"""Decision semantics on scripted probability sequences: "held" repeats, hold-and-left
durations, arming by a held posture, automatic disarm, panic; and what the router lets out
(nothing but status while disarmed, releases for everything held, no keys from commands).
Expected values are worked out by hand from the settings in each test."""

import numpy as np
import pytest

from bridge.decisions import Gate, GateSettings, Safety, SafetySettings
from bridge.decisions.gate import Event
from bridge.mapping import Router, parse_mapping
from bridge.mapping.messages import Arm, KeyAction, MidiNote, OscMessage, Release

CLASSES = ("null", "wave", "hold", "guard")
KINDS = {"wave": "gesture", "hold": "posture", "guard": "posture"}
HOP_S = 0.1


def probs(top, p=0.9):
    v = np.full(len(CLASSES), (1 - p) / (len(CLASSES) - 1))
    v[CLASSES.index(top)] = p
    return v


def drive(seq, settings=None, safety=None):
    """Feed a script of top classes, one per 0.1 s hop; returns (gate events, safety events)."""
    s = settings or GateSettings(agree_k=1, agree_n=1, refractory_s=0.5)
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    evs, safe = [], []
    for i, top in enumerate(seq):
        t = round(i * HOP_S, 6)
        e = g.step(t, probs(top))
        evs += e
        if safety is not None:
            safe += safety.step(t, e, g.held)
    return evs, safe


def test_held_repeats_every_n_seconds_with_growing_duration():
    s = GateSettings(agree_k=1, agree_n=1, held_every_s=0.5)
    evs, _ = drive(["hold"] * 13 + ["null"], s)
    # entered at 0.0; held at 0.5 and 1.0 (not drifting with hops); left at 1.3 after 1.3 s
    assert [(e.kind, e.t_s) for e in evs] == [("entered", 0.0), ("held", 0.5), ("held", 1.0), ("left", 1.3)]
    assert [round(e.duration_s, 6) for e in evs] == [0.0, 0.5, 1.0, 1.3]


def test_debounce_refractory_and_hysteresis_together():
    s = GateSettings(threshold=0.8, exit_threshold=0.3, agree_k=2, agree_n=3, refractory_s=1.0)
    g = Gate(CLASSES, KINDS, {c: s for c in KINDS})
    seq = [("wave", 0.9), ("null", 0.9), ("wave", 0.9)]   # 2 of 3 only at 0.2 s → fires then
    seq += [("wave", 0.9)] * 6 + [("null", 0.9)] * 3      # agreement inside the 1 s refractory: silent
    seq += [("wave", 0.9)] * 2                             # 1.2 s: 1 of 3; 1.3 s: 2 of 3 → fires
    seq += [("hold", 0.85)] * 2                            # 1.5 s: 2 of 3 above 0.8 → entered
    seq += [("hold", 0.5)] * 5                             # between 0.3 and 0.8: still held
    seq += [("null", 0.9)] * 2                             # 2.2 s: 2 of 3 below 0.3 → left
    out = []
    for i, (top, p) in enumerate(seq):
        out += g.step(round(i * HOP_S, 6), probs(top, p))
    assert [(e.gesture, e.kind, e.t_s) for e in out] == [
        ("wave", "gesture", 0.2), ("wave", "gesture", 1.3), ("hold", "entered", 1.5), ("hold", "left", 2.2)]
    assert out[-1].duration_s == pytest.approx(0.7)


def test_arming_posture_toggles_once_per_hold():
    safety = Safety(SafetySettings(arm_posture="guard", arm_hold_s=1.0, start_armed=False))
    # hold guard 1.5 s: arms at 1.0 s (held since 0.0) and not again; release, hold again → disarms
    seq = ["guard"] * 15 + ["null"] * 3 + ["guard"] * 12
    _, safe = drive(seq, safety=safety)
    assert [(e.kind, e.t_s) for e in safe] == [("armed", 1.0), ("disarmed", 2.8)]
    assert safety.armed is False


def test_short_hold_of_the_arming_posture_does_nothing():
    safety = Safety(SafetySettings(arm_posture="guard", arm_hold_s=1.0, start_armed=False))
    _, safe = drive(["guard"] * 9 + ["null"] * 5, safety=safety)
    assert safe == [] and safety.armed is False


def test_automatic_disarm_after_a_null_stretch():
    safety = Safety(SafetySettings(idle_disarm_s=2.0, start_armed=True))
    # a wave at 0.0, then null: disarmed 2.0 s after the wave; a posture held keeps it armed
    evs, safe = drive(["wave"] + ["null"] * 25, safety=safety)
    assert [(e.kind, e.t_s) for e in safe] == [("disarmed", 2.0)]
    safety = Safety(SafetySettings(idle_disarm_s=2.0, start_armed=True))
    _, safe = drive(["hold"] * 30, safety=safety)
    assert safe == []


def test_panic_gesture_panics_and_disarms():
    safety = Safety(SafetySettings(panic_gesture="wave", panic_disarms=True))
    _, safe = drive(["null", "wave"], safety=safety)
    assert [(e.kind, e.t_s) for e in safe] == [("panic", 0.1), ("disarmed", 0.1)]


MAPPING = """
[destinations.desk]
osc = "127.0.0.1:9000"
[destinations.synth]
midi_file = "out.mid"
[destinations.game]
keys = "x11"

[status]
to = "desk"
address = "/drape/status"

[[rule]]
gesture = "wave"
to = "desk"
address = "/show/next"

[[rule]]
gesture = "hold"
on = "entered"
to = "synth"
note = 60
channel = 2
hold = true

[[rule]]
gesture = "hold"
on = "entered"
to = "game"
keys = ["shift", "w"]
hold = true

[[rule]]
gesture = "wave"
to = "synth"
note = 64
velocity = "{confidence}"
length_s = 0.5
"""


def ev(t, gesture, kind, conf=0.9, dur=0.0, detail=""):
    return Event(t, gesture, kind, conf, dur, "", 0.0, detail)


def test_router_holds_notes_and_keys_with_the_posture_and_times_note_offs():
    r = Router(parse_mapping(MAPPING, "m.toml", CLASSES, KINDS))
    out = r.route([ev(1.0, "hold", "entered")])
    assert [(d.destination, d.message) for d in out] == [
        ("synth", MidiNote(2, 60, 100)), ("game", KeyAction(("shift", "w"), "down"))]
    out = r.route([ev(2.0, "wave", "gesture", conf=1.0)])
    assert [d.message for d in out] == [OscMessage("/show/next"), MidiNote(1, 64, 127)]
    assert r.due(2.4) == [] and [d.message for d in r.due(2.5)] == [MidiNote(1, 64, 0, on=False)]
    out = r.route([ev(3.0, "hold", "left", dur=2.0)])
    assert [d.message for d in out] == [MidiNote(2, 60, 0, on=False), KeyAction(("shift", "w"), "up")]


def test_disarmed_sends_nothing_but_status_and_lets_go_of_what_is_held():
    r = Router(parse_mapping(MAPPING, "m.toml", CLASSES, KINDS))
    r.route([ev(1.0, "hold", "entered")])
    out = r.route([ev(1.5, "", "disarmed", detail="test")])
    msgs = [(d.destination, d.message) for d in out]
    # the held note is let go; keys are let go by a Release (commands never carry KeyAction)
    assert ("synth", MidiNote(2, 60, 0, on=False)) in msgs
    assert ("game", Release(disarm=True)) in msgs
    assert ("desk", OscMessage("/drape/status", ("disarmed", "test"))) in msgs
    assert not any(isinstance(m, KeyAction) for _, m in msgs)
    assert r.route([ev(2.0, "wave", "gesture"), ev(2.5, "hold", "entered"), ev(3.0, "hold", "left")]) == []
    out = r.route([ev(4.0, "", "armed")])
    assert [(d.destination, d.message) for d in out] == [("game", Arm()), ("desk", OscMessage("/drape/status", ("armed", "")))]
    assert [d.message for d in r.route([ev(5.0, "wave", "gesture", conf=0.5)])] == [OscMessage("/show/next"), MidiNote(1, 64, 64)]


def test_panic_releases_every_output_and_forgets_holdings():
    r = Router(parse_mapping(MAPPING, "m.toml", CLASSES, KINDS))
    r.route([ev(1.0, "hold", "entered"), ev(1.2, "wave", "gesture")])
    out = r.route([ev(1.5, "", "panic", detail="signal")])
    assert [(d.destination, d.message) for d in out] == [
        ("desk", Release()), ("synth", Release()), ("game", Release()),
        ("desk", OscMessage("/drape/status", ("panic", "signal")))]
    assert r.due(10.0) == [] and r.route([ev(3.0, "hold", "left")]) == []


def test_commands_never_produce_key_actions():
    # Even a layer switch into a layer full of key rules presses nothing by itself.
    text = MAPPING + '\n[[rule]]\ngesture = "wave"\nlayer = "game"\nto = "game"\nkeys = "space"\n'
    r = Router(parse_mapping(text, "m.toml", CLASSES, KINDS))
    for kind, detail in (("layer", "game"), ("armed", ""), ("disarmed", ""), ("armed", ""), ("panic", "")):
        out = r.command(ev(1.0, "", kind, detail=detail))
        assert not any(isinstance(d.message, KeyAction) for d in out)
    assert r.layer == "game"


def test_layers_switch_by_gesture_and_unknown_layer_is_reported():
    text = """
[destinations.desk]
osc = "127.0.0.1:9000"
[layers]
first = "act1"
[[rule]]
gesture = "wave"
layer = "act1"
to = "desk"
address = "/act1/go"
[[rule]]
gesture = "wave"
layer = "act2"
to = "desk"
address = "/act2/go"
[[rule]]
gesture = "hold"
on = "entered"
set_layer = "act2"
[[rule]]
gesture = "hold"
on = "entered"
layer = "act1"
to = "desk"
address = "/act1/last"
"""
    r = Router(parse_mapping(text, "m.toml", CLASSES, KINDS))
    assert [d.message.address for d in r.route([ev(1, "wave", "gesture")])] == ["/act1/go"]
    # the switch applies after every rule of the same event (act1's last cue still goes)
    assert [d.message.address for d in r.route([ev(2, "hold", "entered")])] == ["/act1/last"]
    assert [d.message.address for d in r.route([ev(3, "wave", "gesture")])] == ["/act2/go"]
    assert r.command(ev(4, "", "layer", detail="act9")) == [] and "no layer 'act9'" in r.warnings[0]
    assert r.layer == "act2"


def test_continuous_control_rate_limit_and_change_threshold():
    text = """
[destinations.desk]
osc = "127.0.0.1:9000"
[[control]]
name = "reach"
mix = { a = 1.0 }
to = "desk"
address = "/reach"
max_rate_hz = 10
min_change = 0.05
"""
    r = Router(parse_mapping(text, "m.toml", CLASSES, KINDS))
    # rate limit 10/s: 0.01 and 0.12 are too soon; change threshold 0.05: 0.55 is too close to 0.52
    values = [(0.00, 0.10), (0.01, 0.50), (0.10, 0.52), (0.12, 0.60), (0.20, 0.55), (0.30, 0.70)]
    out = r.route([Event(t, "reach", "control", 1.0, 0.0, "", v) for t, v in values])
    assert [(d.decided_s, d.message.args) for d in out] == [(0.00, (0.10,)), (0.10, (0.52,)), (0.30, (0.70,))]


def test_a_key_held_in_one_layer_is_let_go_after_a_switch_to_another():
    # What a posture holds down is let go by the release recorded when it was pressed, even
    # when the layer changed in between (the new layer has no rule for that posture at all).
    text = """
[destinations.game]
keys = "x11"
[layers]
first = "act1"
[[rule]]
gesture = "hold"
on = "entered"
layer = "act1"
to = "game"
keys = "shift"
hold = true
[[rule]]
gesture = "wave"
layer = "act2"
to = "game"
keys = "space"
"""
    r = Router(parse_mapping(text, "m.toml", CLASSES, KINDS))
    assert [d.message for d in r.route([ev(1.0, "hold", "entered")])] == [KeyAction(("shift",), "down")]
    r.command(ev(1.5, "", "layer", detail="act2"))
    assert r.layer == "act2"
    assert [d.message for d in r.route([ev(3.0, "hold", "left", dur=2.0)])] == [KeyAction(("shift",), "up")]
    # and switched by a gesture of the new layer's rules while held: the same
    r = Router(parse_mapping(text.replace('[[rule]]\ngesture = "wave"', '[[rule]]\ngesture = "wave"\nset_layer = "act1"\n'
                                          '[[rule]]\ngesture = "wave"', 1), "m.toml", CLASSES, KINDS))
    r.route([ev(1.0, "hold", "entered")])
    r.command(ev(1.2, "", "layer", detail="act2"))
    r.route([ev(1.5, "wave", "gesture")])
    assert r.layer == "act1"
    assert [d.message for d in r.route([ev(3.0, "hold", "left", dur=2.0)])] == [KeyAction(("shift",), "up")]
