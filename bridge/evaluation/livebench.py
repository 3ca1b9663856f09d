"""`drape bench --live`: garments on pseudo-terminals, through the daemon, out to loopback OSC.

What runs is what a user runs: `drape start` (a process of its own) with a config of
``garments`` [[garment]] tables, so the service loop with one reader per serial source. Each
garment's port is a pseudo-terminal this process writes the simulated jacket's text lines to
in real time, 100 lines a second, each garment at its own phase (garments are not in step).
Each garment's mapping has the demo cues and a continuous control sending every sample, so
hundreds of OSC datagrams a second come back to a UDP socket here.

Figures (wall clock unless said):
- arrival → send: the daemon's own overhead, from the host time a block's last sample came
  out of the port to the hand-over of its messages to the outputs, per continuous-control
  event (``drape start --timings``); median, p99 and jitter (p99 − median).
- line written → datagram received: what a listener sees, an upper bound on the above plus
  the pseudo-terminal and the loopback socket (this process's own scheduling included).
- CPU of the daemon process while streaming (utime + stime from /proc), as % of one core.
- the daemon's memory peak (VmHWM, Linux).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

LIVE_P99_TARGET_MS = 2.0       # arrival → send, p99, over a 10-minute run
LIVE_JITTER_TARGET_MS = 1.0    # continuous control: p99 − median (on an idle core)
LIVE_CPU_TARGET_PERCENT = 25.0  # four garments in one daemon, % of one core
LIVE_MEMORY_TARGET_MB = 150.0  # four garments

CONTROL_TOML = """
[[control]]
name = "reach"
mix = {{ left_sleeve = 1.0, right_sleeve = 0.5 }}
relaxed = 0.0
closest = 0.05
min_change = 0.0
max_rate_hz = 1000
to = "show"
address = "/bench/{name}/reach"
"""


def load_average() -> str:
    try:
        return " ".join(open("/proc/loadavg").read().split()[:3])
    except OSError:
        return "?"


def _cpu_s(pid: int) -> tuple[float, float]:
    """(user, system) CPU time of a process, s (Linux; NaN elsewhere)."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        tick = os.sysconf("SC_CLK_TCK")
        return int(fields[11]) / tick, int(fields[12]) / tick
    except (OSError, IndexError, ValueError):
        return float("nan"), float("nan")


def _memory_peak_mb(pid: int) -> float:
    import re
    try:
        return float(re.search(r"VmHWM:\s+(\d+)", Path(f"/proc/{pid}/status").read_text()).group(1)) / 1024
    except (OSError, AttributeError):
        return float("nan")


def _free_udp_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _streams(garments: int, seconds: float) -> list[np.ndarray]:
    """Each garment's frequencies, Hz, (n, 4): the simulated wearer the model knows, other takes."""
    from ..sources.simulated import SimulatedSource
    out = []
    for i in range(garments):
        src = SimulatedSource(seed=2 + i, wearer=0, session=2, realtime=False, block_s=5.0, duration_s=seconds)
        blocks = []
        while not src.ended:
            blocks.append(src.read().freq_hz)
        out.append(np.concatenate(blocks))
    return out


class _Listener(threading.Thread):
    """Receive times of OSC datagrams, by the garment named in their address."""

    def __init__(self, sock: socket.socket, names: list[str]):
        super().__init__(daemon=True, name="bench-listener")
        self.sock, self.names = sock, [n.encode() for n in names]
        self.got: list[tuple[int, float]] = []
        self.halt = False

    def run(self) -> None:
        self.sock.settimeout(0.2)
        while not self.halt:
            try:
                data = self.sock.recv(2048)
            except socket.timeout:
                continue
            except OSError:
                return
            now = time.monotonic()
            parts = data.split(b"\0", 1)[0].split(b"/")
            if len(parts) > 2 and parts[1] == b"bench":
                self.got.append((self.names.index(parts[2]) if parts[2] in self.names else -1, now))


def _percentiles(ms: np.ndarray) -> dict:
    if ms.size == 0:
        return {"n": 0, "median_ms": None, "p99_ms": None, "jitter_ms": None, "max_ms": None}
    med, p99 = float(np.median(ms)), float(np.percentile(ms, 99))
    return {"n": int(ms.size), "median_ms": round(med, 3), "p99_ms": round(p99, 3),
            "jitter_ms": round(p99 - med, 3), "max_ms": round(float(ms.max()), 3)}


def bench_live(seconds: float = 30.0, print_fn=print, garments: int = 4, daemon=None) -> dict:
    """Run the live bench (see the module docstring); returns its figures as a dict.

    daemon: the command that runs ``drape`` (default: this Python, ``-m bridge``), e.g. a
    wrapper that profiles it (benchmarks/live_profile.py)."""
    from ..examples_data import example_text
    from ..sources import format_line
    from .simulated import train_simulated

    say = print_fn or (lambda *a, **k: None)
    load_before = load_average()
    names = [f"g{i + 1}" for i in range(garments)]
    streams = _streams(garments, seconds)
    rate_hz = 100.0
    n = min(len(s) for s in streams)
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 1 << 20)
    listener = _Listener(sock, names)
    listener.start()
    ptys = [os.openpty() for _ in range(garments)]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        train_simulated(1, 0).save(tmp / "jacket.npz")
        demo = example_text("demo.toml").replace("127.0.0.1:9000", f"127.0.0.1:{sock.getsockname()[1]}")
        config = [f'[control]\nlisten = "127.0.0.1:{_free_udp_port()}"\n']
        for name, (_, slave) in zip(names, ptys):
            (tmp / f"{name}.toml").write_text(demo + CONTROL_TOML.format(name=name), encoding="utf-8")
            config.append(f'[[garment]]\nname = "{name}"\nport = "{os.ttyname(slave)}"\nmodel = "jacket.npz"\n'
                          f'mapping = "{name}.toml"\nprotocol = "text"\n')
        (tmp / "live.toml").write_text("\n".join(config), encoding="utf-8")
        timings_path = tmp / "timings.npz"
        proc = subprocess.Popen([*(daemon or [sys.executable, "-m", "bridge"]), "start", "--config", str(tmp / "live.toml"),
                                 "--timings", str(timings_path)],
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        log: list[str] = []
        ready = threading.Event()

        def drain() -> None:  # the daemon's log, read on so its pipe never fills
            for line in proc.stderr:
                log.append(line)
                if "running" in line and "garment" in line:
                    ready.set()
            ready.set()

        threading.Thread(target=drain, daemon=True, name="bench-log").start()
        writes = np.full((garments, n), np.nan)
        try:
            if not ready.wait(120) or proc.poll() is not None:
                raise RuntimeError("the daemon did not start:\n" + "".join(log[-20:]))
            lines = [[format_line(v) for v in s[:n]] for s in streams]
            # each garment at its own phase within the sample period
            due = [(k + g / garments) / rate_hz for k in range(n) for g in range(garments)]
            t0 = time.monotonic() + 0.05
            cpu0, wall0 = _cpu_s(proc.pid), time.monotonic()
            for j, d in enumerate(due):
                k, g = divmod(j, garments)
                delay = t0 + d - time.monotonic()
                if delay > 0:
                    time.sleep(delay)
                os.write(ptys[g][0], lines[g][k])
                writes[g, k] = time.monotonic()
            time.sleep(0.3)  # the last lines' messages
            cpu1, wall1 = _cpu_s(proc.pid), time.monotonic()
            hwm = _memory_peak_mb(proc.pid)
            proc.terminate()
            proc.wait(timeout=30)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
            listener.halt = True
            listener.join(timeout=2)
            sock.close()
            for m, s in ptys:
                os.close(m)
                os.close(s)
        if not timings_path.is_file():
            raise RuntimeError("the daemon wrote no timings:\n" + "".join(log[-20:]))
        with np.load(timings_path, allow_pickle=False) as z:
            t = {k: z[k] for k in z.files}
    load_after = load_average()

    control = t["controls"] > 0
    per_event = np.repeat((t["sent_s"] - t["arrived_s"])[control] * 1e3, t["controls"][control].astype(int))
    cues = ((t["sent_s"] - t["arrived_s"]) * 1e3)[t["others"] > 0]
    loop_cpu = t["loop_cpu_s"][control] * 1e3 if "loop_cpu_s" in t else np.empty(0)
    loop_cpu = loop_cpu[np.isfinite(loop_cpu)]
    received = []
    for g, at in listener.got:
        if g < 0:
            continue
        i = np.searchsorted(writes[g], at) - 1
        if i >= 0:
            received.append((at - writes[g, i]) * 1e3)
    e2e = np.array(received)
    user_s, system_s = cpu1[0] - cpu0[0], cpu1[1] - cpu0[1]
    cpu1, cpu0 = sum(cpu1), sum(cpu0)
    cpu_percent = 100.0 * (cpu1 - cpu0) / (wall1 - wall0)
    r = {"seconds": seconds, "garments": garments, "samples_written": int(garments * n),
         "datagrams": len(listener.got), "control_events": int(per_event.size),
         "arrival_to_send": _percentiles(per_event), "cue_arrival_to_send": _percentiles(cues),
         "loop_cpu_to_send": _percentiles(loop_cpu),
         "written_to_received": _percentiles(e2e),
         "cpu_percent_of_core": round(cpu_percent, 1), "cpu_s": round(cpu1 - cpu0, 2),
         "cpu_user_s": round(user_s, 2), "cpu_system_s": round(system_s, 2),
         "cpu_us_per_sample": round(1e6 * (cpu1 - cpu0) / max(1, garments * n), 1),
         "memory_peak_mb": round(hwm, 1), "timings_not_kept": int(t["beyond"]),
         "load_before": load_before, "load_after": load_after}
    # the earlier result keys, kept for callers of the single figure
    r.update(events=int(cues.size), overhead_median_ms=r["arrival_to_send"]["median_ms"],
             overhead_p99_ms=r["arrival_to_send"]["p99_ms"], end_to_end_median_ms=r["written_to_received"]["median_ms"],
             end_to_end_p99_ms=r["written_to_received"]["p99_ms"])
    a, c, w = r["arrival_to_send"], r["cue_arrival_to_send"], r["written_to_received"]

    def mark(value, target):
        return "n/a" if value is None else ("met" if value <= target else "NOT met")

    say(f"live through a pty: {garments} garments in one `drape start`, {seconds:g} s, {r['samples_written']} "
        f"lines written, {r['datagrams']} OSC datagrams received; load average {load_before} before, "
        f"{load_after} after, on {os.cpu_count()} CPUs")
    say(f"  arrival → send, continuous control: median {a['median_ms']} ms, p99 {a['p99_ms']} ms "
        f"(target ≤ {LIVE_P99_TARGET_MS:g} ms: {mark(a['p99_ms'], LIVE_P99_TARGET_MS)}), max {a['max_ms']} ms; "
        f"{a['n']} events")
    say(f"  continuous-control jitter, p99 − median: {a['jitter_ms']} ms "
        f"(target ≤ {LIVE_JITTER_TARGET_MS:g} ms on an idle core: {mark(a['jitter_ms'], LIVE_JITTER_TARGET_MS)}); "
        f"{a['n']} events")
    lc = r["loop_cpu_to_send"]
    say(f"  the loop's own CPU time from taking a block to handing its control message over: median "
        f"{lc['median_ms']} ms, p99 {lc['p99_ms']} ms; {lc['n']} deliveries (the rest of arrival → send is waiting: "
        f"for the loop to wake, to be scheduled, for the GIL)")
    say(f"  arrival → send, cues (gestures, postures): median {c['median_ms']} ms, p99 {c['p99_ms']} ms; "
        f"{c['n']} deliveries")
    say(f"  line written → datagram received: median {w['median_ms']} ms, p99 {w['p99_ms']} ms, "
        f"p99 − median {w['jitter_ms']} ms; {w['n']} datagrams")
    say(f"  daemon CPU while streaming: {r['cpu_percent_of_core']} % of one core "
        f"(target < {LIVE_CPU_TARGET_PERCENT:g} % for 4 garments"
        + (f": {'met' if cpu_percent < LIVE_CPU_TARGET_PERCENT else 'NOT met'})" if garments == 4 else ", not 4 here)")
        + f", {r['cpu_us_per_sample']} µs per sample (user {r['cpu_user_s']} s, system {r['cpu_system_s']} s "
        f"of {wall1 - wall0:.0f} s); memory peak {r['memory_peak_mb']} MB "
        f"(target ≤ {LIVE_MEMORY_TARGET_MB:g} MB for 4 garments; it includes the timing record, 48 bytes per "
        f"delivery: {48 * (t['sent_s'].size) / 2 ** 20:.1f} MB here)")
    if r["timings_not_kept"]:
        say(f"  ({r['timings_not_kept']} deliveries beyond the daemon's timing record are not in the figures)")
    return r
