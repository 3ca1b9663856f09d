"""The daemon config's acquisition settings: defaults, OSC input, clear errors."""

import pytest

from bridge.cli import main
from bridge.service.config import ConfigError, load_config


def write(tmp_path, body):
    p = tmp_path / "show.toml"
    p.write_text("[garment]\nmodel = \"m.npz\"\n" + body)
    return p


def test_defaults_and_osc_input(tmp_path):
    c = load_config(write(tmp_path, 'port = "usb:f00d:0001"\n'))
    assert (c.protocol, c.timestamp, c.resample, c.stall_s, c.input) == ("auto", None, True, 1.0, "serial")
    c = load_config(write(tmp_path, 'input = "osc"\nlisten = "0.0.0.0:9100"\nsenders = ["10.0.0.21"]\naddress = "/j"\n'
                                    'arguments = ["t_s", "a", "-", "b"]\nstall_s = 0.5\n'))
    assert c.input == "osc" and c.arguments == ("t_s", "a", "-", "b") and c.stall_s == 0.5


@pytest.mark.parametrize("body,message", [
    ('port = "/dev/x"\nprotocol = "morse"\n', "protocol must be"),
    ('port = "/dev/x"\nstall_s = 0\n', "stall_s"),
    ('port = "/dev/x"\ntimestamp = "yes"\n', "timestamp must be true or false"),
    ('input = "osc"\nlisten = "0.0.0.0:9100"\naddress = "j"\narguments = ["a"]\n', "address must be an OSC address"),
    ('input = "osc"\nlisten = "0.0.0.0:9100"\naddress = "/j"\n', "arguments must list"),
])
def test_bad_settings_are_named(tmp_path, body, message):
    with pytest.raises(ConfigError, match=message):
        load_config(write(tmp_path, body))


def test_ports_and_capture_argument_errors(capsys):
    assert main(["ports"]) == 0
    assert main(["capture", "--yes"]) == 2
    assert "needs --port PORT" in capsys.readouterr().err
    assert main(["capture", "--simulated", "--yes", "--gestures", "juggle"]) == 2
    assert "the simulated wearer knows" in capsys.readouterr().err
