"""Control messages over the network: arm, disarm, panic, layer; never a key press.
Messages are built with python-osc's own builder (an independent OSC 1.0 encoder)."""

import socket

import pytest
from pythonosc.osc_message_builder import OscMessageBuilder

from bridge.decisions.gate import Event
from bridge.mapping import Router, parse_mapping
from bridge.mapping.messages import KeyAction, Release
from bridge.service.control import ControlInbox, parse_host_port


def osc(address, *args):
    b = OscMessageBuilder(address)
    for a in args:
        b.add_arg(a)
    return b.build().dgram


def test_inbox_turns_messages_into_commands_and_ignores_the_rest():
    inbox = ControlInbox("127.0.0.1", 0)
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        for dgram in (osc("/drape/disarm"), osc("/drape/layer", "act2"), osc("/drape/keys", "space"),
                      b"garbage", osc("/drape/layer", 3), osc("/drape/panic"), osc("/drape/arm")):
            s.sendto(dgram, inbox.address)
        import time
        time.sleep(0.2)
        assert inbox.poll() == [("disarm", ""), ("layer", "act2"), ("panic", ""), ("arm", "")]
        assert inbox.ignored == 3
        assert inbox.poll() == []
    finally:
        s.close()
        inbox.close()


def test_parse_host_port():
    assert parse_host_port("127.0.0.1:9100") == ("127.0.0.1", 9100)
    with pytest.raises(ValueError, match="1 to 65535"):
        parse_host_port("127.0.0.1:70000")


def test_network_commands_through_the_pipeline_never_press_keys(demo_model):
    from bridge.service import Pipeline
    text = """
[destinations.game]
keys = "x11"
[[rule]]
gesture = "raise_right"
to = "game"
keys = "space"
[[rule]]
gesture = "raise_left"
layer = "b"
to = "game"
keys = "enter"
"""
    m = parse_mapping(text, "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    pipe = Pipeline(demo_model, m)
    sent = []
    for kind, detail in (("disarm", ""), ("arm", ""), ("layer", "b"), ("panic", ""), ("arm", "")):
        sent += pipe.dispatches(pipe.command(kind, detail))
    assert sent and not any(isinstance(d.message, KeyAction) for d in sent)
    assert any(d.message == Release() for d in sent) and pipe.router.layer == "b"
    # the garment's own gesture still presses its key once armed
    [d] = pipe.dispatches([Event(1.0, "raise_right", "gesture", 0.9)])
    assert d.message == KeyAction(("space",), "tap")


def test_a_switch_to_a_layer_that_does_not_exist_is_not_reported_as_a_switch(demo_model):
    # A layer event would be printed and logged as a switch ("** layer act9") right before the
    # router's "staying in": no event at all, only the warning.
    text = """
[destinations.show]
osc = "127.0.0.1:9"
[[rule]]
gesture = "raise_left"
layer = "act2"
to = "show"
address = "/x"
"""
    from bridge.service import Pipeline
    m = parse_mapping(text, "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    pipe = Pipeline(demo_model, m)
    assert pipe.command("layer", "act9") == []
    assert pipe.router.warnings == ["no layer 'act9' in m.toml (control message); staying in 'act2'"]
    [e] = pipe.command("layer", "act2")
    assert e.kind == "layer" and e.detail == "act2"


def test_a_panic_or_disarm_button_that_sends_its_value_is_obeyed():
    # A control surface's button sends its value with the address, 1.0 on press and 0.0 on
    # release (common practice, no source). A panic or a disarm must not be refused for it;
    # arming stays strict.
    from bridge.service.control import ControlPort
    token = "a-long-shared-token"
    for make, head in ((lambda: ControlInbox("127.0.0.1", 0), ()), (lambda: ControlPort("127.0.0.1", 0, token), (token,))):
        port = make()
        s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        try:
            for dgram in (osc("/drape/panic", *head, 1.0), osc("/drape/panic", *head, 0), osc("/drape/disarm", *head, True),
                          osc("/drape/panic", *head, "lead", 1.0), osc("/drape/arm", *head, 1.0),
                          osc("/drape/layer", *head, "act2", 1.0)):
                s.sendto(dgram, port.address)
            import time
            time.sleep(0.2)
            got = port.receive() if isinstance(port, ControlInbox) else port.poll()
            assert [(c, d, g) for c, d, g, _ in got] == [("panic", "", ""), ("panic", "", ""), ("disarm", "", ""),
                                                         ("panic", "", "lead")]
            assert port.ignored == 2   # the arm and the layer switch with a number
        finally:
            s.close()
            port.close()
