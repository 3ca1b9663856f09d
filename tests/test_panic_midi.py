"""Panic through the router to a MIDI output: the bytes on the wire.

MIDI 1.0 Detailed Specification (MIDI Manufacturers Association, 1996), channel voice and
channel mode messages: Note Off is status 1000nnnn (0x80 | channel − 1), then key, then
velocity; All Notes Off is a control change (1011nnnn, 0xB0 | channel − 1) to controller
123 (0x7B) with value 0. Channel 10 is nnnn = 1001.
"""

import mido

from bridge.decisions.gate import Event
from bridge.mapping import Router, parse_mapping
from bridge.mapping.messages import Release
from bridge.outputs.midi import MidiFileOutput, midi_bytes

CLASSES = ("null", "strike", "hold")
KINDS = {"strike": "gesture", "hold": "posture"}
MAPPING = """
[destinations.synth]
midi_file = "unused.mid"
[[rule]]
gesture = "hold"
on = "entered"
to = "synth"
note = 60
hold = true
[[rule]]
gesture = "strike"
to = "synth"
note = 38
channel = 10
length_s = 5.0
"""


def test_panic_sends_note_offs_then_all_notes_off_on_every_channel_used(tmp_path):
    router = Router(parse_mapping(MAPPING, "m.toml", CLASSES, KINDS))
    out = MidiFileOutput("synth", tmp_path / "panic.mid")
    for d in router.route([Event(1.0, "hold", "entered", 0.9), Event(1.2, "strike", "gesture", 0.9)]):
        out.send(d.message)
    panic = router.route([Event(1.5, "", "panic", 1.0, 0.0, "", 0.0, "signal")])
    assert [d.message for d in panic] == [Release()]
    out.send(panic[0].message)
    out.close()
    got = [bytes(m.bytes()) for m in mido.MidiFile(tmp_path / "panic.mid").tracks[0] if not m.is_meta]
    assert got[:6] == [
        bytes([0x90, 60, 100]), bytes([0x99, 38, 100]),       # the notes sounding
        bytes([0x80, 60, 0]), bytes([0x89, 38, 0]),           # Note Off, channels 1 and 10
        bytes([0xB0, 0x7B, 0x00]), bytes([0xB9, 0x7B, 0x00]),  # All Notes Off, channels 1 and 10
    ]
    # closing lets go once more: only All Notes Off again, no note left on
    assert set(got[6:]) <= {bytes([0xB0, 0x7B, 0x00]), bytes([0xB9, 0x7B, 0x00])}
    # after the panic nothing of the old holdings is let go a second time
    assert router.route([Event(2.0, "hold", "left", 0.9, 1.0)]) == [] and router.due(10.0) == []


def test_note_off_and_all_notes_off_bytes():
    from bridge.mapping.messages import MidiControl, MidiNote
    assert midi_bytes(MidiNote(1, 60, 0, on=False)) == bytes.fromhex("803C00")
    assert midi_bytes(MidiNote(16, 127, 0, on=False)) == bytes.fromhex("8F7F00")
    assert midi_bytes(MidiControl(2, 123, 0)) == bytes.fromhex("B17B00")
