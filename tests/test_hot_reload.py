"""Hot reload: a saved change takes effect between blocks; a broken file leaves the last good
mapping running and is reported; an editor's atomic replace (write a temporary file, rename
it over the old one) is noticed even when size and modification time are unchanged."""

import os

import numpy as np

from bridge.mapping import MappingWatcher
from bridge.outputs.base import Output
from bridge.recognition.classifiers import fit_cases
from bridge.recognition.windows import WindowSpec
from bridge.service import Pipeline, StopFlag, run
from bridge.signal import BandPass
from bridge.sources.base import Block, Source

CHANNELS = ("left_sleeve", "right_sleeve")

TEMPLATE = """\
[destinations.desk]
osc = "127.0.0.1:9"

[[control]]
name = "reach"
mix = {{ left_sleeve = 1.0, right_sleeve = 1.0 }}
relaxed = 0.0
closest = 0.5
min_change = 0.0
max_rate_hz = 1000
to = "desk"
address = "{address}"
"""


def write(path, text):
    path.write_text(text, encoding="utf-8")


def replace_atomically(path, text, keep_stat_of=None):
    tmp = path.with_name("." + path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    if keep_stat_of is not None:
        st = os.stat(keep_stat_of)
        os.utime(tmp, ns=(st.st_atime_ns, st.st_mtime_ns))
    os.replace(tmp, path)


def test_watcher_good_broken_and_atomic_replace(tmp_path):
    f = tmp_path / "show.toml"
    write(f, TEMPLATE.format(address="/a"))
    w = MappingWatcher(f, channel_names=CHANNELS, interval_s=0.1)
    assert w.mapping.controls[0].action.address == "/a"
    assert w.poll(0.0) is None                               # nothing changed
    write(f, TEMPLATE.format(address="/bb"))
    assert w.poll(0.05) is None                               # polled at most every 0.1 s
    assert w.poll(0.1) is None                                # changed: used once it looks the same twice
    r = w.poll(0.2)
    assert r.mapping.controls[0].action.address == "/bb" and w.mapping is r.mapping
    good = w.mapping
    write(f, TEMPLATE.format(address="no-slash"))
    assert w.poll(0.3) is None                               # maybe an editor mid-write: wait one poll
    r = w.poll(0.4)
    assert r.mapping is None and w.mapping is good
    assert r.problems[0].startswith(f"{f}:12: control[1].address: OSC addresses start with '/'")
    assert w.poll(0.5) is None                               # reported once
    # an atomic replace with the same size and time stamps: only the inode differs
    write(f, TEMPLATE.format(address="/cc"))
    assert w.poll(0.6) is None
    assert w.poll(0.7).mapping.controls[0].action.address == "/cc"
    replace_atomically(f, TEMPLATE.format(address="/dd"), keep_stat_of=f)
    assert w.poll(0.8) is None
    r = w.poll(0.9)
    assert r is not None and r.mapping.controls[0].action.address == "/dd"


def test_a_file_missing_for_a_moment_keeps_the_mapping(tmp_path):
    f = tmp_path / "show.toml"
    write(f, TEMPLATE.format(address="/a"))
    w = MappingWatcher(f, channel_names=CHANNELS, interval_s=0.0)
    f.unlink()
    assert w.poll(1.0) is None
    r = w.poll(2.0)
    assert r.mapping is None and "no such mapping file" in r.problems[0]
    write(f, TEMPLATE.format(address="/back"))
    assert w.poll(3.0) is None
    assert w.poll(4.0).mapping.controls[0].action.address == "/back"


class Recorder(Output):
    def __init__(self):
        super().__init__("desk")
        self.got = []

    def send(self, message):
        self.got.append(message)
        return True


class ScriptedSource(Source):
    """Blocks of 10 samples of a slow ramp; calls ``edits[i]()`` before block i."""

    def __init__(self, blocks, edits):
        self.rate_hz, self.channel_names = 100.0, CHANNELS
        self.blocks, self.edits, self.i = blocks, edits, 0

    def read(self):
        if self.i in self.edits:
            self.edits[self.i]()
        n0 = self.i * 10
        self.i += 1
        self.ended = self.i >= self.blocks
        k = np.arange(n0, n0 + 10)
        f = 2e5 / np.sqrt(1 + 1e-3 * k)[:, None] * np.ones((1, 2))  # ΔC/C0 rises 0.001 per sample
        return Block(k / 100.0, f, 0.0)


def small_model():
    rng = np.random.default_rng(0)
    spec = WindowSpec(100.0, 0.5, 0.1)
    X = rng.normal(size=(12, 2, spec.length))
    y = ["a"] * 6 + ["null"] * 6
    return fit_cases("linear", X, y, ["a"], rate_hz=100.0, windows=spec, conditioning=BandPass(100.0),
                     channel_names=CHANNELS, stream="level")


def test_runner_swaps_between_blocks_and_keeps_the_last_good_mapping(tmp_path):
    f = tmp_path / "show.toml"
    write(f, TEMPLATE.format(address="/a"))
    model = small_model()
    w = MappingWatcher(f, model.classes, model.kinds, CHANNELS, interval_s=0.0)
    reports = []
    edits = {5: lambda: write(f, TEMPLATE.format(address="/b")),
             10: lambda: write(f, TEMPLATE.format(address="/b\n[[rule]]")),   # broken TOML
             15: lambda: replace_atomically(f, TEMPLATE.format(address="/c"))}
    out = Recorder()
    stats = run(ScriptedSource(20, edits), Pipeline(model, w.mapping), {"desk": out}, StopFlag(),
                watcher=w, report=reports.append)
    addresses = [m.address for m in out.got]
    # every sample gives one control message (min_change 0). A file saved while block i is read
    # is seen before block i + 1 and used once it looks the same at the next poll, from block
    # i + 2: blocks 0–6 /a, 7–16 /b (the broken save changes nothing), 17–19 /c
    assert addresses == ["/a"] * 70 + ["/b"] * 100 + ["/c"] * 30
    assert stats.reloads == 2 and stats.broken_reloads == 1
    assert any(r.startswith("mapping not reloaded, the last good one keeps running") and f"{f}:" in r for r in reports)
    # values are the one-euro-smoothed mix: rising, within 0..1
    values = [m.args[0] for m in out.got]
    assert all(0 <= v <= 1 for v in values) and values[-1] > values[10]


def test_a_panic_requested_by_signal_releases_every_output_at_the_next_block(tmp_path):
    import os
    import signal

    from bridge.cli import _stop_on_signals
    from bridge.mapping.messages import Release

    f = tmp_path / "show.toml"
    write(f, TEMPLATE.format(address="/a"))
    model = small_model()
    w = MappingWatcher(f, model.classes, model.kinds, CHANNELS)
    stop = StopFlag()
    old = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGUSR1)}
    try:
        _stop_on_signals(stop)
        out = Recorder()
        run(ScriptedSource(6, {3: lambda: os.kill(os.getpid(), signal.SIGUSR1)}), Pipeline(model, w.mapping),
            {"desk": out}, stop)
    finally:
        for s, h in old.items():
            signal.signal(s, h)
    kinds = [type(m).__name__ for m in out.got]
    # blocks 0–3 send the control, then the panic (Release), and the disarmed stream sends nothing more
    assert kinds == ["OscMessage"] * 40 + ["Release"]
    assert out.got[40] == Release()
