"""The live surface a technician meets: signals, a closed stdout, acknowledgements, the
watch view, reloads, network input and counters. Peers are independent where it matters:
sACN packets are read at the byte offsets of ANSI E1.31-2018 (Table 4-1: options at octet
112, universe at 113-114), MIDI files are read back with mido."""

import os
import signal
import socket
import subprocess
import threading
import time

import numpy as np
import pytest

from conftest import ROOT, drape_cmd
from test_keys import xvfb  # noqa: F401  (Xvfb as the independent key peer)

E131_OPTIONS, E131_UNIVERSE = 112, 113   # ANSI E1.31-2018 Table 4-1 (framing layer)
STREAM_TERMINATED = 0x40                  # ANSI E1.31-2018 6.2.6: options bit 6


def wait_for(condition, timeout_s=20.0, what="condition", said=None):
    """Poll ``condition`` until true; fail after ``timeout_s``. ``said()``: what the program under
    test printed so far, carried in the failure message."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if condition():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}" + (f"\n--- its output so far ---\n{said()}" if said else ""))


class SacnPeer:
    """A UDP socket on loopback collecting sACN packets: (options, universe, slots)."""

    def __init__(self):
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.settimeout(0.1)
        self.port = self.sock.getsockname()[1]
        self.packets = []
        self.done = threading.Event()
        threading.Thread(target=self._run, daemon=True).start()

    def _run(self):
        while not self.done.is_set():
            try:
                data = self.sock.recv(1024)
            except (socket.timeout, OSError):
                continue
            self.packets.append((data[E131_OPTIONS], int.from_bytes(data[E131_UNIVERSE:E131_UNIVERSE + 2], "big"),
                                 data[126:]))

    def terminated(self):
        return [p for p in self.packets if p[0] & STREAM_TERMINATED]

    def close(self):
        self.done.set()
        self.sock.close()


def demo_mapping(tmp_path, sacn_port, mid):
    text = (ROOT / "mappings" / "demo.toml").read_text().replace("127.0.0.1:9000", "127.0.0.1:9")
    text += (f'\n[destinations.rig]\nsacn = 7\nhost = "127.0.0.1"\nport = {sacn_port}\nsafe = {{ 1 = 200 }}\n'
             f'\n[destinations.synth]\nmidi_file = "{mid}"\n'
             '\n[[rule]]\ngesture = "raise_right"\nto = "synth"\nnote = 64\nlength_s = 30\n')
    path = tmp_path / "demo.toml"
    path.write_text(text)
    return path


def _demo(tmp_path, model, mapping, *extra):
    proc = subprocess.Popen(drape_cmd("demo", "--mapping", str(mapping), "--for", "120", "--model", str(model), *extra),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    out, err = [], []
    threading.Thread(target=lambda: [out.append(l) for l in proc.stdout], daemon=True).start()
    threading.Thread(target=lambda: [err.append(l) for l in proc.stderr], daemon=True).start()
    wait_for(lambda: any("performing" in l for l in out), 60, "the demo to start")
    return proc, out, err


def test_sighup_to_the_demo_reloads_and_every_ending_signal_lets_go(tmp_path, demo_model_file):
    from test_faults import _unmatched_note_ons
    peer = SacnPeer()
    mid = tmp_path / "show.mid"
    mapping = demo_mapping(tmp_path, peer.port, mid)
    pid_file = tmp_path / "drape.pid"
    proc, out, err = _demo(tmp_path, demo_model_file, mapping, "--pid-file", str(pid_file))
    try:
        assert int(pid_file.read_text()) == proc.pid  # `kill -USR1 "$(cat FILE)"` hits this process only
        time.sleep(1.0)
        proc.send_signal(signal.SIGHUP)  # a closed terminal: must not end the show unclean
        wait_for(lambda: any("mapping reloaded" in l for l in err), 10, "SIGHUP to reload the mapping")
        time.sleep(0.3)
        assert proc.poll() is None
        proc.send_signal(signal.SIGQUIT)
        assert proc.wait(30) == 0
    finally:
        proc.kill()
        peer.close()
    text = "".join(err)
    assert "Traceback" not in text
    assert "output rig: sent" in text and "output synth: sent" in text
    ended = peer.terminated()
    assert len(ended) == 3 and all(u == 7 for _, u, _ in ended)   # E1.31 6.2.6: three terminated packets
    assert ended[0][2][0] == 200                                  # the safe look in slot 1
    assert _unmatched_note_ons(mid) == set()
    assert not pid_file.exists()  # removed at exit


@pytest.mark.parametrize("safety, said", [
    ("", "armed at start"),
    ('[safety]\narm_posture = "hand_on_heart"\n', "disarmed at start: nothing is sent until armed (hold hand_on_heart 2 s"),
])
def test_the_single_loop_says_at_start_whether_it_is_armed(safety, said, tmp_path, demo_model_file):
    """A carer starting a switch mapping must learn whether the first recognised posture sends
    a cue (armed) or nothing (disarmed), before the wearer moves."""
    (tmp_path / "m.toml").write_text(f'{safety}[destinations.show]\nosc = "127.0.0.1:9"\n'
                                     '[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/x"\n')
    master, slave = os.openpty()
    (tmp_path / "show.toml").write_text(f'[garment]\nname = "jacket"\nport = "{os.ttyname(slave)}"\n'
                                        f'model = "{demo_model_file}"\nmapping = "m.toml"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = proc.stderr.readline()
        assert "on " + os.ttyname(slave) in line and said in line, line
        if not safety:
            assert "disarmed" not in line
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(30) == 0
    finally:
        proc.kill()
        os.close(master)
        os.close(slave)


def _start_lines(tmp_path, model_file, mapping, env, extra=()) -> list[str]:
    """What `drape start` says on stderr from its start to its stop line (SIGTERM once started)."""
    master, slave = os.openpty()
    (tmp_path / "show.toml").write_text(f'[garment]\nname = "jacket"\nport = "{os.ttyname(slave)}"\n'
                                        f'model = "{model_file}"\nmapping = "{mapping}"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml"), *extra),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        lines = []
        while not any("on " + os.ttyname(slave) in l for l in lines) and proc.poll() is None:
            lines.append(proc.stderr.readline())
        proc.send_signal(signal.SIGTERM)
        lines += proc.stderr.read().splitlines()      # the rest, up to its stop line
        assert proc.wait(30) == 0, lines
        return lines
    finally:
        proc.kill()
        os.close(master)
        os.close(slave)


@pytest.mark.parametrize("listen", [False, True])
def test_a_keys_mapping_without_an_arming_posture_or_control_port_is_cautioned_at_start(listen, xvfb, tmp_path,
                                                                                        demo_model_file):
    """The shipped single-switch mapping can only be disarmed over the control port: started
    without one, the carer is told so at once (keys on a private Xvfb)."""
    from bridge.examples_data import example_path
    extra = ["--listen", f"127.0.0.1:{free_port()}"] if listen else []
    lines = _start_lines(tmp_path, demo_model_file, example_path("single-switch.toml"), dict(os.environ), extra)
    cautioned = any("no arming posture and no control port" in l and "--listen" in l for l in lines)
    assert cautioned != listen, lines
    assert any("armed at start: keys (" in l and "focus" in l for l in lines), lines


@pytest.mark.parametrize("listen", [False, True])
def test_a_mapping_nothing_can_arm_is_cautioned_at_start(listen, tmp_path, demo_model_file):
    """Disarmed at start, no arming posture, no control port: no cue can ever go out."""
    (tmp_path / "m.toml").write_text('[safety]\nstart = "disarmed"\n[destinations.show]\nosc = "127.0.0.1:9"\n'
                                     '[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/x"\n')
    extra = ["--listen", f"127.0.0.1:{free_port()}"] if listen else []
    lines = _start_lines(tmp_path, demo_model_file, tmp_path / "m.toml", dict(os.environ), extra)
    assert any("disarmed at start" in l for l in lines), lines
    assert any("nothing can arm it" in l and "--listen" in l for l in lines) != listen, lines


def test_a_keys_destination_left_out_is_not_claimed_at_start(tmp_path, demo_model_file):
    """With no display the keys destination is left out: the start line must not say keys go
    to the focused window, nor caution about keys that cannot be pressed."""
    from bridge.examples_data import example_path
    env = {k: v for k, v in os.environ.items() if k != "DISPLAY"}
    lines = _start_lines(tmp_path, demo_model_file, example_path("single-switch.toml"), env)
    assert any("left out" in l for l in lines), lines
    assert not any("keys (" in l and "focus" in l for l in lines), lines
    assert not any("no arming posture and no control port" in l for l in lines), lines


@pytest.mark.parametrize("how", ["SIGHUP then SIGTERM", "SIGQUIT"])
def test_a_hangup_or_quit_to_the_single_loop_never_leaves_a_key_or_note_held(how, xvfb, tmp_path, demo_model_file):
    import mido
    from bridge.garment import Jacket
    from bridge.sources.textline import format_line
    from test_faults import HOLD_MAPPING, _unmatched_note_ons
    from test_keys import _keys_down
    take = Jacket(seed=1, wearer=0, session=5).perform([("standing", 4.0), ("arms_crossed", 120.0)])
    lines = [format_line(v) for v in take.freq_hz]
    mid = tmp_path / "show.mid"
    (tmp_path / "hold.toml").write_text(HOLD_MAPPING.format(mid=mid))
    master, slave = os.openpty()
    (tmp_path / "show.toml").write_text(f'[garment]\nname = "jacket"\nport = "{os.ttyname(slave)}"\n'
                                        f'model = "{demo_model_file}"\nmapping = "hold.toml"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    out, err, done = [], [], threading.Event()
    threading.Thread(target=lambda: [out.append(l) for l in proc.stdout], daemon=True).start()

    def garment():
        os.write(master, b"".join(lines[:800]))
        i = 800
        while not done.is_set() and i < len(lines):
            os.write(master, b"".join(lines[i:i + 5]))
            i += 5
            time.sleep(0.04)

    try:
        assert "on " + os.ttyname(slave) in proc.stderr.readline()
        threading.Thread(target=lambda: [err.append(l) for l in proc.stderr], daemon=True).start()
        threading.Thread(target=garment, daemon=True).start()
        wait_for(lambda: any("arms_crossed" in l and "entered" in l for l in out), 60, "the posture to be entered")
        wait_for(lambda: len(_keys_down(xvfb)) == 1, 20, "shift to be held down")
        if how.startswith("SIGHUP"):
            proc.send_signal(signal.SIGHUP)
            wait_for(lambda: any("mapping reloaded" in l for l in err), 10, "SIGHUP to reload the mapping")
            assert proc.poll() is None and len(_keys_down(xvfb)) == 1  # same destination: kept, still held
            proc.send_signal(signal.SIGTERM)
        else:
            proc.send_signal(signal.SIGQUIT)
        assert proc.wait(30) == 0
    finally:
        done.set()
        proc.kill()
        os.close(master)
        os.close(slave)
    time.sleep(0.2)
    assert _keys_down(xvfb) == []
    assert "Traceback" not in "".join(err)
    msgs = [m for m in mido.MidiFile(mid).tracks[0] if not m.is_meta]
    assert any(m.type == "note_on" and m.velocity > 0 and m.note == 60 for m in msgs)
    assert _unmatched_note_ons(mid) == set()


def test_a_closed_stdout_does_not_stop_the_show(tmp_path, demo_model_file):
    peer = SacnPeer()
    mid = tmp_path / "show.mid"
    mapping = demo_mapping(tmp_path, peer.port, mid)
    r, w = os.pipe()
    proc = subprocess.Popen(drape_cmd("demo", "--mapping", str(mapping), "--for", "120", "--model", str(demo_model_file)),
                            stdout=w, stderr=subprocess.PIPE, text=True)
    os.close(w)
    err = []
    threading.Thread(target=lambda: [err.append(l) for l in proc.stderr], daemon=True).start()
    try:
        reader = os.fdopen(r, "r")
        got = []
        while not any("performing" in l for l in got):
            got.append(reader.readline())
        reader.close()  # the `| head` is gone
        wait_for(lambda: any("standard output closed" in l for l in err), 60, "the closed stdout to be noticed")
        time.sleep(1.0)
        assert proc.poll() is None  # still running the show
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(30) == 0
    finally:
        proc.kill()
        peer.close()
    text = "".join(err)
    assert "Traceback" not in text and "Exception ignored" not in text
    assert sum("standard output closed" in l for l in err) == 1
    assert len(peer.terminated()) == 3


# ---- commands are acknowledged ---------------------------------------------------------------

def wait_until_bound(port: int, timeout_s: float) -> None:
    """Wait until some process has bound UDP ``port`` on loopback (our bind then fails),
    and a second more for the daemon's loop to reach its first read."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            try:
                s.bind(("127.0.0.1", port))
            except OSError:
                time.sleep(1.0)
                return
        time.sleep(0.1)
    raise AssertionError(f"nothing bound UDP port {port} within {timeout_s} s")


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_send_with_nobody_listening_fails(capsys):
    from bridge.cli import main
    assert main(["send", "panic", "--port", str(free_port()), "--wait-s", "0.5"]) != 0
    err = capsys.readouterr().err
    assert "sent panic" not in err and ("nothing is listening" in err or "no answer" in err)


def test_a_control_port_already_taken_says_who_may_hold_it():
    from bridge.service.control import ControlInbox, ControlPort
    holder = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    holder.bind(("127.0.0.1", 0))
    port = holder.getsockname()[1]
    try:
        for make in (ControlInbox, lambda h, p: ControlPort(h, p, "")):
            with pytest.raises(OSError, match="already taken .another drape"):
                make("127.0.0.1", port)
    finally:
        holder.close()


def test_send_with_a_garment_name_in_place_of_a_layer_sends_nothing(capsys):
    """`drape send arm chorus` must not arm every garment: the name goes with --garment."""
    from bridge.cli import main
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    sock.settimeout(0.3)
    try:
        assert main(["send", "arm", "chorus", "--port", str(sock.getsockname()[1])]) == 2
        assert "drape send arm --garment chorus" in capsys.readouterr().err
        with pytest.raises(socket.timeout):
            sock.recv(2048)                 # nothing reached the port
    finally:
        sock.close()


class IdleSource:
    """A garment that sends nothing: the loop keeps polling its inbox."""
    ended = False
    connected = True
    rate_hz = 100.0

    def __init__(self, n):
        self.n = n

    def read(self):
        from bridge.sources.base import empty_block
        time.sleep(0.01)
        return empty_block(self.n, time.monotonic())


LAYERED = """
[destinations.show]
osc = "127.0.0.1:9"
[layers]
first = "act1"
[[rule]]
gesture = "bow"
layer = "act1"
to = "show"
address = "/x"
[[rule]]
gesture = "bow"
layer = "act2"
to = "show"
address = "/y"
"""


def test_the_single_loop_acknowledges_every_command_and_refuses_what_it_cannot_do(demo_model, capsys):
    from bridge.cli import main
    from bridge.mapping import parse_mapping
    from bridge.service import Pipeline, StopFlag, run
    from bridge.service.control import ControlInbox
    m = parse_mapping(LAYERED, "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    inbox = ControlInbox("127.0.0.1", 0)
    stop, said = StopFlag(), []
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, m, "jacket"), {},
                                              stop), kwargs=dict(inbox=inbox, report=said.append, stall_s=0.2),
                            daemon=True)
    loop.start()
    port = str(inbox.address[1])
    try:
        def send(*a):
            code = main(["send", *a, "--port", port])
            return code, capsys.readouterr()
        code, r = send("layer", "act2")
        assert code == 0 and "layer 'act2'" in r.out
        code, r = send("layer", "act9")
        assert code != 0 and "refused" in r.err and "no layer 'act9'" in r.err and "act1, act2" in r.err
        code, r = send("panic", "--garment", "nobody")
        assert code != 0 and "no garment 'nobody'" in r.err
        code, r = send("panic")
        assert code == 0 and "panic" in r.out
        code, r = send("rebaseline")
        assert code != 0 and "refused" in r.err and "does not calibrate here" in r.err
        code, r = send("status")   # the idle garment has sent nothing for longer than stall_s
        assert code == 0 and "jacket: no data" in r.out, r.out
        code, r = send("layer", "a\nFAKE drape: armed")   # a forged log line stays on its line
        assert code != 0
        assert not any(line.startswith("FAKE") for s in said for line in s.splitlines())
        assert any("\\n" in s for s in said)
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


def test_the_single_loop_names_its_garment_and_says_each_state_once(tmp_path, demo_model, capsys):
    from bridge.cli import main
    from bridge.mapping import MappingWatcher
    from bridge.service import Pipeline, StopFlag, run
    from bridge.service.control import ControlInbox
    (tmp_path / "m.toml").write_text(LAYERED)
    watcher = MappingWatcher(tmp_path / "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    inbox = ControlInbox("127.0.0.1", 0)
    stop = StopFlag()
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, watcher.mapping,
                                                                                          "solo"), {}, stop),
                            kwargs=dict(inbox=inbox, watcher=watcher, report=lambda t: None), daemon=True)
    loop.start()
    try:
        def send(*a):
            code = main(["send", *a, "--port", str(inbox.address[1]), "--wait-s", "5"])
            return code, capsys.readouterr().out
        for cmd, said in (("arm", "solo: armed"), ("disarm", "solo: disarmed: keys and notes let go"),
                          ("reload", "solo: mapping reloaded (2 rules)")):
            code, out = send(cmd)
            assert code == 0 and out.strip().endswith(said) and out.count("armed") == said.count("armed"), (cmd, out)
        code, out = send("panic")
        assert code == 0 and "solo: panic" in out and "now disarmed" in out, out
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


def test_the_single_loop_rebaselines_when_it_calibrates(demo_model, capsys):
    from bridge.cli import main
    from bridge.service import Pipeline, Settling, StopFlag, run
    from bridge.service.control import ControlInbox
    inbox = ControlInbox("127.0.0.1", 0)
    stop = StopFlag()
    pipe = Pipeline(demo_model, None, "jacket", settle=Settling(0.5))
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), pipe, {}, stop),
                            kwargs=dict(inbox=inbox, report=lambda t: None), daemon=True)
    loop.start()
    try:
        assert main(["send", "rebaseline", "--port", str(inbox.address[1])]) == 0
        assert "jacket: hold still, re-baselining (0.5 s)" in capsys.readouterr().out
        assert [h.why for h in pipe.holds][-1] == "hold still: re-baselining"
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


class StillWearer:
    """A garment whose wearer stands still, at its own pace (one sample per 10 ms, as the
    simulated jacket's 100 Hz): the loop gets samples between its polls of the inbox."""
    ended = False
    connected = True

    def __init__(self):
        from bridge.garment import Jacket
        take = Jacket(seed=1, wearer=0, session=3).perform([("standing", 20.0)])
        self.freq, self.rate_hz, self.i = take.freq_hz, take.rate_hz, 0

    def read(self):
        from bridge.sources.base import Block
        time.sleep(0.01)
        k = self.i % self.freq.shape[0]
        self.i += 1
        return Block(np.array([self.i / self.rate_hz]), self.freq[k:k + 1], time.monotonic())


def test_a_rebaseline_in_the_single_loop_is_told_once(demo_model, capsys):
    """The command's answer says "hold still" with the garment's name and the hold's length;
    the capture it began is not told a second time when its samples come in."""
    from bridge.cli import main
    from bridge.service import Pipeline, Settling, StopFlag, run
    from bridge.service.control import ControlInbox
    inbox = ControlInbox("127.0.0.1", 0)
    stop, said = StopFlag(), []
    pipe = Pipeline(demo_model, None, "jacket", settle=Settling(0.3))
    loop = threading.Thread(target=run, args=(StillWearer(), pipe, {}, stop),
                            kwargs=dict(inbox=inbox, report=said.append), daemon=True)
    loop.start()
    try:
        wait_for(lambda: len(pipe.holds) == 1 and pipe.holds[0].end_sample is not None, 20, "the capture at start")
        assert main(["send", "rebaseline", "--port", str(inbox.address[1]), "--wait-s", "5"]) == 0
        assert "jacket: hold still, re-baselining (0.3 s)" in capsys.readouterr().out
        wait_for(lambda: len(pipe.holds) == 2 and pipe.holds[1].end_sample is not None, 20, "the rebaseline's capture")
        time.sleep(0.1)   # past the block whose samples ended it: anything still to be told is told
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()
    told = [line for line in said if "hold still" in line]
    assert told == ["hold still: calibrating (0.3 s)", "jacket: hold still, re-baselining (0.3 s)"], said


TOKEN = "a-show-token-of-some-length"


def _service(tmp_path, model, ctl, extra="", status_port=None, mapping=LAYERED, name="lead"):
    (tmp_path / "m.toml").write_text(mapping)
    (tmp_path / "show.toml").write_text(
        f'[[garment]]\nname = "{name}"\nsimulated = true\nmodel = "{model}"\nmapping = "m.toml"\n'
        f'[control]\nlisten = "127.0.0.1:{ctl}"\n{extra}\n[calibration]\nhold_still_s = 0.2\n'
        + (f'[status]\nto = ["127.0.0.1:{status_port}"]\n' if status_port else ""))
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    err = []
    threading.Thread(target=lambda: [err.append(l) for l in proc.stderr], daemon=True).start()
    wait_for(lambda: any("running 1 of 1 garment" in l for l in err) or proc.poll() is not None, 60, "the service to start")
    return proc, err


def test_the_service_says_what_each_output_let_go_of_when_it_stops(tmp_path, demo_model_file):
    """As the single loop does: the lights' safe look and the stream's end are told, and
    the stop line names the signal."""
    peer = SacnPeer()
    mapping = (f'[destinations.rig]\nsacn = 9\nhost = "127.0.0.1"\nport = {peer.port}\n'
               '[[rule]]\ngesture = "bow"\nto = "rig"\nlevels = { 1 = 255 }\n')
    try:
        proc, err = _service(tmp_path, demo_model_file, free_port(), mapping=mapping)
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(30) == 0
        time.sleep(0.2)
    finally:
        peer.close()
    text = "".join(err)
    assert "lead: output rig: sent" in text and "on stop: universe 9 set to the safe look, then the stream terminated" in text, text
    assert "stopped (SIGTERM)" in text


def test_the_service_acknowledges_and_refuses_with_reasons(tmp_path, demo_model_file):
    ctl = free_port()
    (tmp_path / "token").write_text(TOKEN + "\n")
    proc, err = _service(tmp_path, demo_model_file, ctl, 'token_file = "token"')

    def send(*a, env=None):
        r = subprocess.run(drape_cmd("send", *a, "--port", str(ctl)), capture_output=True, text=True, timeout=20,
                           env=dict(os.environ, **(env or {})))
        return r.returncode, r.stdout + r.stderr
    try:
        code, text = send("panic")                                        # no token
        assert code != 0 and "refused" in text and "token" in text
        code, text = send("panic", env={"DRAPE_TOKEN": "not-the-token-at-all"})
        assert code != 0 and "refused" in text and "token" in text
        code, text = send("layer", "act9", env={"DRAPE_TOKEN": TOKEN})
        assert code != 0 and "no layer 'act9'" in text
        code, text = send("arm", "--garment", "nobody", env={"DRAPE_TOKEN": TOKEN})
        assert code != 0 and "no such running garment 'nobody'" in text and "lead" in text
        code, text = send("panic", "--token-file", str(tmp_path / "token"))
        assert code == 0 and "lead: panic" in text
        code, text = send("layer", "act2", env={"DRAPE_TOKEN": TOKEN})
        assert code == 0 and "lead: layer 'act2'" in text
        (tmp_path / "m.toml").write_text(LAYERED.replace('gesture = "bow"', 'gesture = "bwo"', 1))
        code, text = send("reload", env={"DRAPE_TOKEN": TOKEN})   # the answer says what to fix, not "see the log"
        assert code != 0 and "mapping not reloaded" in text and "'bwo'" in text and "m.toml" in text, text
        proc.send_signal(signal.SIGHUP)
        wait_for(lambda: any("SIGHUP: reload refused" in l for l in err), 10, "a refused SIGHUP reload named as such")
        assert sum("control: reload refused" in l for l in err) == 1   # the one sent over the port
        wait_for(lambda: any("control messages ignored: 1 wrong or missing token" in l or
                             "control messages ignored: 2 wrong or missing token" in l for l in err), 5,
                 "ignored messages counted by reason")
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(30)


RULE = '[destinations.show]\nosc = "127.0.0.1:9"\n[[rule]]\ngesture = "{g}"\nto = "show"\naddress = "/x"\n'


def _three_garment_service(tmp_path, model, model_file):
    """A service running three garments in this process (no readers: commands only), each
    with its own mapping file, and its control port on loopback."""
    from types import SimpleNamespace
    from bridge.mapping import MappingWatcher
    from bridge.service import Pipeline
    from bridge.service.control import ControlPort
    from bridge.service.daemon import Garment, Service, file_signature
    service = Service(SimpleNamespace(garments=[], status_to=()),
                      open_fn=lambda d: SimpleNamespace(send=lambda m: None, close=lambda: None))
    for name in ("lead", "chorus", "ghost"):
        (tmp_path / f"{name}.toml").write_text(RULE.format(g="bow"))
        watcher = MappingWatcher(tmp_path / f"{name}.toml", model.classes, model.kinds, model.channel_names)
        g = Garment(name, SimpleNamespace(model=model_file, input="serial"), len(service.garments), model=model,
                    pipeline=Pipeline(model, watcher.mapping, name), watcher=watcher, model_sig=file_signature(model_file))
        service.reconcile(g, None, watcher.mapping)
        service.garments.append(g)
    service.control = ControlPort("127.0.0.1", 0)
    return service


def _send_to(service, *argv):
    """`drape send ...` against the in-process service: (exit code, stdout, stderr)."""
    import contextlib
    import io
    from bridge.cli import main
    out, err, code = io.StringIO(), io.StringIO(), []
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        t = threading.Thread(target=lambda: code.append(main(["send", *argv, "--port", str(service.control.address[1]),
                                                               "--wait-s", "10"])))
        t.start()
        while t.is_alive():   # the daemon's loop, as far as commands go
            for cmd, detail, target, peer in service.control.poll():
                service.command(cmd, detail, target, peer)
            time.sleep(0.005)
    return code[0], out.getvalue(), err.getvalue()


def test_a_reload_that_works_on_some_garments_says_which_and_exits_apart(tmp_path, demo_model, demo_model_file):
    """Reloading every garment when one mapping is broken: the answer says which garments
    reloaded and which did not (with the file:line to fix), and `drape send` exits 3: not
    0 (a full success), not 1 (nothing took effect)."""
    service = _three_garment_service(tmp_path, demo_model, demo_model_file)
    try:
        for name in ("lead", "chorus"):
            (tmp_path / f"{name}.toml").write_text(RULE.format(g="bow") + '[[rule]]\ngesture = "raise_right"\n'
                                                  'to = "show"\naddress = "/y"\n')
        (tmp_path / "ghost.toml").write_text(RULE.format(g="bwo"))   # a typo on line 4
        code, out, err = _send_to(service, "reload")
        assert code == 3, (code, out, err)
        assert "partly done: reload took effect on lead, chorus, NOT on ghost" in err, err
        assert "ghost.toml:4:" in err and "'bwo'" in err and "lead: mapping reloaded (2 rules)" in err, err
        assert [len(service.garments[i].pipeline.mapping.rules) for i in range(3)] == [2, 2, 1]  # ghost kept its last good one
        code, out, err = _send_to(service, "reload", "--garment", "ghost")   # nothing took effect: refused, 1
        assert code == 1 and "refused: ghost: mapping not reloaded" in err and "partly" not in err, (code, err)
        (tmp_path / "ghost.toml").write_text(RULE.format(g="bow"))
        code, out, err = _send_to(service, "reload")                          # every garment: done, 0
        assert code == 0 and err == "" and "ghost: mapping reloaded (1 rules)" in out, (code, out, err)
    finally:
        service.control.close()
        service.status.close()


SYNTH = '[destinations.synth]\nmidi = "no such port"\n[[rule]]\ngesture = "raise_right"\nto = "synth"\nnote = 60\n'


def _no_synth(d):
    """Opens every destination but 'synth', as a machine without that MIDI port would."""
    from types import SimpleNamespace
    from bridge.outputs import OutputUnavailable
    from bridge.outputs.base import OutputStats
    if d.name == "synth":
        raise OutputUnavailable("MIDI output 'synth': no port named 'no such port'")
    return SimpleNamespace(send=lambda m: None, close=lambda: None, stats=OutputStats())


def test_a_reload_whose_new_destination_cannot_open_is_not_answered_done(tmp_path, demo_model, demo_model_file):
    """A reload applied with a destination that could not be opened sends that destination's
    cues nowhere: the answer names it and why, and `drape send` exits 3 (partly), not 0."""
    service = _three_garment_service(tmp_path, demo_model, demo_model_file)
    service.open_fn = _no_synth
    try:
        (tmp_path / "lead.toml").write_text(RULE.format(g="bow") + SYNTH)
        code, out, err = _send_to(service, "reload", "--garment", "lead")
        assert code == 3, (code, out, err)
        assert ("lead: mapping reloaded (2 rules); but destination 'synth' could not be opened, its cues go "
                "nowhere: MIDI output 'synth': no port named 'no such port'") in err, err
        (tmp_path / "lead.toml").write_text(RULE.format(g="bow"))
        code, out, err = _send_to(service, "reload", "--garment", "lead")
        assert code == 0 and "lead: mapping reloaded (1 rules)" in out, (code, out, err)
    finally:
        service.control.close()
        service.status.close()


def test_the_single_loop_says_a_reloaded_destination_could_not_open(tmp_path, demo_model, capsys):
    from bridge.cli import main
    from bridge.mapping import MappingWatcher
    from bridge.service import Pipeline, StopFlag, run
    from bridge.service.control import ControlInbox
    (tmp_path / "m.toml").write_text(RULE.format(g="bow"))
    watcher = MappingWatcher(tmp_path / "m.toml", demo_model.classes, demo_model.kinds, demo_model.channel_names)
    inbox = ControlInbox("127.0.0.1", 0)
    stop, said = StopFlag(), []
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, watcher.mapping,
                                                                                          "solo"), {}, stop),
                            kwargs=dict(inbox=inbox, watcher=watcher, open_fn=_no_synth, report=said.append),
                            daemon=True)
    loop.start()
    try:
        (tmp_path / "m.toml").write_text(RULE.format(g="bow") + SYNTH)
        code = main(["send", "reload", "--port", str(inbox.address[1]), "--wait-s", "5"])
        err = capsys.readouterr().err
        assert code == 3, (code, err)
        assert "solo: mapping reloaded (2 rules); but destination 'synth' could not be opened" in err, err
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


def test_a_reload_of_every_garment_passes_over_one_without_a_mapping_file(tmp_path, demo_model, demo_model_file):
    """A garment run without a mapping file has nothing to reload: a reload of every garment
    is done (exit 0) and says so for it; named alone, or when no garment has one, refused."""
    service = _three_garment_service(tmp_path, demo_model, demo_model_file)
    try:
        service.garments[2].watcher = None                                   # ghost: no mapping file
        code, out, err = _send_to(service, "reload")
        assert code == 0 and "ghost: no mapping file, nothing to reload" in out, (code, out, err)
        assert "lead: mapping reloaded" in out and "chorus: mapping reloaded" in out, out
        code, out, err = _send_to(service, "reload", "--garment", "ghost")
        assert code == 1 and "refused: ghost: no mapping file" in err, (code, out, err)
        for g in service.garments:
            g.watcher = None
        code, out, err = _send_to(service, "reload")
        assert code == 1 and "no running garment has a mapping file" in err, (code, out, err)
    finally:
        service.control.close()
        service.status.close()


def test_a_command_to_every_garment_names_each_failed_garment_and_why(tmp_path, demo_model, demo_model_file):
    """A garment that failed at start cannot be reached by any command: a command to every
    garment is done when every running garment did it, and its text says which garment was
    not reached and why; named alone, the failed garment is refused."""
    service = _three_garment_service(tmp_path, demo_model, demo_model_file)
    ghost = service.garments[2]
    try:
        ghost.pipeline, ghost.watcher = None, None
        service.fail(ghost, "model file missing: /shows/ghost.npz")
        for cmd in ("reload", "arm", "disarm", "panic"):
            code, out, err = _send_to(service, cmd)
            assert code == 0 and "lead: " in out and "chorus: " in out, (cmd, code, out, err)
            assert "ghost: failed at start, not running (model file missing: /shows/ghost.npz)" in out, (cmd, out)
        code, out, err = _send_to(service, "arm", "--garment", "ghost")
        assert code == 1 and "no such running garment 'ghost'" in err and "ghost (failed)" in err, (code, out, err)
    finally:
        service.control.close()
        service.status.close()


def _standing(model, seconds):
    """A block of the simulated wearer standing still, as it arrives now."""
    from bridge.garment import Jacket
    from bridge.sources.base import Block
    take = Jacket(seed=1, wearer=0, session=3).perform([("standing", seconds)])
    return Block(np.arange(len(take.freq_hz)) / take.rate_hz, take.freq_hz, time.monotonic())


def _calibrating_service(tmp_path, model, model_file):
    """``_three_garment_service`` with [calibration] (0.2 s holds) and data: lead and chorus
    have calibrated on a wearer standing still and run; ghost's serial port is not there
    (waiting, as the service marks a garment whose device could not be opened)."""
    from bridge.service import Pipeline
    from bridge.service.daemon import WAITING
    from bridge.sources.base import empty_block
    from bridge.sources.health import Watchdog
    service = _three_garment_service(tmp_path, model, model_file)
    service.config.hold_still_s, service.config.detect_shift = 0.2, False
    for g in service.garments:
        g.pipeline = Pipeline(model, g.pipeline.mapping, g.name, settle=service.settling())
        g.watchdog = Watchdog(5.0)
        service.sync_hold(g)
    ghost = service.garments[2]
    ghost.state, ghost.note = WAITING, "waiting for the garment (cannot open serial port /dev/ttyGHOST: no such file)"
    ghost.source = type("Away", (), {"connected": False})()
    service.take(2, empty_block(model.n_channels, time.monotonic()))   # a read that found no device
    for i in (0, 1):
        service.take(i, _standing(model, 1.0))
    return service


def test_a_rebaseline_is_refused_for_a_garment_without_data_and_its_state_stays(tmp_path, demo_model, demo_model_file,
                                                                                  caplog):
    """Nobody is told to hold still for a garment whose device is not there or gone: its part
    of the answer says why, it counts as not done, its state and note stay, and when its
    device turns up the wearer is still told to hold still."""
    import logging
    from bridge.sources.base import empty_block
    caplog.set_level(logging.INFO, logger="drape")
    service = _calibrating_service(tmp_path, demo_model, demo_model_file)
    lead, chorus, ghost = service.garments
    try:
        assert (lead.state, chorus.state, ghost.state) == ("running", "running", "waiting")
        note = ghost.note
        code, out, err = _send_to(service, "rebaseline", "--garment", "ghost")
        assert code == 1 and "refused: ghost: no data (waiting for the garment (cannot open serial port" in err, (code, err)
        assert "it calibrates when its data comes" in err and "hold still" not in out + err, err
        assert (ghost.state, ghost.note) == ("waiting", note)
        code, out, err = _send_to(service, "rebaseline")
        assert code == 3 and "rebaseline took effect on lead, chorus, NOT on ghost" in err, (code, out, err)
        assert "lead: hold still, re-baselining (0.2 s)" in err and "ghost: no data (waiting" in err, err
        assert (lead.state, ghost.state, ghost.note) == ("calibrating", "waiting", note)
        caplog.clear()
        service.take(2, _standing(demo_model, 0.5))           # ghost's device turns up
        assert "ghost: the garment is there; hold still: calibrating (0.2 s)" in caplog.text, caplog.text
        # chorus's device goes away while it runs: a rebaseline is refused, the note stays
        service.take(1, _standing(demo_model, 0.5))           # its capture ends: running again
        chorus.source = type("Away", (), {"connected": False})()
        service.take(1, empty_block(demo_model.n_channels, time.monotonic()))
        assert (chorus.state, chorus.note) == ("running", "device gone")
        code, out, err = _send_to(service, "rebaseline", "--garment", "chorus")
        assert code == 1 and "chorus: no data (device gone); not re-baselined; ask again once its data flows" in err, err
        assert (chorus.state, chorus.note) == ("running", "device gone")
    finally:
        service.control.close()
        service.status.close()


def test_the_single_loop_refuses_a_rebaseline_while_it_has_no_data(demo_model, capsys):
    from bridge.cli import main
    from bridge.service import Pipeline, Settling, StopFlag, run
    from bridge.service.control import ControlInbox

    class Unplugged(IdleSource):
        connected = False

    inbox = ControlInbox("127.0.0.1", 0)
    stop, said = StopFlag(), []
    pipe = Pipeline(demo_model, None, "solo", settle=Settling(0.5))
    loop = threading.Thread(target=run, args=(Unplugged(demo_model.n_channels), pipe, {}, stop),
                            kwargs=dict(inbox=inbox, report=said.append, stall_s=0.2), daemon=True)
    loop.start()
    try:
        time.sleep(0.1)   # a few reads: the watchdog has said "no device yet"
        code = main(["send", "rebaseline", "--port", str(inbox.address[1]), "--wait-s", "5"])
        r = capsys.readouterr()
        assert code == 1 and "refused: solo: no data (no device yet); it calibrates when its data comes" in r.err, r
        assert "hold still" not in r.out + r.err and [h.why for h in pipe.holds] == ["hold still: calibrating"]
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


def test_a_partial_outcome_is_an_osc_string_the_reference_library_reads():
    """The acknowledgement's outcome word read back with python-osc (the reference OSC 1.0
    implementation): "done", "partly", "refused"; True and False still mean done and refused."""
    from pythonosc.osc_message import OscMessage
    from bridge.service.control import ACK, ack_message
    for outcome, word in ((True, "done"), (False, "refused"), ("partly", "partly")):
        m = OscMessage(ack_message(outcome, "reload", "lead: mapping reloaded"))
        assert m.address == ACK and list(m.params) == [word, "reload", "lead: mapping reloaded"]
    with pytest.raises(ValueError):
        ack_message("maybe", "reload", "")


def test_short_tokens_are_refused(tmp_path):
    from bridge.service.config import ConfigError, load_service
    from bridge.service.control import ControlPort, TokenMissing
    (tmp_path / "s.toml").write_text('[[garment]]\nname = "a"\nsimulated = true\nmodel = "a.npz"\n'
                                     '[control]\nlisten = "0.0.0.0:9100"\ntoken = "s3cret"\n')
    with pytest.raises(ConfigError, match="at least 16"):
        load_service(tmp_path / "s.toml")
    with pytest.raises(TokenMissing, match="at least 16"):
        ControlPort("127.0.0.1", 0, "s3cret")


def test_localhost_is_resolved_and_must_be_loopback(monkeypatch):
    from bridge.service import control
    assert control.is_loopback("localhost") and control.is_loopback("127.0.0.5") and control.is_loopback("::1")
    assert not control.is_loopback("0.0.0.0") and not control.is_loopback("192.0.2.1")  # RFC 5737 documentation net
    real = socket.getaddrinfo
    monkeypatch.setattr(control.socket, "getaddrinfo",   # a hosts file that maps localhost elsewhere
                        lambda host, *a, **k: [(2, 2, 17, "", ("192.0.2.7", 0))] if host == "localhost" else real(host, *a, **k))
    with pytest.raises(control.TokenMissing):
        control.ControlInbox("localhost", 0)
    with pytest.raises(control.TokenMissing):
        control.ControlPort("localhost", 0)


# ---- the watch view, disarmed events, output failures --------------------------------------------

def _status(address, *args):
    from bridge.service.status import message
    return message(address, *args)


def test_watch_says_when_the_daemon_went_silent_and_marks_every_value_stale():
    from bridge.service.watch import StatusView, render
    v = StatusView()
    v.take("/drape/alive", [12.0, 1, 4242], now_s=100.0)
    v.take("/drape/g/jacket/state", ["running", 1, "act1", 1, 99.3, 0, 5000, ""], now_s=100.0)
    v.take("/drape/g/jacket/channels", ["left_sleeve"], now_s=100.0)
    v.take("/drape/g/jacket/levels", [0.01], now_s=100.0)
    live = render(v, 200, now_s=101.0)
    assert "NO HEARTBEAT" not in live and "STALE" not in live and "running  ARMED" in live
    dead = render(v, 200, now_s=112.5)
    assert "NO HEARTBEAT FOR 12 s" in dead.splitlines()[0]
    body = dead.splitlines()[1:]
    assert body and all("STALE" in line for line in body if "jacket" in line or "left_sleeve" in line or "top" in line)


def test_a_garment_whose_data_stopped_shows_its_last_levels_and_scores_as_stale():
    """The daemon is alive but the garment's device is gone: its bars and top scores are the
    last it gave, and say so; once data flows again they are live."""
    from bridge.service.watch import StatusView, render
    v = StatusView()
    v.take("/drape/alive", [12.0, 1, 4242], now_s=100.0)
    v.take("/drape/g/jacket/state", ["running", 1, "", 0, 0.0, 0, 5000, "device gone"], now_s=100.0)
    v.take("/drape/g/jacket/channels", ["left_sleeve"], now_s=100.0)
    v.take("/drape/g/jacket/levels", [0.01], now_s=100.0)
    v.take("/drape/g/jacket/top", ["raise_left", 0.47, "null", 0.4, "bow", 0.1], now_s=100.0)
    gone = render(v, 200, now_s=100.5).splitlines()
    assert all("STALE" in line for line in gone if "left_sleeve" in line or "top:" in line), gone
    assert any("top:" in line for line in gone) and "NO HEARTBEAT" not in gone[0]
    v.take("/drape/g/jacket/state", ["running", 1, "", 1, 99.0, 0, 5100, ""], now_s=101.0)
    assert "STALE" not in render(v, 200, now_s=101.2)


OUTAGE = [("/drape/alive", (30.0, 1, 4242)),
          ("/drape/g/lead/levels", (-0.0011, -0.0017, 0.0035, 0.0026)),
          ("/drape/g/lead/top", ("null", 0.81, "hands_on_hips", 0.08, "hand_on_heart", 0.04)),
          ("/drape/g/lead/state", ("running", 1, "", 0, 0.0, 0, 2100, "device gone", 0))]
NAMES = ("/drape/g/lead/channels", ("left_sleeve", "right_sleeve", "left_front", "right_front"))


def test_a_view_that_has_levels_but_not_yet_the_channel_names_invents_none():
    """Levels come 20 times a second, the names only with the state: a view started during
    an outage (levels repeated, data not flowing) draws no bar under a made-up name; once the
    names come, the bars carry them and are marked stale."""
    from bridge.service.watch import StatusView, render
    v = StatusView()
    for address, args in OUTAGE:
        v.take(address, list(args), now_s=100.0)
    early = render(v, 200, now_s=100.1)
    assert "ch0" not in early and "#" not in early, early
    assert "STALE levels of 4 channels: their names not heard yet" in early, early
    v.take(*NAMES[:1], list(NAMES[1]), now_s=100.2)
    later = render(v, 200, now_s=100.3).splitlines()
    bars = [line for line in later if "#" in line or "...." in line]
    assert [line.split()[1] for line in bars] == list(NAMES[1]) and all(line.startswith("  STALE ") for line in bars)
    fresh = StatusView()   # nothing but levels yet: arming, data and rate are not known, so none is drawn
    fresh.take(*OUTAGE[1][:1], list(OUTAGE[1][1]), now_s=0.0)
    frame = render(fresh, 200, now_s=0.1)
    assert "[lead] state not heard yet: arming, data and rate unknown" in frame, frame
    for made_up in ("disarmed", "ARMED", "NO DATA", "0.0 Hz", "dropped 0", "STALE", "levels of"):
        assert made_up not in frame, (made_up, frame)


def test_watch_once_during_an_outage_prints_the_channel_names(capsys):
    """`drape watch --once` started while a garment's data has stopped: the one frame it
    prints names the channels (they come in their own datagram, after the state) and marks
    the levels stale."""
    import io
    from bridge.service.status import message
    from bridge.service.watch import watch
    port, out, code = free_port(), io.StringIO(), []
    t = threading.Thread(target=lambda: code.append(watch("127.0.0.1", port, once=True, wait_s=8.0, out=out)))
    t.start()
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        end = time.monotonic() + 5
        while time.monotonic() < end:   # until the view holds the port
            try:
                with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as probe:
                    probe.bind(("127.0.0.1", port))
                time.sleep(0.02)
            except OSError:
                break
        for address, args in OUTAGE:     # as the daemon sends them, the names last
            s.sendto(message(address, *args), ("127.0.0.1", port))
        time.sleep(0.4)
        while t.is_alive() and time.monotonic() < end + 5:
            s.sendto(message(NAMES[0], *NAMES[1]), ("127.0.0.1", port))
            s.sendto(message(*OUTAGE[1][:1], *OUTAGE[1][1]), ("127.0.0.1", port))
            time.sleep(0.05)
    t.join(10)
    frame = out.getvalue()
    assert code == [0], (code, frame, capsys.readouterr().err)
    assert "ch0" not in frame and "names not heard" not in frame, frame
    for name in NAMES[1]:
        assert f"STALE {name}" in frame, frame


def test_watch_redraws_with_the_terminal_width_and_goes_stale(tmp_path):
    port = free_port()
    proc = subprocess.Popen(drape_cmd("watch", "--port", str(port)), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env=dict(os.environ, COLUMNS="220"))
    got = bytearray()
    threading.Thread(target=lambda: [got.extend(b) for b in iter(lambda: proc.stdout.read1(4096), b"")],
                     daemon=True).start()
    note = "settling: " + "x" * 150 + " END"
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            end = time.monotonic() + 30
            while b"END" not in got and time.monotonic() < end:  # a heartbeat a second, as the daemon sends
                s.sendto(_status("/drape/alive", 3.0, 1, 4242), ("127.0.0.1", port))
                s.sendto(_status("/drape/g/jacket/state", "settling", 1, "", 1, 99.3, 0, 100, note), ("127.0.0.1", port))
                time.sleep(0.5)
        assert b"END" in got, "the note was never drawn"
        assert b"NO HEARTBEAT" not in got
        wait_for(lambda: b"NO HEARTBEAT FOR" in got, 6, "the silence to be shown")
        last = got[got.rindex(b"\x1b[H"):].decode()
        assert "STALE [jacket]" in last and "END" in last   # a long line is not cut at 78 columns
    finally:
        proc.terminate()
        proc.wait(10)


def test_a_second_watch_on_a_busy_port_explains_instead_of_a_traceback(capsys):
    from bridge.cli import main
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as busy:
        busy.bind(("127.0.0.1", 0))
        code = main(["watch", "--port", str(busy.getsockname()[1]), "--once", "--wait-s", "0.2"])
    err = capsys.readouterr().err
    assert code != 0 and "busy" in err and "--port" in err and "Traceback" not in err


def test_disarmed_events_are_marked_not_sent_in_every_view(demo_model, capsys):
    from bridge.cli import _print_event
    from bridge.decisions.gate import Event
    from bridge.mapping import parse_mapping
    from bridge.service import Pipeline, Timing
    from bridge.service.status import event
    from bridge.service.watch import StatusView, render
    from pythonosc.osc_message import OscMessage
    m = parse_mapping('[destinations.show]\nosc = "127.0.0.1:9"\n[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/b"\n'
                      '[safety]\nstart = "disarmed"\n', "m.toml", demo_model.classes, demo_model.kinds,
                      demo_model.channel_names)
    p = Pipeline(demo_model, m, "jacket")
    bow = Event(1.0, "bow", "gesture", 0.9)
    sent, why_not = p.dispatches_marked([bow])
    assert sent == [] and why_not == ["disarmed"]
    sent, why_not = p.dispatches_marked(p.command("arm") + [bow])
    assert len(sent) >= 1 and why_not[-1] == ""
    _print_event(bow, Timing(0.4, 1.85, not_sent="disarmed"))
    _print_event(bow, Timing(0.4, 1.85))
    out = capsys.readouterr().out.splitlines()
    assert "disarmed: not sent" in out[0] and "latency" not in out[0] and "latency  1.85 ms" in out[1]
    v = StatusView()
    for sent_flag in (False, True):
        msg = OscMessage(event("jacket", bow, 0.0, 0.4, 1.85, sent_flag))
        v.take(msg.address, list(msg.params))
    lines = [l for l in render(v, 200).splitlines() if "bow" in l]
    assert "disarmed: not sent" in lines[0] and "sent" in lines[1] and "disarmed" not in lines[1]


def test_an_armed_event_that_no_rule_sends_is_never_reported_sent(demo_model):
    """With the single-switch mapping, a carer reading the log must not see the wearer's
    unmapped posture, or the hold going on after its one confirm, reported as sent."""
    from bridge.decisions.gate import Event
    from bridge.examples_data import example_text
    from bridge.mapping import parse_mapping
    from bridge.service import Pipeline
    m = parse_mapping(example_text("single-switch.toml"), "single-switch.toml", demo_model.classes,
                      demo_model.kinds, demo_model.channel_names)
    p = Pipeline(demo_model, m, "jacket")
    events = [Event(1.0, "arms_crossed", "entered", 0.9), Event(3.0, "arms_crossed", "left", 0.9),
              Event(5.0, "hand_on_heart", "entered", 0.9),
              Event(7.0, "hand_on_heart", "held", 0.9, 2.0), Event(9.0, "hand_on_heart", "held", 0.9, 4.0)]
    sent, why_not = p.dispatches_marked(events)
    assert [d.message.keys for d in sent] == [("space",), ("enter",)]
    assert why_not == ["no rule due", "no rule due", "", "", "no rule due"]


def test_events_of_a_garment_without_a_mapping_are_never_reported_sent(tmp_path, demo_model, demo_model_file,
                                                                          caplog, capsys):
    """Nothing goes out for a garment run without a mapping: the log, the status stream and
    the single loop's lines say so, with no sent latency; and an event a command set off
    claims no latency from a sample that did not cause it."""
    import logging
    from bridge.cli import _print_event
    from bridge.decisions.gate import Event
    from bridge.service import Pipeline, Timing
    from pythonosc.osc_message import OscMessage
    caplog.set_level(logging.INFO, logger="drape")
    bow = Event(1.0, "bow", "gesture", 0.9)
    sent, why_not = Pipeline(demo_model, None, "ghost").dispatches_marked([bow])
    assert sent == [] and why_not == ["no mapping"]
    service = _three_garment_service(tmp_path, demo_model, demo_model_file)
    ghost = service.garments[2]
    told = []
    service.status.send = told.extend
    try:
        ghost.pipeline, ghost.watcher = Pipeline(demo_model, None, "ghost"), None
        service.deliver(ghost, [bow], time.monotonic())
        line = next(r.getMessage() for r in caplog.records if "ghost: gesture bow" in r.getMessage())
        assert line.endswith("no mapping: not sent") and "ms" not in line, line
        ev = OscMessage(told[-1])
        assert ev.address == "/drape/g/ghost/event" and list(ev.params)[7:] == [0, "no mapping"], list(ev.params)
        from bridge.service.watch import StatusView, render
        view = StatusView()
        view.take(ev.address, list(ev.params))
        shown = [l for l in render(view, 200).splitlines() if "bow" in l]
        assert len(shown) == 1 and "no mapping: not sent" in shown[0] and "disarmed" not in shown[0], shown
        caplog.clear()
        code, out, err = _send_to(service, "disarm", "--garment", "lead")
        assert code == 0, (code, out, err)
        line = next(r.getMessage() for r in caplog.records if "lead: disarmed" in r.getMessage())
        assert "after the command" in line and "sample" not in line, line
    finally:
        service.control.close()
        service.status.close()
    _print_event(bow, Timing(0.4, 1.85, not_sent="no mapping"))
    out = capsys.readouterr().out
    assert "no mapping: not sent" in out and "latency" not in out and "disarmed" not in out, out


def test_the_single_loop_tells_an_event_without_a_mapping_as_not_sent(demo_model):
    from bridge.cli import main
    from bridge.service import Pipeline, StopFlag, run
    from bridge.service.control import ControlInbox
    inbox = ControlInbox("127.0.0.1", 0)
    stop, heard = StopFlag(), []
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, None, "solo"),
                                              {}, stop),
                            kwargs=dict(inbox=inbox, report=lambda t: None, on_event=lambda e, t: heard.append((e, t))),
                            daemon=True)
    loop.start()
    try:
        assert main(["send", "disarm", "--port", str(inbox.address[1]), "--wait-s", "5"]) == 0
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()
    assert [e.kind for e, _ in heard] == ["disarmed"], heard
    assert all(t.not_sent == "no mapping" and not t.disarmed for _, t in heard), heard


class FailingOutput:
    """An output whose destination went away after its first message."""

    def __init__(self):
        from bridge.outputs.base import OutputStats
        self.stats = OutputStats()
        self.name = "kb"

    def send(self, message):
        if self.stats.sent == 0:
            self.stats.sent += 1
        else:
            self.stats.dropped += 1
            self.stats.last_error = "ConnectionClosedError: Display connection closed by server"
        return True

    def close(self):
        pass


def test_output_failures_are_told_as_they_happen_at_most_once_per_interval():
    from bridge.service.outputwatch import OutputWatch
    o = FailingOutput()
    w = OutputWatch(every_s=5.0)
    outs = {"kb": o}
    assert w.poll(outs, 0.0) == []
    o.send(1)
    assert w.poll(outs, 0.1) == []         # worked: nothing to say
    o.send(2)
    [first] = w.poll(outs, 0.2)
    assert "output kb failing: ConnectionClosedError" in first and "1 message(s) not sent" in first
    for t in (0.3, 1.0, 4.0):
        o.send(3)
        assert w.poll(outs, t) == []      # rate-limited per destination
    [again] = w.poll(outs, 5.3)
    assert "3 message(s) not sent since the last notice" in again


def test_the_live_loop_reports_a_failing_output_while_running(demo_model):
    from bridge.mapping import parse_mapping
    from bridge.mapping.messages import OscMessage
    from bridge.service import Pipeline, StopFlag, run
    m = parse_mapping('[destinations.kb]\nosc = "127.0.0.1:9"\n', "m.toml", demo_model.classes, demo_model.kinds,
                      demo_model.channel_names)
    o = FailingOutput()
    stop, said = StopFlag(), []
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, m, "jacket"),
                                              {"kb": o}, stop), kwargs=dict(report=said.append), daemon=True)
    loop.start()
    try:
        o.send(OscMessage("/a", ()))
        o.send(OscMessage("/a", ()))
        wait_for(lambda: any("output kb failing" in s for s in said), 5, "the failure to be reported while running")
    finally:
        stop.set("test")
        loop.join(10)


def holders_of(path, ours=()) -> list[str]:
    """Other processes with the terminal device at ``path`` open, as "pid command" (Linux /proc;
    processes whose descriptors cannot be read are not seen). ``ours``: pids to leave out."""
    rdev = os.stat(path).st_rdev
    found = []
    for pid in filter(str.isdigit, os.listdir("/proc")):
        if int(pid) in ours or int(pid) == os.getpid():
            continue
        try:
            fds = os.listdir(f"/proc/{pid}/fd")
        except OSError:
            continue
        for fd in fds:
            try:
                st = os.stat(f"/proc/{pid}/fd/{fd}")
            except OSError:
                continue
            if st.st_rdev == rdev and (st.st_mode & 0o170000) == 0o020000:  # the same character device
                try:
                    with open(f"/proc/{pid}/cmdline", "rb") as f:
                        cmd = f.read().replace(b"\0", b" ").decode(errors="replace").strip()
                except OSError:
                    cmd = "?"
                found.append(f"{pid} {cmd}")
                break
    return found


def garment_pty(settle_s=1.5, tries=4):
    """A pseudo-terminal (master, slave fds) that no other process has opened.

    Pseudo-terminal numbers are handed out lowest first and reused at once, and a daemon
    elsewhere on the machine (another test run, a walkthrough) whose own pseudo-terminal went
    away keeps reopening it by path, about once a second: it would open ours, lock it and read
    the garment's lines, and our daemon would see none. So each new pseudo-terminal is left
    alone for ``settle_s`` first; one that someone opened is kept open (so the next has
    another number) and closed only once a clean one is found."""
    taken = []
    try:
        for _ in range(tries):
            master, slave = os.openpty()
            time.sleep(settle_s)
            if not holders_of(os.ttyname(slave)):
                return master, slave
            taken.append((master, slave))
        pytest.fail("every new pseudo-terminal was opened by another process: "
                    + "; ".join(f"{os.ttyname(s)}: {', '.join(holders_of(os.ttyname(s)))}" for _, s in taken))
    finally:
        for fds in taken:
            for fd in fds:
                os.close(fd)


class HungKeyboard:
    """A keyboard whose X server stopped answering: a press never returns until ``answer`` is set."""

    def __init__(self):
        self.answer, self.pressing = threading.Event(), threading.Event()

    def press(self, key):
        self.pressing.set()
        self.answer.wait()

    def release(self, key):
        pass

    def close(self):
        pass


class Kept:
    """An output that keeps what it is sent (the lights, say)."""

    def __init__(self):
        from bridge.outputs.base import OutputStats
        self.stats, self.got = OutputStats(), []

    def send(self, message):
        self.got.append(message)
        return True

    def close(self):
        pass


def test_a_keys_destination_whose_display_hangs_holds_up_nothing_in_the_loop(demo_model):
    # A display that stops answering (a frozen X server, a dead remote connection) blocks the
    # keys worker in its write. The loop hands messages over and never waits on that worker:
    # a panic still reaches the other destinations, keys pile up only to be dropped, and the
    # loop ends when told.
    from bridge.mapping import parse_mapping
    from bridge.mapping.messages import KeyAction, Release
    from bridge.outputs import QueuedOutput
    from bridge.outputs.keys import KeyOutput
    from bridge.service import Pipeline, StopFlag, run
    m = parse_mapping('[destinations.kb]\nkeys = "x11"\n[destinations.lights]\nosc = "127.0.0.1:9"\n', "m.toml",
                      demo_model.classes, demo_model.kinds, demo_model.channel_names)
    board, lights = HungKeyboard(), Kept()
    kb = QueuedOutput(KeyOutput("kb", board), capacity=4)
    kb.send(KeyAction(("shift",), "down"))
    stop = StopFlag()
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, m, "jacket"),
                                              {"kb": kb, "lights": lights}, stop),
                            kwargs=dict(report=lambda text: None), daemon=True)
    try:
        wait_for(board.pressing.is_set, 10, "the keys worker to hang in its press")
        loop.start()
        for n in (1, 2, 3):
            stop.request_panic()
            wait_for(lambda: sum(isinstance(x, Release) for x in lights.got) == n, 10,
                     f"panic {n} to reach the lights while the display hangs")
        for _ in range(10):
            kb.send(KeyAction(("a",), "tap"))  # more than the queue holds: dropped, never waited for
        assert kb.stats.overflowed > 0
        stop.set("test")
        loop.join(10)
        assert not loop.is_alive() and not board.answer.is_set()
    finally:
        stop.set("test")
        board.answer.set()
        kb.close(drain_s=0.0, join_s=5.0)


def test_status_from_the_single_loop_names_a_failing_output(demo_model, capsys):
    """A carer asking `drape send status` while the keys destination is dead (its display went
    away) must not read only "running, armed": the switch does not work."""
    from bridge.cli import main
    from bridge.mapping import parse_mapping
    from bridge.mapping.messages import OscMessage
    from bridge.service import Pipeline, StopFlag, run
    from bridge.service.control import ControlInbox
    m = parse_mapping('[destinations.kb]\nosc = "127.0.0.1:9"\n', "m.toml", demo_model.classes, demo_model.kinds,
                      demo_model.channel_names)
    o = FailingOutput()
    inbox = ControlInbox("127.0.0.1", 0)
    stop, said = StopFlag(), []
    loop = threading.Thread(target=run, args=(IdleSource(demo_model.n_channels), Pipeline(demo_model, m, "jacket"),
                                              {"kb": o}, stop), kwargs=dict(inbox=inbox, report=said.append),
                            daemon=True)
    loop.start()
    try:
        assert main(["send", "status", "--port", str(inbox.address[1])]) == 0
        assert "FAILING" not in capsys.readouterr().out      # working: nothing to say
        o.send(OscMessage("/a", ()))
        o.send(OscMessage("/a", ()))
        wait_for(lambda: any("output kb failing" in s for s in said), 5, "the failure to be reported while running")
        assert main(["send", "status", "--port", str(inbox.address[1])]) == 0
        out = capsys.readouterr().out
        assert "jacket: running, armed" in out and "output kb FAILING: ConnectionClosedError" in out, out
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


def test_a_keys_destination_whose_display_goes_away_is_reported_at_once_and_closes_quietly(tmp_path, demo_model_file):
    import shutil
    if shutil.which("Xvfb") is None:
        pytest.skip("Xvfb is not installed (Debian package xvfb)")
    import importlib.util
    if importlib.util.find_spec("pynput") is None:  # importing it needs a display
        pytest.skip("pynput (extra 'keys') is not installed")
    from bridge.garment import Jacket
    from bridge.sources.textline import format_line
    from test_keys import start_xvfb
    xvfb, display = start_xvfb()  # a display of our own: another run's Xvfb going away is not ours
    take = Jacket(seed=1, wearer=0, session=5).perform([("standing", 8.0), ("arms_crossed", 60.0)])
    lines = [format_line(v) for v in take.freq_hz]
    (tmp_path / "keys.toml").write_text('[destinations.kb]\nkeys = "x11"\n[[rule]]\ngesture = "arms_crossed"\n'
                                        'on = "entered"\nto = "kb"\nkeys = "shift"\nhold = true\n')
    master, slave = garment_pty()  # not one that a daemon elsewhere keeps reopening
    port = os.ttyname(slave)
    (tmp_path / "show.toml").write_text(f'[garment]\nname = "jacket"\nport = "{port}"\n'
                                        f'model = "{demo_model_file}"\nmapping = "keys.toml"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=dict(os.environ, DISPLAY=display))
    out, err, done = [], [], threading.Event()
    readers = [threading.Thread(target=lambda: [out.append(l) for l in proc.stdout], daemon=True),
               threading.Thread(target=lambda: [err.append(l) for l in proc.stderr], daemon=True)]
    for r in readers:
        r.start()

    fed = [0, ""]  # lines written to the pty; why the garment stopped early

    def garment():
        try:
            while not done.is_set() and fed[0] < len(lines):
                os.write(master, b"".join(lines[fed[0]:fed[0] + 10]))
                fed[0] += 10
                time.sleep(0.05)
        except OSError as exc:
            fed[1] = f" ({exc})"

    def said():
        try:
            others = holders_of(port, {proc.pid})
        except OSError:  # the pseudo-terminal is gone (closed at the end)
            others = []
        return (f"garment: {fed[0]} of {len(lines)} lines written{fed[1]}\n"
                + (f"the garment's port is open in other processes too: {'; '.join(others)}\n" if others else "")
                + f"stderr:\n{''.join(err)}stdout:\n{''.join(out)}")
    try:
        wait_for(lambda: any("on " + port in l for l in err), 30, "drape to start", said)
        assert not holders_of(port, {proc.pid}), said()  # the garment's lines are for our daemon alone
        xvfb.terminate()  # the display goes away mid-show
        xvfb.wait(5)
        threading.Thread(target=garment, daemon=True).start()
        wait_for(lambda: any("arms_crossed" in l and "entered" in l for l in out), 60, "the posture", said)
        wait_for(lambda: any("output kb failing" in l for l in err), 10, "the failure to be told while running", said)
        assert proc.poll() is None, said()
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(30) == 0, said()
    finally:
        done.set()
        proc.kill()
        xvfb.kill()
        xvfb.wait(5)
        os.close(master)
        os.close(slave)
    for r in readers:  # every line the daemon printed before it ended, not those read within some delay
        r.join(10)
    text = "".join(err)
    assert "Exception ignored" not in text and "Traceback" not in text, said()
    assert "output kb: sent" in text, said()


# ---- hot reload that cannot blank the stage ------------------------------------------------------

def test_a_half_written_or_empty_mapping_is_never_applied(tmp_path, demo_model):
    from bridge.mapping import MappingWatcher
    f = tmp_path / "show.toml"
    good = '[destinations.show]\nosc = "127.0.0.1:9"\n[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/b"\n'
    f.write_text(good)
    w = MappingWatcher(f, demo_model.classes, demo_model.kinds, demo_model.channel_names, interval_s=0.1)
    f.write_text('[destinations.show]\nosc = "127.0.0.1:9"\n')   # caught mid-write: parses, 0 rules
    assert w.poll(0.1) is None                                     # seen changing: not applied yet
    f.write_text(good + '[[rule]]\ngesture = "raise_right"\nto = "show"\naddress = "/r"\n')
    assert w.poll(0.2) is None                                     # still changing
    r = w.poll(0.3)
    assert r.mapping is not None and len(r.mapping.rules) == 2     # the whole file, once it held still
    running = w.mapping
    f.write_text("")                                               # `echo -n > show.toml`, a failed copy
    assert w.poll(0.4) is None
    r = w.poll(0.5)
    assert r.mapping is None and "no destinations and no rules" in r.problems[0] and w.mapping is running
    assert w.poll(0.6) is None                                     # said once
    r = w.reload_now()                                             # SIGHUP: the same refusal
    assert r.mapping is None and "no destinations and no rules" in r.problems[0]
    # a show that ran with an empty file may save an empty file again
    f.write_text("")
    w2 = MappingWatcher(f, demo_model.classes, demo_model.kinds, demo_model.channel_names, interval_s=0.0)
    f.write_text("# still nothing\n")
    assert w2.poll(1.0) is None and w2.poll(2.0).mapping is not None


class Counted:
    opened = 0

    def __init__(self, d):
        from bridge.outputs.base import OutputStats
        Counted.opened += 1
        self.d, self.closed, self.stats = d, False, OutputStats()

    def send(self, m):
        return True

    def close(self):
        self.closed = True
        self.stats.on_close = "1 held key released"


def test_a_reload_keeps_outputs_whose_settings_did_not_change(tmp_path):
    from bridge.mapping import parse_mapping
    from bridge.service.runner import reconcile_outputs
    a = parse_mapping('[destinations.rig]\nsacn = 7\nhost = "127.0.0.1"\n[destinations.show]\nosc = "127.0.0.1:9"\n'
                      '[[rule]]\ngesture = "bow"\nto = "show"\naddress = "/b"\n', "m.toml", ("null", "bow"),
                      {"bow": "gesture"})
    b = parse_mapping('# a comment moves every line\n[destinations.rig]\nsacn = 7\nhost = "127.0.0.1"\n'
                      '[destinations.show]\nosc = "127.0.0.1:10"\n[destinations.more]\nosc = "127.0.0.1:11"\n'
                      '[[rule]]\ngesture = "bow"\nto = "more"\naddress = "/c"\n', "m.toml", ("null", "bow"),
                      {"bow": "gesture"})
    outputs = {n: Counted(d) for n, d in a.destinations.items()}
    rig, show = outputs["rig"], outputs["show"]
    said = []
    reconcile_outputs(outputs, a, b, Counted, said.append)
    assert outputs["rig"] is rig and not rig.closed               # same settings: untouched
    assert show.closed and outputs["show"] is not show            # changed port: reopened
    assert "more" in outputs and not any("rig" in s for s in said)
    # the operator reads what closing the changed destination let go of
    assert "destination 'show' closed: sent 0, dropped 0; on stop: 1 held key released" in said, said


def test_sacn_sends_the_safe_look_at_start_unless_told_not_to(tmp_path):
    from bridge.mapping import parse_mapping
    from bridge.outputs import open_output
    for at_start, want in (("", 1), ("safe_at_start = false\n", 0)):
        # A peer of its own each time: the first output's last packets may still be on their
        # way to the collecting thread on a loaded machine.
        peer = SacnPeer()
        try:
            m = parse_mapping(f'[destinations.rig]\nsacn = 9\nhost = "127.0.0.1"\nport = {peer.port}\nsafe = {{ 3 = 77 }}\n'
                              + at_start, "m.toml")
            out = open_output(m.destinations["rig"])
            time.sleep(0.5)  # no cue at all
            got = list(peer.packets)
            out.close()
            if want:
                assert got and got[0][1] == 9 and got[0][2][2] == 77 and not got[0][0] & STREAM_TERMINATED
            else:
                assert got == []
        finally:
            peer.close()


def test_an_empty_save_in_the_middle_of_a_show_closes_and_reopens_nothing(tmp_path):
    from bridge.mapping import MappingWatcher
    from bridge.service import Pipeline, StopFlag, run
    from test_hot_reload import TEMPLATE, ScriptedSource, small_model
    f = tmp_path / "show.toml"
    full = TEMPLATE.format(address="/a")
    f.write_text(full)
    model = small_model()
    w = MappingWatcher(f, model.classes, model.kinds, model.channel_names, interval_s=0.0)
    outputs = {"desk": Counted(w.mapping.destinations["desk"])}
    desk = outputs["desk"]
    Counted.opened = 0
    said = []
    edits = {5: lambda: f.write_text(""), 10: lambda: f.write_text(full + "\n# saved again\n")}
    run(ScriptedSource(16, edits), Pipeline(model, w.mapping), outputs, StopFlag(), watcher=w, open_fn=Counted,
        report=said.append)
    assert outputs["desk"] is desk and not desk.closed and Counted.opened == 0
    assert any("no destinations and no rules" in s for s in said)


# ---- network input ------------------------------------------------------------------------------

def test_osc_sample_input_off_loopback_needs_senders_or_a_token(tmp_path):
    from bridge.service.config import ConfigError, load_config
    from bridge.sources.oscinput import OscUdpSource
    body = '[garment]\nmodel = "m.npz"\ninput = "osc"\nlisten = "0.0.0.0:9100"\naddress = "/j"\narguments = ["a"]\n'
    (tmp_path / "g.toml").write_text(body)
    with pytest.raises(ConfigError, match="senders"):
        load_config(tmp_path / "g.toml")
    (tmp_path / "g.toml").write_text(body + 'token = "short"\n')
    with pytest.raises(ConfigError, match="at least 16"):
        load_config(tmp_path / "g.toml")
    (tmp_path / "g.toml").write_text(body + 'senders = ["10.0.0.21"]\n')
    assert load_config(tmp_path / "g.toml").senders == ("10.0.0.21",)
    with pytest.raises(ValueError, match="senders or a token"):
        OscUdpSource("0.0.0.0:0", "/j", ["a"], 100.0)


def _osc(address, *args):
    from pythonosc.osc_message_builder import OscMessageBuilder
    b = OscMessageBuilder(address)
    for a in args:
        b.add_arg(a)
    return b.build().dgram


def _read_all(src, want, timeout_s=5.0):
    got, end = 0, time.monotonic() + timeout_s
    while got < want and time.monotonic() < end:
        got += len(src.read())
    return got


def test_osc_sample_input_takes_only_listed_senders_or_the_token():
    from bridge.sources.oscinput import OscUdpSource
    from bridge.sources.protocols import describe_counters
    tok = "board-token-0123456789"
    src = OscUdpSource("127.0.0.1:0", "/j", ["a", "b"], 100.0, token=tok)
    other = OscUdpSource("127.0.0.1:0", "/j", ["a", "b"], 100.0, senders=["127.0.0.9"])
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            for _ in range(5):
                s.sendto(_osc("/j", 1000.0, 2000.0), ("127.0.0.1", src.port))        # no token
                s.sendto(_osc("/j", "wrong-token-of-length", 1000.0, 2000.0), ("127.0.0.1", src.port))
                s.sendto(_osc("/j", tok, 1000.0, 2000.0), ("127.0.0.1", src.port))
                s.sendto(_osc("/j", 1000.0, 2000.0), ("127.0.0.1", other.port))      # from 127.0.0.1, not listed
            time.sleep(0.2)
        assert _read_all(src, 5) == 5
        _read_all(other, 1, 0.3)
        assert src.stats.good == 5 and src.stats.wrong_token == 10
        assert other.stats.good == 0 and other.stats.not_allowed == 5
        line = describe_counters(src.counters())
        assert "OSC samples good 5, ignored 10" in line and "wrong token 10" in line
    finally:
        src.close()
        other.close()


def test_control_messages_ignored_are_counted_by_reason():
    from bridge.service.control import ControlPort
    from bridge.service.watch import command_message
    tok = "a-long-enough-token"
    port = ControlPort("127.0.0.1", 0, tok)
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            for d in (command_message("arm", token="bad-token-xxxxxxxx"), command_message("arm"), b"junk",
                      _osc("/drape/fly"), command_message("arm", token=tok)):
                s.sendto(d, port.address)
            time.sleep(0.1)
            got = port.poll()
        assert [c for c, *_ in got] == ["arm"]
        text = port.take_ignored()
        assert "2 wrong or missing token" in text and "1 not OSC" in text and "1 unknown address" in text
        assert port.take_ignored() == ""
    finally:
        port.close()


# ---- counters -----------------------------------------------------------------------------------

def test_a_long_line_without_newline_is_counted_once():
    from bridge.sources import TextLineParser
    p = TextLineParser(2)
    blob = b"1" * 2_000_000
    for i in range(0, len(blob), 8192):  # as a serial port hands it over
        assert p.feed(blob[i:i + 8192]) == []
    assert p.stats.malformed == 1
    assert p.feed(b"2\n7,8\n") == [(None, [7.0, 8.0])]  # the end of that line goes with it
    assert p.stats.malformed == 1


def test_the_osc_input_loop_stop_line_counts_samples_and_implausible_ones(tmp_path, demo_model_file, demo_model):
    from bridge.garment import Jacket
    take = Jacket(seed=1, wearer=0, session=5).perform([("standing", 6.0)])
    rows = take.freq_hz[:500]
    port = free_port()
    names = list(demo_model.channel_names)
    (tmp_path / "g.toml").write_text(f'[garment]\nname = "jacket"\nmodel = "{demo_model_file}"\ninput = "osc"\n'
                                     f'listen = "127.0.0.1:{port}"\naddress = "/j"\narguments = {names!r}\n'.replace("'", '"'))
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "g.toml")), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        wait_until_bound(port, 60.0)   # a loaded machine can take longer than 2 s to start
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            for i, r in enumerate(rows):
                v = [float(x) for x in r]
                if i >= 300 and i % 20 == 0:   # a counter glitch: 1 Hz, 1e-30 Hz, 5e8 Hz
                    v[0] = (1.0, 1e-30, 5e8)[(i // 20) % 3]
                s.sendto(_osc("/j", *v), ("127.0.0.1", port))
                if i % 50 == 0:
                    time.sleep(0.05)
        time.sleep(1.0)
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=30)
    finally:
        proc.kill()
    stop = [l for l in err.splitlines() if "stopped (SIGTERM);" in l][0]   # the stop line names the signal
    assert "protocol not yet known" not in stop
    assert "OSC samples good 500" in stop and "implausible (far from the resting frequency) 10" in stop


def test_the_status_stream_carries_implausible_samples():
    from bridge.service.status import garment_state
    from bridge.service.watch import StatusView, render
    from pythonosc.osc_message import OscMessage
    v = StatusView()
    for d in garment_state("jacket", "running", True, "", True, 100.0, 12, 5000, "", ("a",), implausible=10):
        m = OscMessage(d)
        v.take(m.address, list(m.params))
    assert v.garments["jacket"].implausible == 10 and "dropped 12 (implausible 10)" in render(v, 200)


# ---- re-settling ---------------------------------------------------------------------------------

def test_ordinary_movement_never_re_settles_and_a_stand_coming_near_does(demo_model):
    # The service's default [calibration] (shift = true) on simulated wearer 0 (the model's own
    # wearer, a session it never saw): 6 minutes of the demo's ordinary movement, gestures and
    # postures included, with nothing near; then a grounded stand comes to the sleeve and stays.
    import numpy as np
    from bridge.garment import Jacket
    from bridge.garment.jacket import random_script
    from bridge.service import Pipeline, Settling
    from bridge.service.pipeline import SETTLING
    take = Jacket(seed=7, wearer=0, session=3).perform(random_script(np.random.default_rng([7, 0]), 360.0))
    p = Pipeline(demo_model, settle=Settling())
    for i in range(0, take.freq_hz.shape[0], 10):
        p.feed(take.freq_hz[i:i + 10])
    assert [h.start_sample for h in p.holds if h.state == SETTLING] == []
    near = Jacket(seed=7, wearer=0, session=4).perform([("standing", 20.0), ("metal_near", 30.0), ("standing", 20.0)])
    p = Pipeline(demo_model, settle=Settling())
    for i in range(0, near.freq_hz.shape[0], 10):
        p.feed(near.freq_hz[i:i + 10])
    starts = [h.start_sample / near.rate_hz for h in p.holds if h.state == SETTLING]
    assert 20.0 < starts[0] < 50.0                     # found while it stays
    assert all(50.0 < t <= 50.0 + 12.0 for t in starts[1:]) and len(starts) <= 2  # and its leaving, once


def test_the_single_loop_calibrates_and_re_settles_as_the_service_does(demo_model, capsys):
    from bridge.cli import main
    import inspect
    from bridge.cli import cmd_start
    assert "settle=Settling()" in inspect.getsource(cmd_start)
    from bridge.service import Settling
    from bridge.service.daemon import Service
    from types import SimpleNamespace
    svc = Service(SimpleNamespace(garments=[], status_to=(), hold_still_s=1.0, detect_shift=True), open_fn=None)
    try:
        assert svc.settling() == Settling()   # the service's default [calibration] is the single loop's
    finally:
        svc.status.close()


def test_a_running_garment_whose_data_stopped_is_not_shown_as_running():
    """The stream's state word stays "running" (readers of the stream have its data flag), but
    the head line an operator glances at says the data stopped, and says running again once
    it flows."""
    from bridge.service.watch import StatusView, render
    v = StatusView()
    v.take("/drape/alive", [12.0, 1, 4242], now_s=100.0)
    v.take("/drape/g/jacket/state", ["running", 1, "act1", 0, 0.0, 0, 5000, "device gone"], now_s=100.0)
    head = render(v, 200, now_s=100.5).splitlines()[1]
    assert head.startswith("[jacket] data stopped  ARMED") and "running" not in head, head
    assert v.garments["jacket"].state == "running"   # the machine-readable word is unchanged
    v.take("/drape/g/jacket/state", ["running", 1, "act1", 1, 99.0, 0, 5100, ""], now_s=101.0)
    assert render(v, 200, now_s=101.2).splitlines()[1].startswith("[jacket] running  ARMED")
    v.take("/drape/g/jacket/state", ["calibrating", 1, "", 0, 0.0, 0, 10, "hold still: calibrating"], now_s=102.0)
    assert render(v, 200, now_s=102.2).splitlines()[1].startswith("[jacket] calibrating  ARMED")
