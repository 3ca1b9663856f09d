"""Messages per second through each output's queue, and what a dead destination costs.

    python benchmarks/outputs_throughput.py [--count N]

Figures only; nothing here passes or fails. Everything goes to this machine (127.0.0.1).
"""

from __future__ import annotations

import argparse
import socket
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bridge.mapping.messages import KeyAction, LightLevels, MidiNote, OscMessage  # noqa: E402
from bridge.outputs import OscTcpOutput, OscUdpOutput, QueuedOutput  # noqa: E402
from bridge.outputs.keys import Keyboard, KeyOutput  # noqa: E402
from bridge.outputs.midi import MidiFileOutput  # noqa: E402
from bridge.outputs.sacn import SacnOutput  # noqa: E402


def _sink_udp():
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    s.bind(("127.0.0.1", 0))
    return s


def _reading_tcp_peer():
    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen(4)

    def serve():
        try:
            while True:
                c, _ = listener.accept()
                threading.Thread(target=lambda: [None for _ in iter(lambda: c.recv(65536), b"")], daemon=True).start()
        except OSError:
            pass
    threading.Thread(target=serve, daemon=True).start()
    return listener


def _silent_tcp_peer():
    listener = socket.socket()
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    listener.bind(("127.0.0.1", 0))
    listener.listen(8)
    held = []

    def serve():
        try:
            while True:
                held.append(listener.accept()[0])  # accepted, never read
        except OSError:
            pass
    threading.Thread(target=serve, daemon=True).start()
    return listener


class NullKeyboard(Keyboard):
    def press(self, key):
        pass

    def release(self, key):
        pass


def through_queue(label, inner, messages):
    """Hand every message to the queue as fast as possible; report delivery rate and send() cost."""
    out = QueuedOutput(inner, capacity=len(messages))
    t0 = time.perf_counter()
    worst = 0.0
    for m in messages:
        a = time.perf_counter()
        out.send(m)
        worst = max(worst, time.perf_counter() - a)
    handed = time.perf_counter() - t0
    while out.stats.sent + out.stats.dropped < len(messages) and time.perf_counter() - t0 < 60:
        time.sleep(0.001)
    delivered = time.perf_counter() - t0
    out.close(drain_s=1.0)
    print(f"{label:<28} {out.stats.sent / delivered:>10,.0f} msg/s delivered   "
          f"send() {handed / len(messages) * 1e6:5.1f} µs mean, {worst * 1e6:7.1f} µs worst   "
          f"dropped {out.stats.dropped}")


def dead_destination(label, inner, message, count, rate_hz):
    """Send at a fixed rate to a destination that does not take the data; report what it cost."""
    out = QueuedOutput(inner, capacity=256)
    worst = 0.0
    t0 = time.perf_counter()
    for i in range(count):
        a = time.perf_counter()
        out.send(message)
        worst = max(worst, time.perf_counter() - a)
        delay = t0 + (i + 1) / rate_hz - time.perf_counter()
        if delay > 0:
            time.sleep(delay)
    c0 = time.perf_counter()
    out.close(drain_s=0.5, join_s=3.0)
    closed = time.perf_counter() - c0
    s = out.stats
    print(f"{label:<28} {count} sent at {rate_hz} Hz: send() worst {worst * 1e6:7.1f} µs, delivered {s.sent}, "
          f"dropped {s.dropped} ({s.overflowed} queue full), close {closed:.2f} s; last error: {s.last_error}")


def _optional_backends(n: int) -> None:
    """A MIDI virtual port through a JACK server and keys through pynput, where this machine can."""
    import os
    import shutil
    import subprocess
    if shutil.which("jackd"):
        env = dict(os.environ, JACK_NO_START_SERVER="1")
        jack = subprocess.Popen(["jackd", "--no-realtime", "-d", "dummy", "-r", "48000", "-p", "2048"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
        os.environ["JACK_NO_START_SERVER"] = "1"
        try:
            from bridge.outputs.midi import MidiPortOutput
            port = None
            for _ in range(50):
                try:
                    port = MidiPortOutput("jack", "bench", virtual=True, api="mido.backends.rtmidi/UNIX_JACK")
                    break
                except Exception:
                    time.sleep(0.1)
            if port is not None:
                through_queue("midi virtual port (JACK)", port,
                              [MidiNote(1, 36 + i % 64, 100, on=bool(i % 2 == 0)) for i in range(n)])
        finally:
            jack.terminate()
            jack.wait(5)
    else:
        print("midi virtual port (JACK)     skipped: no jackd")
    if os.environ.get("DISPLAY"):
        from bridge.outputs.keys import PynputKeyboard
        through_queue("keys (pynput, X11)", KeyOutput("keys", PynputKeyboard()),
                      [KeyAction(("f12",)) for _ in range(min(n, 2000))])
    else:
        print("keys (pynput, X11)           skipped: no DISPLAY (try under Xvfb)")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--count", type=int, default=20000)
    a = ap.parse_args()
    n = a.count
    print(f"{n} messages per output, queue as long as the burst (nothing dropped for lack of room)\n")

    sink = _sink_udp()
    through_queue("osc udp", OscUdpOutput("udp", "127.0.0.1", sink.getsockname()[1]),
                  [OscMessage("/drape/cue/next", ("raise_right", 0.93)) for _ in range(n)])
    peer = _reading_tcp_peer()
    through_queue("osc tcp (slip)", OscTcpOutput("tcp", "127.0.0.1", peer.getsockname()[1]),
                  [OscMessage("/drape/cue/next", ("raise_right", 0.93)) for _ in range(n)])
    with tempfile.TemporaryDirectory() as tmp:
        through_queue("midi file", MidiFileOutput("file", Path(tmp) / "bench.mid"),
                      [MidiNote(1 + i % 16, 36 + i % 64, 100, on=bool(i % 2 == 0)) for i in range(n)])
    through_queue("sacn unicast (638 B)", SacnOutput("light", host="127.0.0.1", port=sink.getsockname()[1]),
                  [LightLevels(1, {1 + i % 512: i % 256}) for i in range(n)])
    through_queue("keys (no-op keyboard)", KeyOutput("keys", NullKeyboard()),
                  [KeyAction(("ctrl", "s")) for _ in range(n)])

    _optional_backends(min(n, 5000))

    print("\nA dead destination: 2000 messages at 500 Hz (queue of 256)\n")
    silent = _silent_tcp_peer()
    dead_destination("osc tcp, peer never reads",
                     OscTcpOutput("tcp", "127.0.0.1", silent.getsockname()[1], send_timeout_s=1.0),
                     OscMessage("/drape/blob", ("x" * 2000,)), 2000, 500)
    refused = socket.socket()
    refused.bind(("127.0.0.1", 0))
    port = refused.getsockname()[1]
    refused.close()  # nothing listens on this port now
    dead_destination("osc tcp, connection refused", OscTcpOutput("tcp", "127.0.0.1", port),
                     OscMessage("/drape/cue/next", (1,)), 2000, 500)
    peer.close()
    silent.close()
    sink.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
