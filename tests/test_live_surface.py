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

import pytest

from conftest import ROOT, drape_cmd
from test_keys import xvfb  # noqa: F401  (Xvfb as the independent key peer)

E131_OPTIONS, E131_UNIVERSE = 112, 113   # ANSI E1.31-2018 Table 4-1 (framing layer)
STREAM_TERMINATED = 0x40                  # ANSI E1.31-2018 6.2.6: options bit 6


def wait_for(condition, timeout_s=20.0, what="condition"):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if condition():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


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
    proc, out, err = _demo(tmp_path, demo_model_file, mapping)
    try:
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

def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_send_with_nobody_listening_fails(capsys):
    from bridge.cli import main
    assert main(["send", "panic", "--port", str(free_port()), "--wait-s", "0.5"]) != 0
    err = capsys.readouterr().err
    assert "sent panic" not in err and ("nothing is listening" in err or "no answer" in err)


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
                                              stop), kwargs=dict(inbox=inbox, report=said.append), daemon=True)
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
        assert code != 0 and "refused" in r.err
        code, r = send("layer", "a\nFAKE drape: armed")   # a forged log line stays on its line
        assert code != 0
        assert not any(line.startswith("FAKE") for s in said for line in s.splitlines())
        assert any("\\n" in s for s in said)
    finally:
        stop.set("test")
        loop.join(10)
        inbox.close()


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
    wait_for(lambda: any("running 1 garment" in l for l in err) or proc.poll() is not None, 60, "the service to start")
    return proc, err


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
        wait_for(lambda: any("control messages ignored: 1 wrong or missing token" in l or
                             "control messages ignored: 2 wrong or missing token" in l for l in err), 5,
                 "ignored messages counted by reason")
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(30)


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
