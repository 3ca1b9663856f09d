"""The daemon opens every destination it can: one whose system is missing is reported and
left out, the others keep running; on stop each reports what it sent and dropped."""

import os
import socket
from types import SimpleNamespace

import pytest

from bridge.cli import _close_outputs, _open_outputs
from bridge.mapping.messages import Destination, OscMessage


def test_a_missing_midi_system_leaves_the_other_destinations_running(capsys):
    if os.path.exists("/dev/snd/seq"):
        pytest.skip("this machine has an ALSA sequencer; the missing-system case cannot be shown")
    pytest.importorskip("rtmidi", reason="python-rtmidi (extra 'midi') is not installed")
    r = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    r.bind(("127.0.0.1", 0))
    r.settimeout(5)
    mapping = SimpleNamespace(destinations={
        "synth": Destination("synth", "midi", port_name="x", virtual=True, midi_api="mido.backends.rtmidi/LINUX_ALSA"),
        "show": Destination("show", "osc", "127.0.0.1", r.getsockname()[1]),
    })
    outputs = _open_outputs(mapping)
    assert list(outputs) == ["show"]
    assert "destination 'synth' left out" in capsys.readouterr().err
    outputs["show"].send(OscMessage("/drape/cue/next"))
    assert r.recv(100).startswith(b"/drape/cue/next\x00")
    _close_outputs(outputs)
    assert "output show: sent 1, dropped 0" in capsys.readouterr().err
    r.close()
