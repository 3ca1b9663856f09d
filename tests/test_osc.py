"""OSC encoding against the OSC 1.0 specification's worked examples."""

from bridge.mapping import OscMessage
from bridge.outputs import encode_osc


def test_float_message_matches_spec_example():
    # OSC 1.0 specification, "OSC 1.0 examples" page: /oscillator/4/frequency 440.0, 32 bytes.
    expected = bytes.fromhex("2f6f7363696c6c61746f722f342f6672657175656e6379002c66000043dc0000")
    assert encode_osc(OscMessage("/oscillator/4/frequency", (440.0,))) == expected


def test_mixed_message_matches_spec_example():
    # OSC 1.0 specification examples: /foo 1000 -1 "hello" 1.234 5.678, 40 bytes.
    expected = bytes.fromhex(
        "2f666f6f000000002c69697366660000000003e8ffffffff68656c6c6f0000003f9df3b640b5b22d"
    )
    assert encode_osc(OscMessage("/foo", (1000, -1, "hello", 1.234, 5.678))) == expected


def test_booleans_are_type_tags_without_payload():
    # OSC 1.0 specification: T and F carry no argument bytes.
    data = encode_osc(OscMessage("/a", (True, False)))
    assert data == b"/a\x00\x00" + b",TF\x00"
