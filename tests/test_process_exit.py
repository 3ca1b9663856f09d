"""A process that ends while its outputs are busy, without closing them, must end cleanly
(exit code 0, no fatal error from a thread still inside an output) and still let go of
what the outputs hold. MIDI on JACK and keys under Xvfb have the same check in test_midi.py
and test_keys.py."""

import os
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

HELPERS = Path(__file__).parent / "helpers"
REPO = Path(__file__).parent.parent

# ANSI E1.31-2018, data packet: byte 112 is Options; bit 6 (0x40) is Stream_Terminated.
OPTIONS_AT = 112
STREAM_TERMINATED = 0x40


class Receiver:
    """A UDP socket on 127.0.0.1 read by its own thread while the process runs (a burst
    waiting unread would overflow the socket's buffer and lose the last packets)."""

    def __init__(self):
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 1 << 20)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.settimeout(0.1)
        self.port = self.sock.getsockname()[1]
        self.packets = []
        self.done = threading.Event()
        self.thread = threading.Thread(target=self._read, daemon=True)
        self.thread.start()

    def _read(self):
        while not self.done.is_set():
            try:
                self.packets.append(self.sock.recv(2048))
            except socket.timeout:
                continue

    def close(self):
        self.done.set()
        self.thread.join(5)
        self.sock.close()


def test_ending_with_busy_osc_and_sacn_outputs_is_clean_and_terminates_the_stream():
    osc, lights = Receiver(), Receiver()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    try:
        proc = subprocess.Popen([sys.executable, "-X", "faulthandler", str(HELPERS / "busy_exit.py"),
                                 f"osc:{osc.port}", f"sacn:{lights.port}"], env=env,
                                stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            assert proc.stdout.readline().strip() == "busy", proc.stderr.read()
            out, err = proc.communicate("exit\n", timeout=30)
        finally:
            proc.kill()
        time.sleep(0.5)  # the last datagrams are on their way through the loopback
    finally:
        osc.close()
        lights.close()
    packets = lights.packets
    assert osc.packets  # the OSC side was busy too
    assert "Fatal Python error" not in err and "could not acquire lock" not in err, err[-3000:]
    assert proc.returncode == 0, err[-3000:]
    # The output's close ends the stream with three stream-terminated packets (E1.31-2018 6.2.6).
    terminated = [p for p in packets if len(p) > OPTIONS_AT and p[OPTIONS_AT] & STREAM_TERMINATED]
    assert len(terminated) == 3 and packets[-3:] == terminated
