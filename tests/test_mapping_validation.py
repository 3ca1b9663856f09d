"""Every validation error of a mapping file names the file, the line, the key path and what
to change. MIDI ranges (values 0–127, channels 1–16) are from the MIDI 1.0 specification;
OSC addresses begin with "/" per the OSC 1.0 specification; ports 1–65535 are the TCP/UDP
port range (RFC 793 / RFC 768, 16-bit port fields; 0 is reserved)."""

import pytest

from bridge.mapping import MappingError, parse_mapping
from bridge.mapping.messages import KeyAction, LightLevels, MidiControl, MidiNote, MidiProgram, OscBundle, OscMessage
from bridge.decisions.gate import Event

CLASSES = ("null", "raise_right", "bow", "arms_crossed")
KINDS = {"raise_right": "gesture", "bow": "gesture", "arms_crossed": "posture"}
CHANNELS = ("left_sleeve", "right_sleeve")

BASE = """\
[destinations.desk]
osc = "127.0.0.1:9000"
[destinations.synth]
midi = "drape out"
[destinations.game]
keys = "x11"
[destinations.rig]
sacn = 1
safe = { 1 = 255 }

[[rule]]
gesture = "raise_right"
to = "{to}"
{action}
"""


def problems(action, to="desk", extra=""):
    text = BASE.replace("{to}", to).replace("{action}", action) + extra
    with pytest.raises(MappingError) as info:
        parse_mapping(text, "show.toml", CLASSES, KINDS, CHANNELS)
    return info.value.problems


def one(action, to="desk", extra=""):
    p = problems(action, to, extra)
    assert len(p) == 1, p
    return p[0]


def test_each_action_builds_its_message():
    cases = [
        ("desk", 'address = "/show/next"\nargs = [1, 2.5, "x", true, "{level}"]', OscMessage("/show/next", (1, 2.5, "x", True, 0.25))),
        ("desk", 'bundle = [{ address = "/a", args = [1] }, { address = "/b" }]',
         OscBundle((OscMessage("/a", (1,)), OscMessage("/b")))),
        ("synth", "note = 60\nchannel = 10\nvelocity = 90\nlength_s = 0.2", MidiNote(10, 60, 90)),
        ("synth", 'cc = 7\nvalue = "{confidence}"', MidiControl(1, 7, 64)),
        ("synth", "program = 5\nchannel = 3", MidiProgram(3, 5)),
        ("game", 'keys = ["ctrl", "s"]', KeyAction(("ctrl", "s"), "tap")),
        ("rig", "levels = { 1 = 255, 12 = 40 }\nfade_s = 2.5", LightLevels(1, {1: 255, 12: 40}, 2.5)),
    ]
    for to, action, want in cases:
        m = parse_mapping(BASE.replace("{to}", to).replace("{action}", action), "show.toml", CLASSES, KINDS, CHANNELS)
        [d] = m.dispatches(Event(1.0, "raise_right", "gesture", 0.5, 0.0, "", 0.25))
        assert (d.destination, d.message) == (to, want)
    assert m.destinations["rig"].safe_levels == ((1, 255),)



def test_validation_errors_with_lines():
    # unknown gesture, with the closest class suggested (line 12: gesture = ...)
    text = BASE.replace('gesture = "raise_right"', 'gesture = "rise_right"').replace("{to}", "desk").replace("{action}", 'address = "/x"')
    with pytest.raises(MappingError) as info:
        parse_mapping(text, "show.toml", CLASSES, KINDS, CHANNELS)
    assert info.value.problems == ["show.toml:12: rule[1].gesture: unknown gesture 'rise_right': did you mean 'raise_right'?"]
    # unknown destination (line 13: to = ...)
    assert one('address = "/x"', to="lamp").startswith(
        "show.toml:13: rule[1].to: unknown destination 'lamp'; declare [destinations.lamp] or use one of desk, synth, game, rig")
    # a destination of the wrong kind
    assert one("note = 60", to="desk").startswith("show.toml:13: rule[1].to: destination 'desk' is osc; note needs a midi or midi-file destination")
    # MIDI values outside 0–127 (line 14: the action's first line)
    assert one("note = 128", to="synth") == "show.toml:14: rule[1].note: MIDI note must be a whole number 0 to 127 (got 128)"
    assert one("note = 60\nvelocity = -1", to="synth").startswith("show.toml:15: rule[1].velocity: MIDI velocity must be a whole number 0 to 127")
    assert one("cc = 7\nvalue = 300", to="synth").startswith("show.toml:15: rule[1].value: MIDI value must be")
    assert one("program = 200", to="synth").startswith("show.toml:14: rule[1].program: MIDI program must be")
    # channels outside 1–16
    assert one("cc = 7\nchannel = 0", to="synth") == "show.toml:15: rule[1].channel: MIDI channel must be a whole number 1 to 16 (got 0)"
    assert one("program = 1\nchannel = 17", to="synth").startswith("show.toml:15: rule[1].channel: MIDI channel must be")
    # OSC addresses not starting with "/"
    assert one('address = "show/next"').startswith("show.toml:14: rule[1].address: OSC addresses start with '/'")
    assert one('bundle = [{ address = "go" }]').startswith("show.toml:14: rule[1].bundle[1].address: OSC addresses start with '/'")
    # unknown key names, with a suggestion
    assert one('keys = ["ctrl", "escpe"]', to="game") == "show.toml:14: rule[1].keys: unknown key 'escpe'; did you mean 'escape'?"
    assert one('keys = "Space"', to="game") == "show.toml:14: rule[1].keys: key 'Space': key names are lower case; write 'space'"
    # a value field where a MIDI number is needed
    assert "velocity is 0 to 127 or one of {confidence}, {level}" in one('note = 60\nvelocity = "{duration_s}"', to="synth")


def test_port_out_of_range_in_each_destination_kind():
    for head, line in (('[destinations.d]\nosc = "127.0.0.1:0"\n', 2), ('[destinations.d]\nosc_tcp = "10.0.0.5:65536"\n', 2),
                       ('\n[destinations.d]\nsacn = 1\nport = 70000\n', 4)):
        with pytest.raises(MappingError) as info:
            parse_mapping(head, "show.toml", CLASSES, KINDS)
        [p] = info.value.problems
        assert p.startswith(f"show.toml:{line}: destinations.d.") and ("out of range: use 1 to 65535" in p or "port must be a whole number 1 to 65535" in p), p


def test_destination_problems():
    for text, want in (
        ('[destinations.d]\nosc = "127.0.0.1:9000"\nmidi = "x"\n', "show.toml:1: destinations.d: needs exactly one of"),
        ('[destinations.d]\nkeys = "wayland"\n', "show.toml:2: destinations.d.keys: use \"x11\""),
        ('[destinations.d]\nsacn = 70000\n', "show.toml:2: destinations.d.sacn: sACN universe must be a whole number 1 to 63999"),
        ('[destinations.d]\nsacn = 1\nsafe = { 600 = 1 }\n', "show.toml:3: destinations.d.safe: DMX slot '600' must be 1 to 512"),
        ('[destinations.d]\nosc = "127.0.0.1:9000"\nframing = "1.0"\n', "show.toml:3: destinations.d.framing: unknown key 'framing' for osc destinations"),
        ('[destinations.d]\nmidi_file = "take.wav"\n', "show.toml:2: destinations.d.midi_file: a file name ending in .mid"),
    ):
        with pytest.raises(MappingError) as info:
            parse_mapping(text, "show.toml", CLASSES, KINDS)
        assert info.value.problems[0].startswith(want), info.value.problems


def test_rule_shape_problems():
    assert one('address = "/x"\nnote = 60').startswith("show.toml:15: rule[1].note: a rule does one thing")
    assert one('address = "/x"\non = "entered"').startswith('show.toml:15: rule[1].on: raise_right is a dynamic gesture')
    assert one('keys = "a"\nhold = true', to="game").startswith("show.toml:15: rule[1].hold: hold = true is for a note or keys on = \"entered\"")
    assert one("note = 60\nlength_s = 0", to="synth").startswith("show.toml:15: rule[1].length_s: a note needs length_s > 0")
    assert one('set_layer = "act9"', extra='\n[[rule]]\ngesture = "bow"\nlayer = "act1"\nto = "desk"\naddress = "/b"\n').startswith(
        "show.toml:14: rule[1].set_layer: no rule is in layer 'act9'")


def test_control_problems():
    base = '\n[[control]]\nname = "reach"\nmix = { right_sleeve = 1.0 }\nto = "synth"\ncc = 1\n'
    def ctl(extra, replace=None):
        text = 'address = "/x"'
        c = base if replace is None else base.replace(*replace)
        return problems(text, extra=c + extra)
    # line numbers: [[control]] at 16; mix 18; cc 20; extra keys from 21
    assert ctl("", ("right_sleeve", "rigth_sleeve")) == ["show.toml:18: control[1].mix: unknown channel 'rigth_sleeve': did you mean 'right_sleeve'?"]
    assert ctl("", ("cc = 1", "cc = 128")) == ["show.toml:20: control[1].cc: MIDI controller must be a whole number 0 to 127 (got 128)"]
    assert ctl("channel = 17\n") == ["show.toml:21: control[1].channel: MIDI channel must be a whole number 1 to 16 (got 17)"]
    assert ctl("relaxed = 0.1\nclosest = 0.05\n")[0].startswith("show.toml:22: control[1].closest: must be above relaxed")
    assert ctl('only_while = "bow"\n')[0].startswith("show.toml:21: control[1].only_while: bow is a dynamic gesture; this needs a posture")
    assert ctl('range = "missing.json"\n')[0].startswith("show.toml:21: control[1].range: ")


def test_safety_and_status_problems():
    assert one('address = "/x"', extra='\n[safety]\narm_posture = "bow"\n').startswith(
        "show.toml:17: safety.arm_posture: bow is a dynamic gesture; this needs a posture")
    assert one('address = "/x"', extra='\n[safety]\npanic_gesture = "bwo"\n') == \
        "show.toml:17: safety.panic_gesture: unknown gesture 'bwo': did you mean 'bow'?"
    assert one('address = "/x"', extra='\n[status]\nto = "synth"\n').startswith(
        "show.toml:17: status.to: destination 'synth' is midi; address needs an osc or osc-tcp destination")


def test_example_mappings_are_valid_against_the_simulated_jacket():
    from pathlib import Path

    from bridge.garment import GESTURES, Jacket
    from bridge.mapping import load_mapping

    root = Path(__file__).resolve().parent.parent / "mappings"
    names = Jacket(seed=0).channel_names
    kinds = {p.stem: {d.kind for d in load_mapping(p, ("null", *GESTURES), dict(GESTURES), names).destinations.values()}
             for p in sorted(root.glob("*.toml"))}
    assert kinds == {"demo": {"osc"}, "stage-cues": {"osc"}, "music": {"midi"}, "game-keys": {"keys"},
                     "single-switch": {"keys"}, "lighting": {"sacn"}}


def test_a_copied_rule_is_refused_with_both_lines():
    # Two rules sending the same thing on the same event would send each cue twice (a cue
    # list would skip one): the copy is refused, naming the rule it repeats.
    copy = '\n[[rule]]\ngesture = "raise_right"\nto = "desk"\naddress = "/show/next"\n'
    assert one('address = "/show/next"', extra=copy) == (
        "show.toml:16: rule[2]: does the same as rule[1] (line 11) on the same event, so the cue would go "
        "out twice; remove one of them")
    # a rule in every layer and its copy in one layer overlap there
    assert "does the same as rule[1]" in one('address = "/show/next"', extra=copy.replace('to =', 'layer = "act1"\nto ='))
    # other arguments, another event or another layer each are a rule of their own
    for other in (copy.replace('"/show/next"', '"/show/next"\nargs = [2]'),
                  copy.replace("raise_right", "bow")):
        parse_mapping(BASE.replace("{to}", "desk").replace("{action}", 'address = "/show/next"') + other,
                      "show.toml", CLASSES, KINDS, CHANNELS)
    layered = BASE.replace("{to}", "desk").replace("{action}", 'address = "/show/next"\nlayer = "act1"')
    parse_mapping(layered + copy.replace('to =', 'layer = "act2"\nto ='), "show.toml", CLASSES, KINDS, CHANNELS)


def test_an_osc_float_too_large_for_float32_is_refused_at_check_time():
    # OSC 1.0 'f' is an IEEE 754 binary32; its largest finite value is (2 − 2⁻²³)·2¹²⁷ ≈ 3.4028235e38
    # (IEEE 754-2008, binary32). Python's struct packs exactly that range: the reference for the bound.
    import struct
    assert one('address = "/x"\nargs = [1e40]') == \
        "show.toml:15: rule[1].args: 1e+40 does not fit an OSC float32 (at most ±3.402823e+38)"
    assert "does not fit an OSC float32" in one('bundle = [{ address = "/a", args = [-1e39] }]')
    with pytest.raises(OverflowError):
        struct.pack(">f", 1e40)
    largest = (2 - 2 ** -23) * 2.0 ** 127
    struct.pack(">f", largest)
    m = parse_mapping(BASE.replace("{to}", "desk").replace("{action}", f'address = "/x"\nargs = [{largest!r}, inf]'),
                      "show.toml", CLASSES, KINDS, CHANNELS)
    from bridge.outputs.osc import encode_osc
    encode_osc(m.rules[0].action.build(Event(1.0, "raise_right", "gesture", 0.5, 0.0, "", 0.25)))  # what is accepted is sent


def test_problems_are_listed_in_the_files_order():
    # The checks run key by key (the gesture before the destination); the list an editor
    # works down goes by line.
    text = ('[destinations.desk]\nosc = "127.0.0.1:9000"\n\n[[rule]]\nto = "nowhere"\nnote = 200\n'
            'gesture = "raise_rihgt"\n')
    with pytest.raises(MappingError) as info:
        parse_mapping(text, "show.toml", CLASSES, KINDS, CHANNELS)
    lines = [int(p.split(":")[1]) for p in info.value.problems]
    assert len(lines) >= 2 and lines == sorted(lines), info.value.problems
