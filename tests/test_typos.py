"""A typo in a config or mapping key is named, with the closest key drape knows; an empty or
wrong serial port says where to look."""

import signal
import subprocess
import time

import pytest

from bridge.mapping.loader import MappingError, parse_mapping
from bridge.service.config import ConfigError, load_config, load_service
from tests.conftest import drape_cmd


def config_error(tmp_path, text, loader=load_config):
    p = tmp_path / "show.toml"
    p.write_text(text)
    with pytest.raises(ConfigError) as info:
        loader(p)
    return str(info.value)


def test_a_misspelt_config_key_is_named_with_the_closest_key(tmp_path):
    msg = config_error(tmp_path, '[garment]\nport = "/dev/ttyACM0"\nmdoel = "me.npz"\n')
    assert "'mdoel'" in msg and "did you mean 'model'?" in msg
    msg = config_error(tmp_path, '[[garment]]\nsimulated = true\nmodel = "a.npz"\n[status]\nlevles_hz = 5\n',
                       load_service)
    assert "[status] has no key 'levles_hz'; did you mean 'levels_hz'?" in msg
    msg = config_error(tmp_path, '[[garment]]\nsimulated = true\nmodel = "a.npz"\n[calibraton]\nshift = true\n',
                       load_service)
    assert "'calibraton'" in msg and "did you mean 'calibration'?" in msg


def test_an_empty_port_is_refused(tmp_path):
    msg = config_error(tmp_path, '[garment]\nport = ""\nmodel = "me.npz"\n')
    assert "port is empty" in msg and "drape ports" in msg


@pytest.mark.parametrize("text, expected", [
    ('[destinations.a]\nosc = "127.0.0.1:9000"\n[[rule]]\ngesture = "bow"\nto = "a"\nadress = "/a"\n',
     "rule[1].adress: unknown key 'adress'; did you mean 'address'?"),
    ('[destinations.a]\nocs = "127.0.0.1:9000"\n', "unknown key 'ocs', did you mean 'osc'?"),
    ('[destinations.a]\nmidi = "out"\napi_ = "x"\n', "unknown key 'api_' for midi destinations; did you mean 'api'?"),
    ('[saftey]\nstart = "armed"\n', "unknown top-level table 'saftey'; did you mean 'safety'?"),
    ('[safety]\nidle_disarm = 60\n', "unknown key 'idle_disarm'; did you mean 'idle_disarm_s'?"),
    ('[layers]\nfrist = "a"\n', "unknown key 'frist'; did you mean 'first'?"),
])
def test_a_misspelt_mapping_key_gets_a_suggestion(text, expected):
    with pytest.raises(MappingError) as info:
        parse_mapping(text, "show.toml")
    assert expected in str(info.value)


def test_a_port_that_is_not_there_points_to_drape_ports(tmp_path, demo_model_file):
    cfg = tmp_path / "show.toml"
    cfg.write_text(f'[garment]\nport = "{tmp_path / "ttyNOPE"}"\nmodel = "{demo_model_file}"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(cfg)), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        lines = []
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            line = proc.stderr.readline()
            lines.append(line)
            if "waiting for the garment" in line:
                break
        time.sleep(1.5)   # longer than the hold-still at start, had it begun
        proc.send_signal(signal.SIGINT)
        rest = proc.communicate(timeout=20)[1]
    finally:
        proc.kill()
    waiting = [l for l in lines if "waiting for the garment" in l]
    assert waiting and "drape ports" in waiting[0], lines
    # no sample ever came: nobody is asked to hold still, and the ending says there were none
    assert "hold still" not in "".join(lines) + rest and "no samples" in rest, rest
