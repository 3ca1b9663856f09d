"""Property checks: what we build, reference parsers read back (python-osc, mido, sacn)."""

import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pythonosc import slip
from pythonosc.osc_bundle import OscBundle as ParsedBundle
from pythonosc.osc_message import OscMessage as ParsedMessage

from bridge.mapping.messages import LightLevels, MidiControl, MidiNote, OscBundle, OscMessage
from bridge.outputs import encode_osc, frame_osc_stream
from bridge.outputs.midi import midi_bytes
from bridge.outputs.sacn import sacn_packet

FAST = settings(max_examples=40, deadline=None)

addresses = st.lists(st.text("abcdefghijklmnopqrstuvwxyz0123456789_", min_size=1, max_size=8),
                     min_size=1, max_size=4).map(lambda parts: "/" + "/".join(parts))
args = st.lists(st.one_of(
    st.integers(-(2**31), 2**31 - 1),
    st.floats(allow_nan=False, allow_infinity=False, width=32),
    st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"), max_size=12),
    st.booleans()), max_size=5).map(tuple)


@FAST
@given(addresses, args)
def test_python_osc_parses_what_we_encode(address, values):
    # Reference parser: python-osc's OscMessage reads our bytes back to the same address and values.
    parsed = ParsedMessage(encode_osc(OscMessage(address, values)))
    assert parsed.address == address
    assert len(parsed.params) == len(values)
    for got, sent in zip(parsed.params, values):
        if isinstance(sent, float):
            assert got == struct.unpack(">f", struct.pack(">f", sent))[0]  # float32 on the wire
        else:
            assert got == sent and type(got) is type(sent)


@FAST
@given(st.lists(st.tuples(addresses, args), min_size=1, max_size=4),
       st.floats(min_value=0, max_value=2**32 - 2208988800 - 1, allow_nan=False))
def test_python_osc_parses_our_bundles(contents, timetag):
    # Reference parser: python-osc's OscBundle; time tags are NTP seconds with 2^-32 resolution.
    data = encode_osc(OscBundle(tuple(OscMessage(a, v) for a, v in contents), timetag))
    parsed = ParsedBundle(data)
    assert [m.address for m in parsed] == [a for a, _ in contents]
    assert abs(parsed.timestamp - timetag) < 1e-6 * max(1.0, timetag)


def test_time_tags_past_ntp_era_0_are_refused():
    # RFC 5905: NTP era 0 ends at 2**32 s after 1900-01-01, i.e. Unix 2**32 − 2208988800 (2036-02-07).
    with pytest.raises(ValueError):
        OscBundle((OscMessage("/a"),), timetag=2**32 - 2208988800)
    OscBundle((OscMessage("/a"),), timetag=2**32 - 2208988800 - 1)


@FAST
@given(st.binary(max_size=200))
def test_slip_frames_decode_to_the_packet(packet):
    # Reference decoder: python-osc's SLIP (RFC 1055) decoder; no END byte inside a frame.
    framed = frame_osc_stream(packet)
    assert b"\xc0" not in framed[1:-1] and framed[0] == framed[-1] == 0xC0
    assert slip.decode(framed) == packet


@FAST
@given(st.integers(1, 16), st.integers(0, 127), st.integers(0, 127), st.booleans())
def test_mido_parses_our_note_bytes(channel, note, velocity, on):
    # Reference parser: mido (channels 0–15 there); mido reports note-on velocity 0 as note_on too.
    mido = pytest.importorskip("mido")
    m = mido.Message.from_bytes(midi_bytes(MidiNote(channel, note, velocity, on)))
    assert (m.type, m.channel, m.note, m.velocity) == ("note_on" if on else "note_off", channel - 1, note, velocity)


@FAST
@given(st.integers(1, 16), st.integers(0, 127), st.integers(0, 127))
def test_mido_parses_our_control_bytes(channel, controller, value):
    import mido
    m = mido.Message.from_bytes(midi_bytes(MidiControl(channel, controller, value)))
    assert (m.type, m.channel, m.control, m.value) == ("control_change", channel - 1, controller, value)


@FAST
@given(st.integers(1, 63999), st.dictionaries(st.integers(1, 512), st.integers(0, 255), max_size=20),
       st.integers(0, 255), st.integers(0, 200))
def test_sacn_package_parses_our_packets(universe, levels, sequence, priority):
    # Reference parser: the sacn package's DataPacket.make_data_packet.
    data_packet = pytest.importorskip("sacn.messages.data_packet", reason="the sacn package is not installed")
    lv = LightLevels(universe, levels)
    slots = bytearray(512)
    for s, v in lv.levels.items():
        slots[s - 1] = v
    p = data_packet.DataPacket.make_data_packet(tuple(sacn_packet(universe, bytes(slots), sequence, bytes(16),
                                                                  "drape", priority)))
    assert (p.universe, p.sequence, p.priority, p.sourceName) == (universe, sequence, priority, "drape")
    assert bytes(p.dmxData) == bytes(slots)
