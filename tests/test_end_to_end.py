"""The whole chain: simulated jacket → conditioning → classifier → gate → mapping → OSC."""

import os
import re
import signal
import subprocess
import threading
import time

import numpy as np
import pytest
from pythonosc.dispatcher import Dispatcher
from pythonosc.osc_server import ThreadingOSCUDPServer

from bridge.cli import main, replay_events
from bridge.evaluation.matching import match_events as shared_match
from bridge.garment import GESTURES, Jacket, random_script
from bridge.sources import Recording, format_line, write_recording

from conftest import ROOT, drape_cmd


def match_events(events, intervals):
    """(intervals recognised, false triggers) by the project's matcher (bridge.evaluation.matching)."""
    m = shared_match(events, intervals, slack_s=2.5)
    return len(m.hits), list(m.false)


@pytest.fixture(scope="module")
def test_take():
    jacket = Jacket(seed=1, wearer=0, session=3)
    rng = np.random.default_rng(2024)
    return Recording.from_take(jacket.perform(random_script(rng, 300.0)), GESTURES)


def test_event_recall_on_a_new_session(demo_model, test_take):
    events = replay_events(test_take, demo_model)
    hits, false = match_events(events, test_take.intervals)
    recall = hits / len(test_take.intervals)
    print(f"recall {recall:.3f} ({hits}/{len(test_take.intervals)}), false triggers {len(false)}")
    assert len(test_take.intervals) >= 30
    # The demo model is linear; the default gate (0.65 on 4 of 5 hops) was chosen for
    # minirocket and trades its recall for silence: 43/51 and no false trigger here, against
    # 47/51 and 1 at the gate before (0.6 on 3 of 4). Measured when the gate changed.
    assert recall >= 0.8
    assert len(false) <= 2


def test_false_triggers_in_ten_minutes_of_null_activity(demo_model):
    jacket = Jacket(seed=1, wearer=0, session=4)
    script = [("standing", 200.0), ("walking", 200.0), ("fidgeting", 200.0)]
    rec = Recording.from_take(jacket.perform(script), GESTURES)
    assert rec.intervals == () and rec.freq_hz.shape[0] >= 600 * rec.rate_hz * 0.99
    events = replay_events(rec, demo_model)
    firing = [e for e in events if e.kind in ("gesture", "entered")]
    print(f"false triggers in 10 min of null activity: {len(firing)}: {[(e.gesture, round(e.t_s, 1)) for e in firing]}")
    assert len(firing) <= 2


def test_replay_in_any_block_size_gives_the_same_events(demo_model, test_take):
    a = replay_events(test_take, demo_model, block_s=0.01)
    b = replay_events(test_take, demo_model, block_s=0.37)
    # Same decisions; confidences agree to rounding (BLAS may sum a batch in another order).
    key = lambda evs: [(e.t_s, e.gesture, e.kind, round(e.confidence, 9), round(e.duration_s, 9)) for e in evs]
    assert key(a) == key(b) and len(a) > 10


class OscCatcher:
    def __init__(self):
        self.got = []
        d = Dispatcher()
        d.set_default_handler(lambda address, *args: self.got.append((address, args)))
        self.server = ThreadingOSCUDPServer(("127.0.0.1", 0), d)
        self.port = self.server.server_address[1]
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    def close(self):
        self.server.shutdown()
        self.server.server_close()


def test_demo_subprocess_sends_mapped_osc_to_a_separate_receiver(tmp_path):
    catcher = OscCatcher()
    try:
        text = (ROOT / "mappings" / "demo.toml").read_text().replace("127.0.0.1:9000", f"127.0.0.1:{catcher.port}")
        mapping = tmp_path / "demo.toml"
        mapping.write_text(text)
        proc = subprocess.run(drape_cmd("demo", "--for", "90", "--fast", "--mapping", str(mapping)),
                              capture_output=True, text=True, timeout=120)
        assert proc.returncode == 0, proc.stderr
        # Each decision that sends: a firing line ("→ raise_right 0.94, ...") or a posture left.
        printed = [l for l in proc.stdout.splitlines()
                   if re.search(r" s    → \w+ (entered )?\d\.\d\d", l) or re.search(r" s      \w+ left, ", l)]
        assert len(printed) >= 5, proc.stdout
        deadline = time.monotonic() + 2
        while len(catcher.got) < len(printed) and time.monotonic() < deadline:
            time.sleep(0.05)
    finally:
        catcher.close()
    addresses = {"/drape/cue/next", "/drape/cue/previous", "/drape/sound/rain", "/drape/sound/thunder",
                 "/drape/light/blackout", "/drape/curtain", "/drape/light/warm", "/drape/light/cold",
                 "/drape/sound/heartbeat"}
    assert catcher.got and all(a in addresses for a, _ in catcher.got)
    address, args = catcher.got[0]
    assert args[0] in GESTURES and isinstance(args[1], float)
    assert len(catcher.got) == len(printed)
    # The tour: every demo gesture is performed once within the first minute, and said so.
    performing = [re.match(r"\s*([\d.]+) s  performing (\w+)", l) for l in proc.stdout.splitlines()]
    performing = [(float(m.group(1)), m.group(2)) for m in performing if m]
    assert {g for t, g in performing if t < 60} == set(GESTURES)
    # The stop line sums up what the lines said.
    lines = proc.stdout.splitlines()
    total = re.search(r"(\d+) gestures? performed, (\d+) recognised, (\d+) missed, (\d+) false trigger", proc.stdout)
    assert total, proc.stdout
    performed, recognised, missed, false = map(int, total.groups())
    assert recognised == sum(bool(re.search(r"→ \w+ (entered )?\d\.\d\d, .* (after|before) it", l)) for l in lines)
    assert missed == sum("MISSED" in l for l in lines)
    assert false == sum("FALSE TRIGGER" in l for l in lines)
    assert performed == recognised + missed and performed >= len(GESTURES)


def test_demo_stops_cleanly_on_sigint():
    proc = subprocess.Popen(drape_cmd("demo"), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        for line in proc.stdout:
            if "performing" in line:
                break
        time.sleep(1.0)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=20)
    finally:
        proc.kill()
    assert proc.returncode == 0, err
    assert "stopped (SIGINT)" in out and "Traceback" not in err


def test_serial_text_protocol_through_a_pty_gives_the_replay_events(demo_model, demo_model_file, test_take, tmp_path):
    # Seconds 0–120 of the test take, as firmware would print it, plus lines a noisy cable could produce.
    n = int(120 * test_take.rate_hz)
    lines = [format_line(v) for v in test_take.freq_hz[:n]]
    bad = [b"garbage\n", b"1,2\n", b"nan,1,2,3\n", b"inf,inf,inf,inf\n"]
    for k, b in enumerate(bad):
        lines.insert(1000 + 500 * k, b)
    sent = np.array([[float(x) for x in l.split(b",")] for l in lines if l not in bad])
    from bridge.service import Settling  # `drape start` calibrates and re-settles as the service does
    expected = replay_events(Recording(test_take.rate_hz, test_take.channel_names, np.arange(len(sent)) / 100.0, sent),
                             demo_model, settle=Settling())
    expected = [e for e in expected if e.kind != "left" or e.t_s < n / test_take.rate_hz - 0.01]

    master, slave = os.openpty()
    config = tmp_path / "show.toml"
    config.write_text(f'[garment]\nname = "jacket"\nport = "{os.ttyname(slave)}"\nmodel = "{demo_model_file}"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(config)), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        assert "on " + os.ttyname(slave) in proc.stderr.readline()  # the port is open (raw mode) from here on
        data = b"".join(lines)
        for i in range(0, len(data), 4096):
            os.write(master, data[i:i + 4096])
        time.sleep(2.0)
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=20)
    finally:
        proc.kill()
        os.close(master)
        os.close(slave)
    assert proc.returncode == 0, err
    got = [l.split() for l in out.splitlines() if "confidence" in l]
    want = [[f"{e.t_s:.2f}", e.gesture, e.kind] for e in expected]
    assert [[g[0], g[2], g[3]] for g in got][: len(want)] == want
    assert len(want) >= 10
    assert "skipped 4 (malformed 1, wrong count 1, out of range 2)" in err


def test_bad_inputs_give_one_clear_message(demo_model_file, tmp_path, capsys):
    bad_map = tmp_path / "bad.toml"
    bad_map.write_text('[destinations.d]\nosc = "127.0.0.1:9000"\n\n[[rule]]\ngesture = "wave_hello"\nto = "d"\naddress = "/x"\n')
    assert main(["check", str(bad_map), "--model", str(demo_model_file)]) == 2
    err = capsys.readouterr().err
    assert f"{bad_map}:5: rule[1].gesture: unknown gesture 'wave_hello'" in err
    # A take from a 3-channel garment against a 4-channel model.
    rec = Recording(100.0, ("a", "b", "c"), np.arange(500) / 100, np.full((500, 3), 2e5))
    take = write_recording(tmp_path / "three.take", rec)
    assert main(["replay", str(take), "--model", str(demo_model_file)]) == 2
    err = capsys.readouterr().err
    assert "trained on 4 channels" in err and "source gives 3" in err and "Traceback" not in err
    assert main(["replay", str(take), "--model", str(tmp_path / "none.npz")]) == 2
    assert "no such model file" in capsys.readouterr().err
