"""The daemon in service: two garments in one process, control port, status stream, signals."""

import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import mido
import numpy as np
import pytest
from pythonosc.dispatcher import Dispatcher
from pythonosc.osc_server import ThreadingOSCUDPServer

from bridge.service.config import ConfigError, load_service
from bridge.service.control import ControlPort, TokenMissing
from bridge.service.status import message
from bridge.service.watch import StatusView, command_message, render
from bridge.signal.shift import ShiftDetector
from tests.conftest import drape_cmd, ROOT


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_status_message_bytes_match_the_osc_spec_example():
    # OSC 1.0 specification, "OSC 1.0 examples" page: /oscillator/4/frequency with float 440.0
    want = bytes.fromhex("2f6f7363696c6c61746f722f342f6672657175656e6379002c66000043dc0000")
    assert message("/oscillator/4/frequency", 440.0) == want


def test_config_reads_several_garments_and_refuses_bad_ones(tmp_path):
    p = tmp_path / "show.toml"
    p.write_text('[[garment]]\nname = "a"\nsimulated = true\nmodel = "a.npz"\n'
                 '[[garment]]\nname = "b"\nport = "/dev/null"\nmodel = "b.npz"\n'
                 '[control]\nlisten = "0.0.0.0:9100"\ntoken = "sixteen-chars-ok"\n[status]\nto = "127.0.0.1:9200"\n')
    cfg = load_service(p)
    assert [g.name for g in cfg.garments] == ["a", "b"]
    assert cfg.garments[0].simulated and cfg.garments[1].port == "/dev/null"
    assert cfg.token == "sixteen-chars-ok" and cfg.status_to == ("127.0.0.1:9200",)
    p.write_text('[[garment]]\nname = "a"\nsimulated = true\nmodel = "a.npz"\n' * 2)
    with pytest.raises(ConfigError, match="must differ"):
        load_service(p)
    p.write_text('[[garment]]\nname = "a/b"\nsimulated = true\nmodel = "a.npz"\n')
    with pytest.raises(ConfigError, match="letters"):
        load_service(p)
    p.write_text('[garment]\nport = "/dev/ttyACM0"\nmodel = "m.npz"\n')  # the old single form
    assert load_service(p).garments[0].name == "garment"


def test_control_port_checks_token_and_target():
    with pytest.raises(TokenMissing):
        ControlPort("0.0.0.0", 0)
    port = ControlPort("127.0.0.1", 0, token="s3cret-long-enough")
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            s.sendto(command_message("layer", "act2", "chorus", "s3cret-long-enough"), port.address)
            s.sendto(command_message("arm", "", "", "wrong"), port.address)
            s.sendto(command_message("panic", "", "", ""), port.address)
            s.sendto(command_message("disarm", "", "lead", "s3cret-long-enough"), port.address)
            time.sleep(0.1)
            got = [(c, d, g) for c, d, g, _ in port.poll()]
        assert got == [("layer", "act2", "chorus"), ("disarm", "", "lead")]
        assert port.ignored == 2
    finally:
        port.close()


def test_shift_detector_reports_a_lasting_step_but_not_a_gesture():
    rate = 100.0
    f = np.full((3000, 4), 1.0e6)
    f[500:600, 0] *= 1.01            # a one-second bump (a gesture): comes back
    f[1500:, 2:] *= 0.99             # a table arrives next to two channels and stays
    d = ShiftDetector(rate)
    found = [(i, d.step(f[i:i + 10])) for i in range(0, 3000, 10)]
    hits = [(i, ch) for i, ch in found if ch]
    assert len(hits) == 1 and hits[0][1] == (2, 3) and 1500 + d.sustain_s * rate <= hits[0][0] < 2000 + d.sustain_s * rate


def test_watch_renders_what_the_stream_said():
    v = StatusView()
    v.take("/drape/alive", [12.0, 1, 4242])
    v.take("/drape/g/lead/state", ["running", 1, "act1", 1, 100.0, 3, 500, ""])
    v.take("/drape/g/lead/channels", ["left_sleeve", "right_sleeve"])
    v.take("/drape/g/lead/levels", [0.01, -0.02])
    v.take("/drape/g/lead/top", ["null", 0.9, "bow", 0.1])
    v.take("/drape/g/lead/event", ["gesture", "bow", 0.8, 3.0, 1.0, 0.4, 0.6])
    text = render(v)
    assert "pid 4242" in text and "ARMED" in text and "layer act1" in text and "dropped 3" in text
    assert "left_sleeve" in text and "bow 0.10" in text and "0.60 ms" in text


def test_non_loopback_control_without_token_is_refused(tmp_path):
    p = tmp_path / "open.toml"
    p.write_text(f'[[garment]]\nname = "a"\nsimulated = true\nmodel = "a.npz"\n[control]\nlisten = "0.0.0.0:{free_port()}"\n')
    r = subprocess.run(drape_cmd("start", "--config", str(p)), capture_output=True, text=True, timeout=30, cwd=ROOT)
    assert r.returncode == 2 and "token" in r.stderr
    assert not (tmp_path / "a.npz").exists()  # refused before anything was trained or opened


class Receiver:
    """A python-osc server (the reference library) collecting every message it is sent."""

    def __init__(self):
        self.got = []
        self.lock = threading.Lock()
        d = Dispatcher()
        d.set_default_handler(lambda address, *args: self._add(address, args))
        self.server = ThreadingOSCUDPServer(("127.0.0.1", 0), d)
        self.port = self.server.server_address[1]
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    def _add(self, address, args):
        with self.lock:
            self.got.append((time.monotonic(), address, args))

    def since(self, t0, prefix=""):
        with self.lock:
            return [(a, args) for t, a, args in self.got if t >= t0 and a.startswith(prefix)]

    def wait(self, pred, timeout=8.0, t0=None):
        t0 = time.monotonic() if t0 is None else t0
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            for a, args in self.since(t0):
                if pred(a, args):
                    return a, args
            time.sleep(0.05)
        raise AssertionError("not seen within the time: " + repr(self.since(t0)[-5:]))

    def close(self):
        self.server.shutdown()
        self.server.server_close()


MAPPING_LEAD = """
[destinations.show]
osc = "127.0.0.1:{port}"
"""
# Every gesture a note: the SMF then shows each note-on's note-off (or not).
MAPPING_CHORUS = """
[destinations.synth]
midi_file = "{mid}"
[layers]
first = "act1"
""" + "".join(f"""
[[rule]]
gesture = "{g}"
layer = "{layer}"
to = "synth"
note = {n}
length_s = 5.0
""" for g, n in (("raise_right", 60), ("raise_left", 62), ("sweep_across", 64), ("tap_left_sleeve", 65),
                 ("push_forward", 67), ("bow", 69)) for layer in ("act1", "act2"))


def state_of(rx, name, t0, pred, timeout=30.0):  # generous: a loaded machine is slow, a pass is quick
    return rx.wait(lambda a, args: a == f"/drape/g/{name}/state" and pred(args), timeout, t0)[1]


def _lead_without_port(tmp_path, model_file) -> str:
    """A garment whose serial port is not there (yet): it waits for it."""
    return f"""
[[garment]]
name = "lead"
port = "{tmp_path / 'ttyNOPE'}"
model = "{model_file}"
"""


def test_a_garment_whose_port_is_not_there_is_waiting_and_says_why(tmp_path, demo_model_file):
    """Not "calibrating" (nobody should hold still for a device that is not plugged in), and
    the reason in the log and in the state every view shows."""
    rx = Receiver()
    (tmp_path / "show.toml").write_text(_lead_without_port(tmp_path, demo_model_file) + f"""
[control]
listen = "127.0.0.1:{free_port()}"

[status]
to = ["127.0.0.1:{rx.port}"]
""")
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        t0 = time.monotonic()
        state = state_of(rx, "lead", t0, lambda s: True)
        time.sleep(1.5)   # longer than the hold-still at start, had it begun
        later = state_of(rx, "lead", time.monotonic(), lambda s: True)
        # then the garment is plugged in (the simulated jacket on a pseudo-terminal): it calibrates, then runs
        jacket = subprocess.Popen(drape_cmd("simulate", "--serve", "--for", "20"), stdout=subprocess.PIPE,
                                  stderr=subprocess.DEVNULL, text=True, cwd=ROOT)
        try:
            os.symlink(jacket.stdout.readline().strip(), tmp_path / "ttyNOPE")
            t1 = time.monotonic()
            state_of(rx, "lead", t1, lambda s: s[0] == "running" and s[3] == 1)
        finally:
            jacket.kill()
            jacket.wait(timeout=10)
        proc.send_signal(signal.SIGINT)
        err = proc.communicate(timeout=20)[1]
    finally:
        proc.kill()
        rx.close()
    for s in (state, later):
        assert s[0] == "waiting" and s[3] == 0 and "waiting for the garment" in s[7] and "drape ports" in s[7], s
    assert "lead: waiting for the garment (cannot open" in err, err
    waiting, there = err.index("waiting for the garment"), err.index("the garment is there; hold still: calibrating")
    assert waiting < there and "calibrating" not in err[:there], err


# A garment that fails at start: its model file is not there (its port is not either).
GHOST = """
[[garment]]
name = "ghost"
port = "/dev/nonexistent-drape-port"
model = "missing.npz"
"""


def test_a_service_whose_every_garment_failed_says_why_and_exits(tmp_path):
    """Nothing runs, so nothing may look healthy: the reasons are logged, the process ends
    non-zero, and no "other garments carry on" is claimed where there are none."""
    ctl = free_port()
    (tmp_path / "show.toml").write_text(GHOST + f"""
[control]
listen = "127.0.0.1:{ctl}"
""")
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        _, err = proc.communicate(timeout=60)
    finally:
        proc.kill()
    assert proc.returncode == 1, err
    assert "no garment could start (ghost: " in err and "missing.npz" in err, err
    assert "carry on" not in err and "running 0 of" not in err, err
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:   # its control port was let go
        s.bind(("127.0.0.1", ctl))


def test_a_garment_waiting_for_its_port_keeps_the_service_running_when_the_others_failed(tmp_path, demo_model_file):
    (tmp_path / "show.toml").write_text(_lead_without_port(tmp_path, demo_model_file) + GHOST + f"""
[control]
listen = "127.0.0.1:{free_port()}"
""")
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    err = []
    threading.Thread(target=lambda: [err.append(line) for line in proc.stderr], daemon=True).start()
    try:
        deadline = time.monotonic() + 60
        while not any("running 1 of 2 garment(s) (ghost failed" in line for line in err) and proc.poll() is None \
                and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(0.5)
        assert proc.poll() is None, "".join(err)
        text = "".join(err)
        assert "running 1 of 2 garment(s) (ghost failed" in text and "lead: waiting for the garment" in text, text
        assert "ghost: model" in text or "missing.npz" in text, text
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(20)
    assert proc.returncode == 0


def test_two_garments_in_one_daemon(tmp_path, demo_model_file, second_model_file):
    rx = Receiver()
    ctl = free_port()
    mid = tmp_path / "chorus.mid"
    (tmp_path / "lead.toml").write_text(MAPPING_LEAD.format(port=rx.port) + """
[[rule]]
gesture = "raise_right"
to = "show"
address = "/lead/go"
""")
    (tmp_path / "chorus.toml").write_text(MAPPING_CHORUS.format(mid=mid))
    (tmp_path / "show.toml").write_text(f"""
[[garment]]
name = "lead"
simulated = true
seed = 1
model = "{demo_model_file}"
mapping = "lead.toml"

[[garment]]
name = "chorus"
simulated = true
seed = 4
wearer = 1
model = "{second_model_file}"
mapping = "chorus.toml"

[[garment]]
name = "ghost"
port = "/dev/nonexistent-drape-port"
model = "missing.npz"

[control]
listen = "127.0.0.1:{ctl}"

[status]
to = ["127.0.0.1:{rx.port}"]
levels_hz = 20

[calibration]
hold_still_s = 0.5
""")
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml"), "--log-level", "info"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    send = lambda *a: subprocess.run(drape_cmd("send", *a, "--port", str(ctl)), capture_output=True, text=True,
                                     timeout=20, cwd=ROOT)
    try:
        t0 = time.monotonic()
        # both garments run; the one whose model is missing failed alone
        state_of(rx, "lead", t0, lambda s: s[0] == "running" and s[3] == 1, timeout=30)
        state_of(rx, "chorus", t0, lambda s: s[0] == "running" and s[2] == "act1", timeout=10)
        state_of(rx, "ghost", t0, lambda s: s[0] == "failed")
        levels = rx.wait(lambda a, args: a == "/drape/g/chorus/levels", t0=t0)[1]
        assert len(levels) == 4
        top = rx.wait(lambda a, args: a == "/drape/g/lead/top", t0=t0)[1]
        assert len(top) == 6 and abs(sum(top[1::2])) <= 1.0 + 1e-6
        # disarm one garment only: the other stays armed
        t1 = time.monotonic()
        assert send("disarm", "--garment", "lead").returncode == 0
        state_of(rx, "lead", t1, lambda s: s[1] == 0)
        state_of(rx, "chorus", t1, lambda s: s[1] == 1)
        t1 = time.monotonic()
        send("arm")
        state_of(rx, "lead", t1, lambda s: s[1] == 1)
        # switch layer on the chorus; the event carries latency figures
        t1 = time.monotonic()
        send("layer", "act2", "--garment", "chorus")
        state_of(rx, "chorus", t1, lambda s: s[2] == "act2")
        ev = rx.wait(lambda a, args: a == "/drape/g/chorus/event" and args[0] == "layer", t0=t1)[1]
        assert ev[1] == "act2" and 0 <= ev[5] <= ev[6]
        # panic reaches both garments
        t1 = time.monotonic()
        send("panic")
        rx.wait(lambda a, args: a == "/drape/g/lead/event" and args[0] == "panic", t0=t1)
        rx.wait(lambda a, args: a == "/drape/g/chorus/event" and args[0] == "panic", t0=t1)
        send("arm")
        # rebaseline: a hold-still capture, then running again
        t1 = time.monotonic()
        send("rebaseline", "--garment", "chorus")
        state_of(rx, "chorus", t1, lambda s: s[0] == "calibrating")
        state_of(rx, "chorus", t1, lambda s: s[0] == "running")
        # status query answered to the sender
        r = send("status")
        # lead may be re-settling after a shift its simulated wearer caused; it must be live
        assert r.returncode == 0 and re.search(r"\[lead\] (running|settling)", r.stdout) and "[ghost] failed" in r.stdout
        ghost_note = next(line for line in r.stdout.splitlines() if "note:" in line and "missing.npz" in line)
        assert ghost_note.rstrip().endswith(")"), ghost_note        # a command's answer is never cut short
        one = send("status", "--garment", "chorus")
        assert one.returncode == 0 and "[chorus]" in one.stdout and "[lead]" not in one.stdout, one.stdout
        nobody = send("status", "--garment", "nobody")
        assert nobody.returncode == 1 and "no garment 'nobody'" in nobody.stderr + nobody.stdout, nobody
        # SIGHUP reloads mappings
        t1 = time.monotonic()
        proc.send_signal(signal.SIGHUP)
        rx.wait(lambda a, args: a == "/drape/g/chorus/notice" and "reloaded" in args[0], t0=t1)
        # let the chorus wearer perform until a gesture is decided (a note): a fixed wait
        # could pass with none on a slow machine, and the check below would prove nothing
        rx.wait(lambda a, args: a == "/drape/g/chorus/event" and args[0] == "gesture", timeout=90, t0=t1)
        time.sleep(0.5)
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=20)
        rx.close()
    assert proc.returncode == 0, err
    assert "token" not in err.lower() or "needs" not in err.lower()
    assert "ghost" in err and "carry on" in err and "running 2 of 3 garment(s) (ghost failed" in err
    # every note-on has its note-off, in the file the chorus garment's output wrote on close
    msgs = [m for m in mido.MidiFile(mid).tracks[0] if m.type in ("note_on", "note_off")]
    on = [m for m in msgs if m.type == "note_on" and m.velocity > 0]
    off = [m for m in msgs if m.type == "note_off" or m.velocity == 0]
    assert len(on) >= 1, err[-2000:]
    for note in {m.note for m in on}:
        assert sum(m.note == note for m in on) <= sum(m.note == note for m in off)


# drape started with one piece of it made to fail, as a fault of drape's own would.
_FAULTY = """
import sys
import bridge.service as service
import bridge.service.daemon as daemon
from bridge.cli import main

def boom(*_a, **_k):
    raise RuntimeError("boom")

service.run = boom                     # the single loop's run
daemon.Service.housekeeping = boom     # the service loop's first round of housekeeping
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("form", ["single loop", "service"])
def test_a_fault_inside_drape_is_named_on_the_stop_line(tmp_path, demo_model_file, form):
    """Not a bare "stopped;" before a traceback: the operator reads that drape itself failed."""
    if form == "single loop":
        text = f'[garment]\nname = "lead"\nsimulated = true\nmodel = "{demo_model_file}"\n'
    else:
        text = (f'[[garment]]\nname = "lead"\nsimulated = true\nmodel = "{demo_model_file}"\n'
                f'[control]\nlisten = "127.0.0.1:{free_port()}"\n')
    (tmp_path / "show.toml").write_text(text)
    proc = subprocess.run([sys.executable, "-c", _FAULTY, "start", "--config", str(tmp_path / "show.toml")],
                          capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert proc.returncode != 0, proc.stderr
    assert "stopped (a fault inside drape: RuntimeError: boom)" in proc.stderr, proc.stderr
    assert "Traceback" in proc.stderr and proc.stderr.index("stopped (") < proc.stderr.index("Traceback")
