"""Faults a show can meet, each with the behaviour docs/faults.md promises.

Where a fault already has an honest test elsewhere, docs/faults.md names that test and this
file does not repeat it. Waits are on conditions with generous timeouts, never on fixed
sleeps alone, so a loaded machine only makes these tests slower, not flaky. Behaviour here
is of our own design unless a comment names a source.
"""

import errno
import os
import queue
import shutil
import subprocess
import threading
import time

import numpy as np
import pytest

from bridge.mapping import parse_mapping
from bridge.outputs import QueuedOutput
from bridge.outputs.base import Output
from bridge.outputs.osc import OscTcpOutput
from bridge.recognition.classifiers import fit_cases
from bridge.recognition.windows import WindowSpec
from bridge.service import Pipeline, StopFlag, run
from bridge.signal import BandPass
from bridge.sources.base import Block, Source
from bridge.sources.frames import encode_frame
from bridge.sources.protocols import StreamDecoder
from bridge.sources.reconnect import Backoff, ReconnectingSource
from bridge.sources.serialport import SerialSource
from bridge.sources.textline import format_line

CHANNELS = ("hem_left", "hem_right")

CONTROL_MAPPING = """\
[destinations.desk]
osc = "127.0.0.1:9"

[[control]]
name = "reach"
mix = {{ hem_left = 1.0, hem_right = 1.0 }}
relaxed = 0.0
closest = 0.5
min_change = 0.0
max_rate_hz = 1000
to = "{to}"
address = "/reach"
"""


def wait_for(condition, timeout_s=20.0, what="condition"):
    """Poll ``condition`` until true; fail after ``timeout_s`` (generous: the machine may be loaded)."""
    end = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > end:
            pytest.fail(f"timed out after {timeout_s:g} s waiting for {what}")
        time.sleep(0.01)


@pytest.fixture(scope="module")
def tiny_model():
    """A two-channel linear model fitted on noise in a second: enough to run the whole chain
    (conditioning, windows, gate, controls); it is not meant to recognise anything."""
    rng = np.random.default_rng(0)
    spec = WindowSpec(100.0, 0.5, 0.1)
    X = rng.normal(size=(12, 2, spec.length))
    y = ["a"] * 6 + ["null"] * 6
    return fit_cases("linear", X, y, ["a"], rate_hz=100.0, windows=spec, conditioning=BandPass(100.0),
                     channel_names=CHANNELS, stream="level")


def control_mapping(model, to="desk"):
    return parse_mapping(CONTROL_MAPPING.format(to=to), "faults.toml", model.classes, model.kinds, CHANNELS)


def jacket_like(n, seed=0):
    """n samples of two resting oscillators with a slow sway (Hz): our own demo-style data."""
    k = np.arange(n)
    rng = np.random.default_rng(seed)
    sway = 1 + 0.004 * np.sin(k / 40.0)[:, None] + rng.normal(0, 2e-5, (n, 2))
    return np.array([181000.0, 252000.0]) * sway


class Recorder(Output):
    def __init__(self, name="desk"):
        super().__init__(name)
        self.got = []

    def send(self, message):
        self.got.append(message)
        return True


class BlockSource(Source):
    """Hands out a list of frequency blocks, one per read, then ends."""

    def __init__(self, blocks, rate_hz=100.0):
        self.rate_hz, self.channel_names = rate_hz, CHANNELS
        self.blocks = list(blocks)
        self.i = 0

    def read(self):
        f = self.blocks[self.i]
        self.i += 1
        self.ended = self.i >= len(self.blocks)
        return Block(np.arange(len(f)) / self.rate_hz, f, time.monotonic())


# -- 2. garbage bytes on the line --------------------------------------------------------------

def _loop_source(**kw):
    """A SerialSource on pyserial's loop:// port: what is written is read back (pyserial 3.5
    URL handler), so a test can play the garment without a pty."""
    return SerialSource("loop://", rate_hz=100.0, timeout_s=0.01, **kw)


def _play(src, data, n, timeout_s=20.0):
    """Write ``data`` into the loop port a little at a time (its buffer holds 4096 bytes) and
    read until ``n`` samples came out; returns (t_s, freq_hz) of what was read."""
    got = []
    end = time.monotonic() + timeout_s
    while sum(len(b) for b in got) < n and time.monotonic() < end:
        if data:
            src.serial.write(data[:1024])
            data = data[1024:]
        b = src.read()
        if len(b):
            got.append(b)
    if not got:
        return np.empty(0), np.empty((0, 0))
    return np.concatenate([b.t_s for b in got]), np.concatenate([b.freq_hz for b in got])


def test_garbage_before_the_stream_does_not_stop_protocol_detection():
    # A board that prints boot noise (or was plugged in at another baud rate) before its
    # lines: the protocol is still told from the lines that follow, the noise is counted.
    rng = np.random.default_rng(2)
    noise = bytes(rng.integers(0, 256, 300, dtype=np.uint8)).replace(b"\x00", b"\x01") + b"\n"
    vals = jacket_like(200)
    lines = b"".join(format_line(v) for v in vals)
    dec = StreamDecoder("auto", n_channels=2)
    out = []
    for i in range(0, len(noise + lines), 97):
        out += dec.feed((noise + lines)[i:i + 97])
    assert dec.protocol == "text"
    got = np.array([v for _, v in out])
    np.testing.assert_allclose(got, np.round(vals, 1))
    c = dec.counters()
    assert c["good"] == 200 and c["malformed"] + c["wrong_count"] + c["out_of_range"] >= 1


@pytest.mark.parametrize("protocol", ["text", "frames"])
def test_garbage_between_samples_is_counted_and_every_good_sample_arrives(protocol):
    rng = np.random.default_rng(3)
    vals = jacket_like(400)
    chunks, garbage = [], 0
    for i, v in enumerate(vals):
        chunks.append(format_line(v) if protocol == "text" else encode_frame(i, i / 100, v))
        if i % 50 == 25:  # a burst of line noise: random bytes, ended the way each protocol ends a unit
            junk = bytes(rng.integers(1, 256, 40, dtype=np.uint8))
            chunks.append(junk.replace(b"\n", b"x") + b"\n" if protocol == "text" else junk + b"\x00")
            garbage += 1
    src = _loop_source(n_channels=2, protocol=protocol, resample=False)
    try:
        _, f = _play(src, b"".join(chunks), len(vals))
        c = src.counters()
    finally:
        src.close()
    assert f.shape == (400, 2)
    np.testing.assert_allclose(f, np.round(vals, 1) if protocol == "text" else vals.astype(np.float32), rtol=1e-7)
    assert c["good"] == 400
    if protocol == "text":
        assert c["malformed"] + c["wrong_count"] + c["out_of_range"] == garbage
    else:  # the CRC-16 catches every damaged frame; no sequence number goes missing
        assert c["corrupt"] == garbage and c["dropped"] == 0


# -- 5. device clock jumps ---------------------------------------------------------------------

def test_device_clock_jumping_back_and_forward_is_counted_and_never_interpolated_across():
    # Device times 0.00–0.99 s, then back to 0.50 s (the board restarted), then on to 1000 s
    # (a clock that leapt): every sample arrives once, on its own time, and two jumps are counted.
    t = np.concatenate([np.arange(100), 50 + np.arange(50), 100000 + np.arange(50)]) / 100.0
    vals = jacket_like(200, seed=5)
    src = _loop_source(n_channels=2, protocol="text", timestamp=True, resample=True)
    try:
        got_t, got_f = _play(src, b"".join(format_line(v, ti) for ti, v in zip(t, vals)), 200)
        c = src.counters()
    finally:
        src.close()
    assert got_f.shape == (200, 2)
    np.testing.assert_allclose(got_f, np.round(vals, 1))  # the same values: nothing made up across a jump
    np.testing.assert_allclose(got_t, t, atol=1e-6)
    assert c["jumps"] == 2 and c["gaps"] == 0
    assert src.resampler.restarts == 2


def test_a_board_restart_is_a_jump_not_sixty_five_thousand_dropped_frames():
    # Frames: sequence and device time both start again at 0 when the board restarts.
    vals = jacket_like(300, seed=6)
    seq = np.concatenate([np.arange(200), np.arange(100)])
    t = np.concatenate([30 + np.arange(200) / 100, np.arange(100) / 100])  # 30 s uptime, then a restart
    src = _loop_source(n_channels=2, protocol="frames", resample=True)
    try:
        _, f = _play(src, b"".join(encode_frame(int(s), ti, v) for s, ti, v in zip(seq, t, vals)), 300)
        c = src.counters()
    finally:
        src.close()
    assert f.shape == (300, 2) and c["good"] == 300
    assert c["jumps"] == 1 and c["restarts"] == 1
    assert c["dropped"] == 0  # nothing was lost: the sequence started again


# -- 6. NaN, inf and absurd values --------------------------------------------------------------

@pytest.mark.parametrize("bad", [float("nan"), float("inf"), 0.0, -5.0, 1.0, 1e-30, 5e8])
def test_absurd_values_are_skipped_and_leave_no_trace(tiny_model, bad):
    # One bad sample among good ones (also in the very first block, before the resting level
    # is known). Skipped, counted, and the chain's output is exactly that of the clean stream:
    # a falling frequency has no bound in ΔC/C0 = (f0/f)² − 1, so before the fix one counted
    # 1 Hz left the conditioner's state at 1e9 and the garment deaf for the rest of the show.
    clean = jacket_like(1200, seed=7)
    where = [3, 450, 451, 900]
    dirty = clean.copy()
    for k, i in enumerate(where):
        dirty = np.insert(dirty, i + k, [bad, clean[i, 1]] if k % 2 else [bad, bad], axis=0)

    def controls(f):
        p = Pipeline(tiny_model, control_mapping(tiny_model))
        ev = []
        for i in range(0, len(f), 10):
            ev += p.feed(f[i:i + 10])
        return p, [(e.t_s, e.level) for e in ev if e.kind == "control"]

    p_clean, want = controls(clean)
    p_dirty, got = controls(dirty)
    assert p_dirty.skipped == len(where) and p_clean.skipped == 0
    assert len(got) == 1200 and got == want
    np.testing.assert_array_equal(p_dirty.conditioner.state.baseline, p_clean.conditioner.state.baseline)


# -- 7. a destination that is down, or stuck --------------------------------------------------

class Stuck(Output):
    """A destination whose send never returns until released (a hung socket, a frozen driver)."""

    def __init__(self):
        super().__init__("desk")
        self.entered = threading.Event()
        self.go = threading.Event()

    def _send(self, message):
        self.entered.set()
        self.go.wait()

    def close(self):
        pass


def test_a_stuck_and_a_refusing_destination_never_hold_up_the_loop(tiny_model):
    # The loop sends one control message per sample to a destination that hangs and to an
    # OSC-over-TCP destination whose host refuses connections. Every sample is processed,
    # nothing waits, and every message offered is accounted for: sent, dropped or waiting.
    import socket
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()  # nothing listens on this port now: connections are refused
    text = CONTROL_MAPPING.format(to="desk") + f"""
[destinations.tcp]
osc_tcp = "127.0.0.1:{port}"

[[control]]
name = "reach_too"
mix = {{ hem_left = 1.0 }}
relaxed = 0.0
closest = 0.5
min_change = 0.0
max_rate_hz = 1000
to = "tcp"
address = "/reach"
"""
    mapping = parse_mapping(text, "faults.toml", tiny_model.classes, tiny_model.kinds, CHANNELS)
    stuck = Stuck()
    outputs = {"desk": QueuedOutput(stuck, capacity=16),
               "tcp": QueuedOutput(OscTcpOutput("tcp", "127.0.0.1", port, connect_timeout_s=0.5), capacity=16)}
    n_blocks = 300
    source = BlockSource(np.split(jacket_like(n_blocks * 10, seed=8), n_blocks))
    done = threading.Event()
    result = {}

    def loop():
        result["stats"] = run(source, Pipeline(tiny_model, mapping), outputs, StopFlag())
        done.set()

    threading.Thread(target=loop, daemon=True).start()
    wait_for(done.is_set, 60, "the loop to finish while a destination hangs")
    assert stuck.entered.is_set() and not stuck.go.is_set()  # the destination really is hung
    stats = result["stats"]
    assert stats.samples == n_blocks * 10 and stats.controls == 2 * n_blocks * 10
    desk = outputs["desk"]
    # one message inside the hung send, up to 16 waiting, the rest dropped as the queue overflowed
    assert desk.stats.sent == 0 and desk.pending() <= 16
    assert desk.stats.overflowed == desk.stats.dropped == n_blocks * 10 - 1 - desk.pending()
    assert "queue full" in desk.stats.last_error
    tcp = outputs["tcp"]
    wait_for(lambda: tcp.pending() == 0, 30, "the refusing destination's queue to drain")
    assert tcp.stats.sent == 0 and tcp.stats.dropped == n_blocks * 10  # nobody listens: each one counted
    print(f"stuck destination: {desk.stats.dropped} of {n_blocks * 10} dropped; "
          f"refusing destination: {tcp.stats.dropped} dropped, last error {tcp.stats.last_error!r}")
    stuck.go.set()
    for o in outputs.values():
        o.close()


# -- 4. bursts in the daemon: a reader that cannot keep up drops and counts -------------------

def test_a_daemon_reader_with_a_full_queue_drops_blocks_and_counts_their_samples():
    from bridge.service.daemon import Reader
    blocks = [jacket_like(10, seed=i) for i in range(20)]
    q = queue.Queue(maxsize=3)
    r = Reader(0, BlockSource(blocks), q)
    r.start()
    r.join(20)
    assert not r.is_alive() and r.error == ""
    assert q.qsize() == 3 and r.dropped == 17 * 10  # the loop keeps the oldest three, the rest are counted


# -- 11. disk full while capturing ---------------------------------------------------------------

class FullAfter:
    """Stands in for the take's file: takes ``budget`` bytes, then behaves like a full disk
    (a short write, then OSError ENOSPC), as write(2) does on Linux when space runs out."""

    def __init__(self, fh, budget):
        self.fh, self.budget = fh, budget

    def write(self, data):
        if self.budget <= 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        n = self.fh.write(data[:self.budget])
        self.budget -= n
        return n

    def truncate(self, size):
        return self.fh.truncate(size)

    def close(self):
        self.fh.close()

    @property
    def closed(self):
        return self.fh.closed


def test_a_full_disk_keeps_the_take_so_far_readable_simulated(tmp_path):
    from bridge.sources import RecordingWriter, read_recording
    from bridge.sources.recording import TakeWriteError
    path = tmp_path / "full.take"
    w = RecordingWriter(path, 100.0, CHANNELS, "ana", "tue", flush_s=0.0)
    header = path.stat().st_size
    w.fh = FullAfter(w.fh, 5000)  # the disk fills up part-way through a block of lines
    vals = jacket_like(400)
    with pytest.raises(TakeWriteError) as got:
        for i in range(0, 400, 20):
            w.samples(np.arange(i, i + 20) / 100.0, vals[i:i + 20])
            if i == 40:
                w.label(0.1, 0.4, "raise_right")
    assert got.value.errno == errno.ENOSPC and "the take so far is kept" in str(got.value)
    with pytest.raises(TakeWriteError):
        w.label(1.0, 2.0, "bow")  # nothing more is attempted
    w.close()  # does not raise
    kept = path.stat().st_size
    assert header < kept <= header + 5000 and kept == w.written_bytes
    assert path.read_bytes().endswith(b"\n")  # cut back to the last whole line
    rec = read_recording(path)
    n = rec.freq_hz.shape[0]
    assert 40 < n < 400 and [iv.label for iv in rec.intervals] == ["raise_right"]
    np.testing.assert_allclose(rec.freq_hz, np.round(vals[:n], 2))
    print(f"simulated full disk: {kept} bytes kept, {n} samples of 400")


@pytest.fixture
def tiny_disk(tmp_path):
    """A real 64 KiB tmpfs (needs root and mount permission; skipped otherwise)."""
    if shutil.which("mount") is None or os.geteuid() != 0:
        pytest.skip("mounting a small tmpfs needs root")
    where = tmp_path / "disk"
    where.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(where)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {r.stderr.strip()}")
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], capture_output=True)


def test_a_full_disk_during_capture_stops_it_and_keeps_the_take_readable(tiny_disk, capsys):
    from bridge.cli import main
    from bridge.sources import read_recording
    out = tiny_disk / "ana.take"
    code = main(["capture", "--simulated", "--yes", "--no-keys", "--fast", "--reps", "4", "--lead-s", "1",
                 "--countdown-s", "0.5", "--out", str(out)])
    said = capsys.readouterr()
    assert code == 1 and "No space left on device" in said.out and "the take so far is kept" in said.out
    assert "Traceback" not in said.err
    rec = read_recording(out)  # the real file on the full file system
    assert out.read_bytes().endswith(b"\n")
    assert rec.freq_hz.shape[0] > 500 and len(rec.intervals) >= 1
    print(f"tmpfs of 64 KiB: {out.stat().st_size} bytes kept, {rec.freq_hz.shape[0] / rec.rate_hz:.1f} s "
          f"of stream, {len(rec.intervals)} labels")


# -- 1. serial unplug and replug, through the live loop ---------------------------------------

class SocatPair:
    """A named pty pair made by socat: the garment writes to ``device``, drape opens ``host``.
    Killing socat takes both away, as pulling a USB garment's cable does."""

    def __init__(self, folder):
        self.device, self.host = str(folder / "garment"), str(folder / "drape")
        self.proc, self.fd = None, None

    def plug(self):
        self.proc = subprocess.Popen(["socat", f"pty,raw,echo=0,link={self.device}",
                                      f"pty,raw,echo=0,link={self.host}"], stderr=subprocess.DEVNULL)
        wait_for(lambda: os.path.exists(self.device) and os.path.exists(self.host), 10, "socat's ptys")
        self.fd = os.open(self.device, os.O_RDWR | os.O_NOCTTY)

    def unplug(self):
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None
        if self.proc is not None:
            self.proc.terminate()
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:   # a loaded machine: see test_serial_acquisition.stop_socat
                self.proc.kill()
                self.proc.wait(10)
            self.proc = None
        for p in (self.device, self.host):
            if os.path.lexists(p):
                os.unlink(p)


@pytest.mark.skipif(shutil.which("socat") is None, reason="socat not installed (apt-get install socat)")
def test_unplug_and_replug_in_the_live_loop_resumes_events_and_counts_the_outage(tmp_path, tiny_model):
    pair = SocatPair(tmp_path)
    pair.plug()
    line = format_line([181000.0, 252000.0])
    statuses, seen_s, controls = [], [], []
    stop = StopFlag()
    source = ReconnectingSource(lambda: SerialSource(pair.host, 2, 100.0, protocol="text", resample=False),
                                100.0, CHANNELS, Backoff(0.02, 2.0, 0.2))
    result = {}

    def loop():
        try:
            result["stats"] = run(source, Pipeline(tiny_model, control_mapping(tiny_model)), {"desk": Recorder()},
                                  stop, on_event=lambda e, t: controls.append(e.kind), stall_s=0.3,
                                  on_status=lambda s, r: (statuses.append((s, r)), seen_s.append(time.monotonic())))
        except BaseException as exc:  # the test fails on any escape
            result["error"] = exc

    th = threading.Thread(target=loop, daemon=True)
    th.start()
    try:
        os.write(pair.fd, line * 50)
        wait_for(lambda: len(controls) >= 50, 20, "the first samples")
        pair.unplug()
        wait_for(lambda: ("no data", "device gone") in statuses, 20, "the loop to notice the unplug")
        before = len(controls)
        pair.plug()
        # the port is reopened within the backoff (at most 0.2 s); pyserial empties the input
        # on open, so the garment streams on until samples come through again
        end = time.monotonic() + 20
        while len(controls) < before + 50 and time.monotonic() < end:
            os.write(pair.fd, line * 5)
            time.sleep(0.02)
        assert len(controls) >= before + 50, "no samples after the replug"
    finally:
        stop.set()
        th.join(20)
        source.close()
        pair.unplug()
    assert "error" not in result and not th.is_alive()
    assert statuses[0] == ("streaming", "")
    i = statuses.index(("no data", "device gone"))
    assert ("streaming", "") in statuses[i:]
    c = source.counters()
    assert c["outages"] == 1 and c["reconnects"] == 1 and c["malformed"] == 0
    assert set(controls) == {"control"} and result["stats"].samples == len(controls)
    outage_s = seen_s[statuses.index(("streaming", ""), i)] - seen_s[i]  # "no data" as the loop saw it
    print(f"unplug: device away {outage_s:.2f} s (about {outage_s * 100:.0f} samples at 100 Hz never sent); "
          f"{len(controls) - before} control events after the replug")


# -- 9. the model file swapped for one with other channels -------------------------------------

def noise_model(channels, seed=0):
    """A linear model on noise for these channels (fitted in a second; recognises nothing)."""
    rng = np.random.default_rng(seed)
    spec = WindowSpec(100.0, 0.5, 0.1)
    X = rng.normal(size=(12, len(channels), spec.length))
    return fit_cases("linear", X, ["a"] * 6 + ["null"] * 6, ["a"], rate_hz=100.0, windows=spec,
                     conditioning=BandPass(100.0), channel_names=tuple(channels), stream="level")


def test_a_garment_with_other_channels_than_the_model_is_refused_with_a_clear_message():
    # The model (2 channels) is not this garment's (4 channels per line): drape stops reading
    # it and says why, instead of counting bad lines for ever.
    from bridge.sources.serialport import ChannelMismatch
    src = _loop_source(n_channels=2, channel_names=CHANNELS, protocol="text")
    lines = b"".join(format_line([181000.0, 252000.0, 310000.0, 427000.0]) for _ in range(200))
    try:
        with pytest.raises(ChannelMismatch) as got:
            _play(src, lines, 200, timeout_s=20)
    finally:
        src.close()
    msg = str(got.value)
    assert "4 numbers where 2 (or a time and 2) were expected" in msg
    assert "is the model made for this garment" in msg and "hem_left, hem_right" in msg


def test_a_model_file_swapped_while_running_is_never_used_live_and_other_channels_are_refused(tmp_path, caplog):
    import logging
    from bridge.outputs import open_output
    from bridge.service.config import load_service
    from bridge.service.daemon import RUNNING, Service
    from bridge.sources.simulated import SimulatedSource
    jacket = SimulatedSource(seed=1, wearer=0, realtime=False).channel_names
    model_path = tmp_path / "lead.npz"
    noise_model(jacket).save(model_path)
    cfg = tmp_path / "show.toml"
    cfg.write_text('[[garment]]\nname = "lead"\nsimulated = true\nseed = 1\nwearer = 0\nmodel = "lead.npz"\n\n'
                   '[calibration]\nhold_still_s = 0.2\nshift = false\n')
    stop = StopFlag()
    service = Service(load_service(cfg), open_output, stop)
    caplog.set_level(logging.INFO, logger="drape")
    service.start_garments()
    g = service.garments[0]
    running = g.model
    th = threading.Thread(target=service.serve, daemon=True)
    th.start()
    try:
        wait_for(lambda: g.state == RUNNING and g.pipeline.samples > 50, 30, "the garment to run")
        noise_model(("a", "b"), seed=1).save(model_path)  # retrained on another garment, saved over it
        service.reloads_asked += 1                           # as SIGHUP does
        wait_for(lambda: "refused, the running model keeps going" in caplog.text, 20, "the refusal")
        assert "now has 2 channels (a, b) where this garment has 4" in caplog.text
        seen = g.pipeline.samples
        wait_for(lambda: g.pipeline.samples > seen + 50, 20, "samples after the refusal")
        assert g.model is running and g.state == RUNNING
        noise_model(jacket, seed=2).save(model_path)       # a compatible model: used from the next start
        service.reloads_asked += 1
        wait_for(lambda: "the new one is used from the next start" in caplog.text, 20, "the note")
        assert g.model is running and g.state == RUNNING
    finally:
        stop.set()
        th.join(20)
    assert not th.is_alive()


# -- 10. SIGTERM or panic while a key and a note are held ---------------------------------------

from test_keys import _keys_down, xvfb  # noqa: E402,F401  (Xvfb as the independent key peer)

HOLD_MAPPING = """
[destinations.kb]
keys = "x11"

[destinations.synth]
midi_file = "{mid}"

[[rule]]
gesture = "arms_crossed"
on = "entered"
to = "kb"
keys = "shift"
hold = true

[[rule]]
gesture = "arms_crossed"
on = "entered"
to = "synth"
note = 60
channel = 3
hold = true
"""


def _unmatched_note_ons(path):
    """Note-ons without a later note-off (same channel and key), read back with mido.
    MIDI 1.0 Detailed Specification (MIDI Manufacturers Association, 1996): a note-on with
    velocity 0 is a note-off; All Notes Off (controller 123) ends a channel's notes."""
    import mido
    sounding = set()
    for m in mido.MidiFile(path).tracks[0]:
        if m.type == "note_on" and m.velocity > 0:
            sounding.add((m.channel, m.note))
        elif m.type in ("note_off", "note_on"):
            sounding.discard((m.channel, m.note))
        elif m.type == "control_change" and m.control == 123:
            sounding = {s for s in sounding if s[0] != m.channel}
    return sounding


@pytest.mark.parametrize("how", ["SIGTERM", "SIGUSR1 then SIGTERM"])
def test_stopping_or_panicking_mid_hold_leaves_no_key_down_and_no_note_sounding(how, xvfb, tmp_path, demo_model_file):
    import mido
    import signal as sig
    from bridge.garment import Jacket
    from conftest import drape_cmd
    take = Jacket(seed=1, wearer=0, session=5).perform([("standing", 4.0), ("arms_crossed", 120.0)])
    lines = [format_line(v) for v in take.freq_hz]
    mid = tmp_path / "show.mid"
    (tmp_path / "hold.toml").write_text(HOLD_MAPPING.format(mid=mid))
    master, slave = os.openpty()
    (tmp_path / "show.toml").write_text(f'[garment]\nname = "jacket"\nport = "{os.ttyname(slave)}"\n'
                                        f'model = "{demo_model_file}"\nmapping = "hold.toml"\n')
    proc = subprocess.Popen(drape_cmd("start", "--config", str(tmp_path / "show.toml")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    out, done = [], threading.Event()
    threading.Thread(target=lambda: [out.append(l) for l in proc.stdout], daemon=True).start()

    def garment():  # 8 s at once, then the held posture at about real time until told to stop
        os.write(master, b"".join(lines[:800]))
        i = 800
        while not done.is_set() and i < len(lines):
            os.write(master, b"".join(lines[i:i + 5]))
            i += 5
            time.sleep(0.04)

    try:
        assert "on " + os.ttyname(slave) in proc.stderr.readline()  # the port is open from here on
        threading.Thread(target=garment, daemon=True).start()
        wait_for(lambda: any("arms_crossed" in l and "entered" in l for l in out), 60, "the posture to be entered")
        wait_for(lambda: len(_keys_down(xvfb)) == 1, 20, "shift to be held down")  # the check can fail
        if how.startswith("SIGUSR1"):
            proc.send_signal(sig.SIGUSR1)
            wait_for(lambda: _keys_down(xvfb) == [], 20, "panic to let go of the key")
            wait_for(lambda: any("** panic" in l for l in out), 20, "the panic to be printed")
            assert proc.poll() is None  # panic releases; the daemon runs on
        proc.send_signal(sig.SIGTERM)
        assert proc.wait(30) == 0
        err = proc.stderr.read()
    finally:
        done.set()
        proc.kill()
        os.close(master)
        os.close(slave)
    assert _keys_down(xvfb) == []
    assert "Traceback" not in err
    msgs = [m for m in mido.MidiFile(mid).tracks[0] if not m.is_meta]
    assert any(m.type == "note_on" and m.velocity > 0 and m.note == 60 and m.channel == 2 for m in msgs)
    assert _unmatched_note_ons(mid) == set()
    assert "output kb: sent" in err and "output synth: sent" in err


def test_a_garment_with_one_channel_more_than_the_model_is_refused_not_read_as_a_time():
    # Three numbers per line for a two-channel model would be "a time and two channels"; a
    # first column of counted frequencies jumps about instead of counting seconds: refused.
    from bridge.sources.serialport import ChannelMismatch
    rng = np.random.default_rng(9)
    src = _loop_source(n_channels=2, channel_names=CHANNELS, protocol="text")
    rows = np.column_stack([310000.0 + rng.normal(0, 30, 200), jacket_like(200)])
    try:
        with pytest.raises(ChannelMismatch) as got:
            _play(src, b"".join(format_line(r) for r in rows), 200, timeout_s=20)
    finally:
        src.close()
    assert "does not behave like a device time in seconds" in str(got.value)
    assert "If the garment has 3 channels, the model is not made for it" in str(got.value)


def test_a_serial_port_another_reader_holds_is_refused_with_the_reason():
    """Two readers of one serial device split its lines between them (each sees gaps, neither
    knows why): the second is refused, saying another program has the port."""
    from bridge.sources.base import SourceGone
    master, slave = os.openpty()
    path = os.ttyname(slave)
    first = SerialSource(path, 4)
    try:
        with pytest.raises(SourceGone, match="another program has it open"):
            SerialSource(path, 4)
    finally:
        first.close()
    SerialSource(path, 4).close()     # free again once the first lets go
    os.close(master)
    os.close(slave)


def test_a_device_never_seen_is_not_gone_yet():
    from bridge.sources.health import Watchdog
    w = Watchdog(1.0)
    assert w.step(0.0, 0, connected=False)[1] == "no device yet"
    assert w.step(0.5, 10, connected=True) == ("streaming", "")
    assert w.step(1.0, 0, connected=False)[1] == "device gone"
