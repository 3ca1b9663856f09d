"""Samples per second each serial protocol sustains through a pseudo-terminal, and the time
from a garment coming back (socat pty pair recreated) to its first sample.

    python benchmarks/acquisition_throughput.py [--seconds 3] [--channels 4]

Figures depend on the machine and its load; the pty has no baud-rate limit, so these are the
parser's ceilings, not a USB link's (a real 115200-baud link carries about 11,520 bytes/s).
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

from bridge.sources.frames import encode_frame
from bridge.sources.reconnect import Backoff, ReconnectingSource
from bridge.sources.serialport import SerialSource
from bridge.sources.textline import format_line


def throughput(protocol: str, seconds: float, channels: int) -> tuple[float, int]:
    master, slave = os.openpty()
    name = os.ttyname(slave)
    src = SerialSource(name, channels, 100.0, protocol=protocol, resample=False)
    vals = 1e5 + np.arange(channels) * 5e4
    chunk = b"".join((encode_frame(i, i / 100, vals) if protocol == "frames" else format_line(vals, i / 100))
                     for i in range(2000))
    done = threading.Event()

    def device():
        while not done.is_set():
            os.write(master, chunk)  # blocks when the pty buffer is full: paced by the reader

    threading.Thread(target=device, daemon=True).start()
    n, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < seconds:
        n += len(src.read())
    rate = n / (time.perf_counter() - t0)
    done.set()
    bad = src.counters()
    src.close()
    os.close(slave)
    os.close(master)
    return rate, len(chunk) // 2000


def reconnect_ms(trials: int = 5) -> list[float]:
    if shutil.which("socat") is None:
        return []
    folder = Path(tempfile.mkdtemp())
    dev, host = folder / "garment", folder / "drape"
    out = []

    def plug():
        p = subprocess.Popen(["socat", f"pty,raw,echo=0,link={dev}", f"pty,raw,echo=0,link={host}"],
                             stderr=subprocess.DEVNULL)
        while not (dev.exists() and host.exists()):
            time.sleep(0.001)
        return p, os.open(dev, os.O_RDWR | os.O_NOCTTY)

    proc, fd = plug()
    src = ReconnectingSource(lambda: SerialSource(str(host), 2, 100.0, protocol="text"), 100.0, ("a", "b"),
                             Backoff(0.05, 2.0, 1.0))
    for _ in range(trials):
        os.write(fd, b"1000,2000\n" * 5)
        while not len(src.read()):
            pass
        os.close(fd)
        proc.terminate()
        proc.wait()
        while src.connected:
            src.read()
        time.sleep(0.5)  # the garment stays away a while; backoff grows meanwhile
        proc, fd = plug()
        t0 = time.perf_counter()
        while True:
            os.write(fd, b"1000,2000\n")  # the garment streams at 100 Hz-ish as soon as it is back
            if len(src.read()):
                break
            time.sleep(0.01)
        out.append((time.perf_counter() - t0) * 1e3)
    src.close()
    os.close(fd)
    proc.terminate()
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=3.0)
    ap.add_argument("--channels", type=int, default=4)
    a = ap.parse_args()
    for protocol in ("text", "frames"):
        rate, size = throughput(protocol, a.seconds, a.channels)
        print(f"{protocol:6}: {rate:9.0f} samples/s through a pty ({a.channels} channels, {size} bytes per sample)")
    ms = reconnect_ms()
    if ms:
        print(f"replug: first sample {np.median(ms):.0f} ms (median of {len(ms)}; max {max(ms):.0f} ms) "
              "after the device came back, with a backoff of at most 1 s")
    else:
        print("replug: socat not installed, not measured")


if __name__ == "__main__":
    main()
