"""The closing check of the decision-layer work: while `drape demo` runs, a user edits the
mapping; the change reaches an OSC receiver within a second, and a broken edit gives a clear
message while the last good mapping keeps sending. The receiver is python-osc's own UDP
server (an independent OSC parser) on loopback."""

import queue
import signal
import subprocess
import threading
import time

from pythonosc.dispatcher import Dispatcher
from pythonosc.osc_server import ThreadingOSCUDPServer

from conftest import ROOT, drape_cmd

CONTROL = """
[[control]]
name = "reach"
mix = { left_front = 1.0, right_front = 1.0 }
relaxed = 0.0
closest = 0.02
min_change = 0.0
max_rate_hz = 20
to = "show"
address = "{address}"
"""


def test_editing_the_demo_mapping_while_it_runs(tmp_path, demo_model_file):
    got = []  # (arrival time, address)
    d = Dispatcher()
    d.set_default_handler(lambda address, *args: got.append((time.monotonic(), address)))
    server = ThreadingOSCUDPServer(("127.0.0.1", 0), d)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    base = (ROOT / "mappings" / "demo.toml").read_text().replace("127.0.0.1:9000", f"127.0.0.1:{server.server_address[1]}")
    mapping = tmp_path / "demo.toml"
    mapping.write_text(base)
    proc = subprocess.Popen(drape_cmd("demo", "--mapping", str(mapping), "--for", "120", "--model", str(demo_model_file)),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    err_lines: queue.Queue = queue.Queue()
    threading.Thread(target=lambda: [err_lines.put(l) for l in proc.stderr], daemon=True).start()
    try:
        for line in proc.stdout:
            if "performing" in line:
                break
        threading.Thread(target=lambda: [None for _ in proc.stdout], daemon=True).start()
        time.sleep(0.5)
        # 1. a good edit: a continuous control appears; measure save → first message
        saved = time.monotonic()
        mapping.write_text(base + CONTROL.replace("{address}", "/drape/test/reach"))
        while time.monotonic() - saved < 5 and not any(a == "/drape/test/reach" for _, a in got):
            time.sleep(0.01)
        first = min(t for t, a in got if a == "/drape/test/reach")
        print(f"edit to first message: {(first - saved) * 1e3:.0f} ms")
        assert first - saved < 1.0
        # 2. a broken edit (an OSC address without "/"): a clear message, the old mapping keeps sending
        mapping.write_text(base + CONTROL.replace("{address}", "drape/test/broken"))
        saved = time.monotonic()
        message = ""
        while time.monotonic() - saved < 5:
            try:
                line = err_lines.get(timeout=0.1)
            except queue.Empty:
                continue
            if "mapping not reloaded" in line:
                message = line + err_lines.get(timeout=1)
                break
        print(message)
        assert time.monotonic() - saved < 1.0 + 0.2
        assert "the last good one keeps running" in message
        assert f"{mapping}:" in message and "control[1].address: OSC addresses start with '/'" in message
        n = len(got)
        time.sleep(0.5)
        assert any(a == "/drape/test/reach" for _, a in got[n:])   # still the last good mapping
        # 3. fixed again, replaced atomically as many editors do
        tmp = tmp_path / ".demo.toml.swp"
        tmp.write_text(base + CONTROL.replace("{address}", "/drape/test/fixed"))
        saved = time.monotonic()
        tmp.replace(mapping)
        while time.monotonic() - saved < 5 and not any(a == "/drape/test/fixed" for _, a in got):
            time.sleep(0.01)
        assert min(t for t, a in got if a == "/drape/test/fixed") - saved < 1.0
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=20)
    finally:
        proc.kill()
        server.shutdown()
        server.server_close()
    assert proc.returncode == 0
