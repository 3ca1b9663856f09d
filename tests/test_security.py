"""Security review checks (docs/security.md): no code from data, the control
port's guard, no network path to the keyboard, config paths resolved, the service unit."""

import inspect
import io
import tokenize
from pathlib import Path
from types import SimpleNamespace

import pytest

from bridge.decisions import Event
from bridge.mapping import Router, parse_mapping
from bridge.mapping.messages import KeyAction, Release
from bridge.service.control import ControlInbox, ControlPort, TokenMissing

ROOT = Path(__file__).resolve().parent.parent
FORBIDDEN_NAMES = {"pickle", "cPickle", "dill", "cloudpickle", "shelve", "marshal", "eval", "exec", "__import__",
                   "popen", "execv", "execve", "execvp", "spawnv", "getoutput", "getstatusoutput"}


def risky_code(source: str) -> list[str]:
    """Names and call patterns that run code from data, found in the code's tokens (strings
    and comments are not code): pickling modules, eval/exec, os.system, shell=True, and any
    allow_pickle not set to False."""
    found = []
    toks = [t for t in tokenize.generate_tokens(io.StringIO(source).readline)
            if t.type not in (tokenize.COMMENT, tokenize.NL, tokenize.NEWLINE, tokenize.INDENT, tokenize.DEDENT)]
    for i, t in enumerate(toks):
        nxt = [x.string for x in toks[i + 1:i + 3]]
        prev = toks[i - 2].string + toks[i - 1].string if i >= 2 else ""
        where = f"line {t.start[0]}"
        if t.type == tokenize.NAME and t.string in FORBIDDEN_NAMES:
            found.append(f"{where}: {t.string}")
        if t.type == tokenize.NAME and t.string == "system" and prev == "os.":
            found.append(f"{where}: os.system")
        if t.type == tokenize.NAME and t.string == "shell" and nxt == ["=", "True"]:
            found.append(f"{where}: shell=True")
        if t.type == tokenize.NAME and t.string == "allow_pickle" and nxt != ["=", "False"]:
            found.append(f"{where}: allow_pickle not False")
        if t.type == tokenize.NAME and t.string == "load" and prev in ("np.", "numpy.") and "allow_pickle" not in source:
            found.append(f"{where}: np.load without allow_pickle=False")
    return found


def test_the_scanner_finds_what_it_looks_for():
    bad = ("import pickle\nx = eval('1')\nos.system('ls')\nsubprocess.run('ls', shell=True)\n"
           "np.load(p, allow_pickle=True)\n")
    assert len(risky_code(bad)) == 5
    assert risky_code("s = 'pickle eval os.system'  # exec in a comment\nnp.load(p, allow_pickle=False)\n") == []


def test_no_pickle_eval_exec_or_shell_anywhere_in_the_package():
    problems = []
    for path in sorted((ROOT / "bridge").rglob("*.py")):
        for p in risky_code(path.read_text(encoding="utf-8")):
            problems.append(f"{path.relative_to(ROOT)}: {p}")
    assert problems == []


# ---- control port ------------------------------------------------------------------------------

def test_control_ports_off_loopback_need_a_token():
    with pytest.raises(TokenMissing, match="token"):
        ControlPort("0.0.0.0", 0)
    with pytest.raises(TokenMissing, match="127.0.0.1"):
        ControlInbox("0.0.0.0", 0)  # the single-garment inbox has no token: loopback only
    port = ControlPort("0.0.0.0", 0, "a-long-shared-token")
    port.close()
    for host in ("127.0.0.1", "localhost"):
        ControlPort(host, 0).close()
        ControlInbox(host, 0).close()


def test_token_is_compared_in_constant_time():
    # Timing cannot be measured reliably in a test; the comparison must be hmac.compare_digest
    # (constant time for equal-length inputs, Python standard library documentation).
    assert "hmac.compare_digest" in inspect.getsource(ControlPort.handle)


# ---- no network path to the keyboard -------------------------------------------------------------

KEYS_MAPPING = """
[destinations.kb]
keys = "x11"
[destinations.show]
osc = "127.0.0.1:9"
[[rule]]
gesture = "bow"
to = "kb"
keys = ["ctrl", "s"]
layer = "one"
[[rule]]
gesture = "arms_crossed"
on = "entered"
to = "kb"
keys = "space"
hold = true
layer = "one"
[[rule]]
gesture = "bow"
to = "show"
address = "/x"
layer = "two"
"""


def test_commands_from_the_network_never_press_keys():
    m = parse_mapping(KEYS_MAPPING, "k.toml", ("null", "bow", "arms_crossed"),
                      {"bow": "gesture", "arms_crossed": "posture"})
    r = Router(m)
    pressed = r.route([Event(1.0, "arms_crossed", "entered", 0.9, 0.0, "")])
    assert any(isinstance(d.message, KeyAction) for d in pressed)  # the wearer's own posture does
    for kind, detail in (("disarmed", ""), ("armed", ""), ("layer", "two"), ("layer", "one"), ("panic", "")):
        out = r.command(Event(2.0, "", kind, 1.0, 0.0, "", 0.0, detail))
        assert not any(isinstance(d.message, KeyAction) for d in out), kind
    # a panic lets go of what is held (Release) instead of pressing anything
    assert any(isinstance(d.message, Release) for d in r.command(Event(3.0, "", "panic", 1.0, 0.0, "")))


def test_garments_fed_over_the_network_get_no_keys_output():
    from bridge.outputs import OutputUnavailable
    from bridge.service.daemon import Garment, Service
    from bridge.service.runner import keys_only_for_local_input, reconcile_outputs
    m = parse_mapping(KEYS_MAPPING, "k.toml")
    opened = []

    def open_fn(d):
        opened.append(d.name)
        return SimpleNamespace(close=lambda: None)

    guarded = keys_only_for_local_input(open_fn, network_input=True)
    with pytest.raises(OutputUnavailable, match="never pressed"):
        guarded(m.destinations["kb"])
    notes = []
    outputs = {}
    reconcile_outputs(outputs, None, m, guarded, notes.append)
    assert sorted(outputs) == ["show"] and any("kb" in n and "left out" in n for n in notes)
    assert keys_only_for_local_input(open_fn, network_input=False) is open_fn  # serial garments keep keys
    service = Service(SimpleNamespace(garments=[], status_to=()), open_fn)
    with pytest.raises(OutputUnavailable):
        service.opener(Garment("coat", SimpleNamespace(input="osc")))(m.destinations["kb"])
    service.opener(Garment("coat", SimpleNamespace(input="serial")))(m.destinations["kb"])
    assert "kb" in opened
    # A serial port given as a pyserial URL that reaches the network (pyserial's URL handlers,
    # socket:// and rfc2217://, pyserial documentation "URL Handlers") is network input too.
    for port in ("socket://10.0.0.5:7777", "rfc2217://10.0.0.5:2217", "SOCKET://h:1", "spy://socket://h:1"):
        with pytest.raises(OutputUnavailable, match="never pressed.*URL"):
            service.opener(Garment("coat", SimpleNamespace(input="serial", port=port)))(m.destinations["kb"])
    opened.clear()
    for port in ("/dev/ttyACM0", "usb:2e8a:000a", "loop://", None):   # local: keys stay
        service.opener(Garment("coat", SimpleNamespace(input="serial", port=port)))(m.destinations["kb"])
    assert opened == ["kb"] * 4


# ---- paths from configs ----------------------------------------------------------------------------

def test_config_and_mapping_paths_are_resolved_next_to_their_file(tmp_path, monkeypatch):
    from bridge.mapping import load_mapping
    from bridge.service.config import load_config
    show = tmp_path / "show"
    show.mkdir()
    (show / "cfg.toml").write_text('[garment]\nport = "/dev/ttyACM0"\nmodel = "models/coat.npz"\n'
                                   'mapping = "../maps/m.toml"\n', encoding="utf-8")
    (tmp_path / "maps").mkdir()
    (tmp_path / "maps" / "m.toml").write_text('[destinations.rec]\nmidi_file = "takes/out.mid"\n', encoding="utf-8")
    monkeypatch.chdir(tmp_path.parent)
    cfg = load_config(show / "cfg.toml")
    assert cfg.model == (show / "models" / "coat.npz").resolve() and cfg.model.is_absolute()
    assert cfg.mapping == (tmp_path / "maps" / "m.toml").resolve()
    m = load_mapping(cfg.mapping)
    assert Path(m.destinations["rec"].path) == (tmp_path / "maps" / "takes" / "out.mid").resolve()


# ---- the systemd example --------------------------------------------------------------------------

def test_service_unit_runs_unprivileged():
    text = (ROOT / "examples" / "service" / "drape.service").read_text(encoding="utf-8")
    keys = {}
    for line in text.splitlines():
        if line and not line.startswith("#") and "=" in line:
            k, _, v = line.partition("=")
            keys.setdefault(k.strip(), v.strip())
    assert keys["User"] not in ("", "root", "0") and keys["Group"] not in ("", "root", "0")
    assert "dialout" in keys["SupplementaryGroups"].split()   # serial ports (Debian's group for ttyACM/ttyUSB)
    assert keys["NoNewPrivileges"] == "true"
    assert keys["CapabilityBoundingSet"] == "" and keys["AmbientCapabilities"] == ""
    assert not keys["ExecStart"].startswith(("/bin/sh", "sh ", "sudo"))
    assert "--system" in text and "useradd" in text


def test_the_service_warns_in_its_log_and_views_when_a_garments_destinations_cannot_open(caplog):
    """An output whose system is missing leaves the garment running, but never quietly: a
    warning in the log and a notice every view shows, saying when nothing at all is sent."""
    import logging
    from bridge.outputs import OutputUnavailable
    from bridge.service.daemon import Garment, Service
    m = parse_mapping(KEYS_MAPPING, "k.toml")

    def refuse(d):
        raise OutputUnavailable(f"{d.name}: the system it needs is missing")
    service = Service(SimpleNamespace(garments=[], status_to=()), refuse)
    notices = []
    service.status.send = notices.extend
    g = Garment("coat", SimpleNamespace(input="serial"))
    caplog.set_level(logging.INFO, logger="drape")
    service.reconcile(g, None, m)
    warned = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert len(warned) == len(m.destinations) and all("left out, its cues go nowhere" in w for w in warned)
    assert "nothing is sent" in warned[-1]
    assert len(notices) == len(m.destinations) and all(b"/drape/g/coat/notice" in n for n in notices)
    # and in the garment's state, which every view and status request gets, not only at that moment
    g.pipeline = None
    service.garments.append(g)
    state = b"".join(service.state_messages(0.0))
    assert b"go nowhere" in state and all(name.encode() in state for name in m.destinations)
    service.status.close()


def test_the_services_state_names_an_output_that_is_failing_until_it_sends_again():
    """A keys destination whose display went away: a view started after the notice, or a
    status request, must not show the garment as simply running."""
    from bridge.outputs.base import OutputStats
    from bridge.service.daemon import Garment, Service
    service = Service(SimpleNamespace(garments=[], status_to=()), lambda d: None)
    kb = SimpleNamespace(stats=OutputStats(sent=1))
    g = Garment("coat", SimpleNamespace(input="serial"), outputs={"kb": kb})
    g.pipeline = None
    service.garments.append(g)
    g.failures.poll(g.outputs, 0.0)
    assert b"FAILING" not in b"".join(service.state_messages(0.0))
    kb.stats.dropped, kb.stats.last_error = 1, "ConnectionClosedError: Display connection closed by server"
    g.failures.poll(g.outputs, 1.0)
    assert b"output kb FAILING: ConnectionClosedError" in b"".join(service.state_messages(1.0))
    kb.stats.sent += 1
    g.failures.poll(g.outputs, 10.0)                     # told as sending again
    assert b"FAILING" not in b"".join(service.state_messages(10.0))
    service.status.close()


def test_a_cue_to_a_destination_left_out_is_logged_as_not_sent(demo_model, caplog):
    import logging
    from bridge.decisions.gate import Event
    from bridge.service import Pipeline
    from bridge.service.daemon import Garment, Service
    m = parse_mapping('[destinations.show]\nosc = "127.0.0.1:9"\n[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/bow"\n',
                      "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    service = Service(SimpleNamespace(garments=[], status_to=()), None)
    g = Garment("coat", SimpleNamespace(input="serial"), model=demo_model, pipeline=Pipeline(demo_model, m, "coat"))
    caplog.set_level(logging.INFO, logger="drape")
    service.deliver(g, [Event(1.0, "bow", "gesture", 0.9)], service.clock())   # "show" never opened
    line = next(r.getMessage() for r in caplog.records if "gesture bow" in r.getMessage())
    assert line.endswith("; not sent to show (left out)"), line
    service.status.close()
