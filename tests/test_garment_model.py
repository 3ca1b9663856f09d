"""The simulated jacket as a model: layouts, surroundings, full vocabulary, delivery, CLI, separability.

External facts are checked against the source named beside each check; magnitudes of
this simulator are documented in bridge/garment/__init__.py and checked here.
"""

import json
import re
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from bridge.cli import main
from bridge.garment import (
    FULL_GESTURES,
    FULL_NULL_ACTIVITIES,
    GESTURES,
    NULL_ACTIVITIES,
    SURROUNDINGS,
    Jacket,
    LayoutError,
    load_layout,
)
from bridge.garment.coupling import taper, wire_over_plane_capacitance_f_per_m
from bridge.garment.delivery import deliver
from bridge.garment.layout import parse_layout
from bridge.garment.surroundings import SCENE, TABLE_TOP_Z_M, empty_scene, surroundings_capacitance_f
from bridge.sources import TextLineParser, read_recording

from conftest import ROOT, drape_cmd

LAYOUTS = ROOT / "examples" / "layouts"


# ----- layouts -------------------------------------------------------------------------------

def test_example_layouts_load_and_build_jackets():
    for path in sorted(LAYOUTS.glob("*.toml")):
        layout = load_layout(path)
        assert 2 <= len(layout.cables) <= 16
        j = Jacket(seed=0, layout=layout)
        assert j.channel_names == layout.channel_names
        centre = np.array(j.centre_hz)
        assert np.all((centre > 150e3) & (centre < 500e3))
        assert np.all(np.sort(centre)[1:] / np.sort(centre)[:-1] > 1.05)  # oscillators kept apart


def test_four_cable_example_is_the_built_in_jacket():
    a = Jacket(seed=3, wearer=2, session=1)
    b = Jacket(seed=3, wearer=2, session=1, layout=load_layout(LAYOUTS / "four_cables.toml"))
    assert a.channel_names == b.channel_names
    assert np.allclose(a.centre_hz, b.centre_hz, rtol=1e-6)


def test_sixteen_cables_are_the_most(tmp_path):
    cable = '[[cable]]\nname = "c{i}"\non = "torso"\npath = [[0.2, {a}, 20], [0.7, {a}, 20]]\n'
    text = "".join(cable.format(i=i, a=-170 + 21 * i) for i in range(16))
    layout = parse_layout(__import__("tomllib").loads(text))
    j = Jacket(seed=0, layout=layout)
    assert len(j.channel_names) == 16
    take = j.perform([("standing", 0.5)])
    assert take.freq_hz.shape == (50, 16)
    with pytest.raises(LayoutError, match="2 to 16"):
        parse_layout(__import__("tomllib").loads(text + cable.format(i=16, a=170)))


@pytest.mark.parametrize("text, message", [
    ('[[cable]]\nname = "a"\non = "sleeve"\nside = "left"\nforearm = [0, 1]\n', "2 to 16"),
    ('[[cable]]\nname = "a"\non = "skirt"\n[[cable]]\nname = "b"\non = "torso"\n', "cable 1 (a): 'on' must be"),
    ('[[cable]]\nname = "a"\non = "sleeve"\nside = "up"\n[[cable]]\nname = "b"\n', "'side' must be"),
    ('[[cable]]\nname = "a"\non = "sleeve"\nside = "left"\nforearm = [0, 1]\ncolour = 1\n'
     '[[cable]]\nname = "b"\non = "sleeve"\nside = "right"\nforearm = [0, 1]\n', "unknown key(s) colour"),
    ('[[cable]]\nname = "a"\non = "sleeve"\nside = "left"\nforearm = [0, 1]\n'
     '[[cable]]\nname = "a"\non = "sleeve"\nside = "right"\nforearm = [0, 1]\n', "used twice"),
    ('[[cable]]\nname = "a"\non = "torso"\npath = [[0.5, 0, 20]]\n'
     '[[cable]]\nname = "b"\non = "torso"\npath = [[0.5, 0, 20], [0.2, 0, 20]]\n', "at least two vertices"),
    ('[[cable]]\nname = "a"\non = "torso"\npath = [[1.5, 0, 20], [0.2, 0, 20]]\n'
     '[[cable]]\nname = "b"\non = "torso"\npath = [[0.5, 0, 20], [0.2, 0, 20]]\n', "heights must be 0-1"),
    ('name = "x"\n[[cable]\n', "not valid TOML"),
])
def test_bad_layout_files_say_where_and_why(tmp_path, text, message):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(LayoutError) as info:
        load_layout(path)
    assert str(path) in str(info.value) and message in str(info.value)


def test_missing_layout_file_via_cli(tmp_path, capsys):
    assert main(["simulate", "--out", str(tmp_path / "x.take"), "--layout", str(tmp_path / "no.toml")]) == 2
    assert "no such layout file" in capsys.readouterr().err


# ----- surroundings --------------------------------------------------------------------------

def test_table_top_is_the_wire_over_plane_formula():
    # A straight wire 1 m long, parallel to a grounded table top at height h and far behind its
    # edge, must get C' = 2 pi eps0 / arccosh(h / a) per metre (method of images, electrostatics
    # handbook), times this simulator's documented taper.
    h, a = 0.05, 0.75e-3
    x = np.linspace(-0.5, 0.5, 41)
    points = np.stack([np.full_like(x, 5.0), x, np.full_like(x, TABLE_TOP_Z_M + h)], -1)[None]
    scene = empty_scene(1)
    scene[0, SCENE["table_edge_x_m"]] = 0.0  # the table extends from x = 0 forward
    scene[0, SCENE["table_heading_rad"]] = 0.0
    c = surroundings_capacitance_f(points, scene)[0]
    expected = wire_over_plane_capacitance_f_per_m(h, a) * taper(h - a, 0.4) * 1.0
    assert c == pytest.approx(expected, rel=1e-9)
    assert wire_over_plane_capacitance_f_per_m(h, a) == pytest.approx(12.176e-12, rel=1e-3)  # hand: 55.633/4.5692


def test_nothing_near_adds_nothing_and_a_stand_raises_the_near_side():
    j = Jacket(seed=0, wearer=0)
    from bridge.garment.antennas import antenna_points_local
    from bridge.garment.body import neutral_pose, pose_body
    geo = pose_body(neutral_pose(1), j.dims)
    world = {n: geo.to_world(antenna_points_local(j.cables[n], j.fits[n], geo, j.dims, j.wearer)[0])
             for n in j.channel_names}
    assert all(surroundings_capacitance_f(w, empty_scene(1))[0] == 0.0 for w in world.values())
    scene = empty_scene(1)
    scene[0, SCENE["stand_x_m"]], scene[0, SCENE["stand_y_m"]] = 0.05, 0.40  # on the wearer's left
    c = {n: surroundings_capacitance_f(w, scene)[0] for n, w in world.items()}
    assert c["left_sleeve"] > 0.3e-12 and c["left_sleeve"] > 10 * c["right_sleeve"]


@pytest.mark.parametrize("label, channel", [("metal_near", "sleeve"), ("partner_near", "sleeve"),
                                            ("leaning_on_table", "hem")])
def test_surroundings_lower_the_frequency_of_cables_they_come_near(label, channel):
    j = Jacket(seed=0, wearer=0, n_antennas=6)
    take = j.perform([("standing", 2.0), (label, 6.0)])
    rel = take.freq_hz / np.array(take.centre_hz) - 1.0
    cols = [k for k, n in enumerate(take.channel_names) if channel in n]
    before = rel[:200, cols].min()
    during = rel[250:550, cols].min()
    assert during < before - 0.002, (label, before, during)  # clearly beyond standing still
    assert take.intervals == ()  # a disturbance is null activity, never a labelled gesture


# ----- vocabulary ----------------------------------------------------------------------------

def test_full_vocabulary_sizes_and_demo_subset():
    assert len(FULL_GESTURES) >= 14 and set(FULL_GESTURES.values()) == {"gesture", "posture"}
    assert sum(k == "posture" for k in FULL_GESTURES.values()) >= 4
    assert set(GESTURES) <= set(FULL_GESTURES) and set(NULL_ACTIVITIES) <= set(FULL_NULL_ACTIVITIES)
    assert len(set(FULL_NULL_ACTIVITIES) - set(SURROUNDINGS)) >= 4
    assert set(SURROUNDINGS) <= set(FULL_NULL_ACTIVITIES)


def test_every_label_renders_and_gestures_move_some_channel():
    j = Jacket(seed=1, wearer=3, session=1)
    for label in list(FULL_GESTURES) + list(FULL_NULL_ACTIVITIES):
        take = j.perform([("standing", 1.0), (label, None if label in FULL_GESTURES else 4.0)])
        assert np.all(np.isfinite(take.freq_hz)) and np.all(take.freq_hz > 0)
        if label in FULL_GESTURES:
            assert [iv.label for iv in take.intervals] == [label]
            rel = take.freq_hz[100:] / take.freq_hz[:90].mean(axis=0) - 1.0
            assert np.abs(rel).max() > 0.005, label  # every cue shows on some cable


def test_performances_vary_in_timing_and_amplitude():
    j = Jacket(seed=0, wearer=1)
    lengths, depths = [], []
    for _ in range(4):
        take = j.perform([("standing", 1.0), ("clap", None), ("standing", 1.0)])
        iv = take.intervals[0]
        lengths.append(iv.end_s - iv.start_s)
        depths.append(take.freq_hz[100:-100, 1].min())
    assert len(set(np.round(lengths, 2))) > 1 and len(set(depths)) > 1


# ----- reproducibility, chunking, delivery --------------------------------------------------

def test_same_seed_same_stream_with_layout_and_surroundings():
    layout = load_layout(LAYOUTS / "eight_cables.toml")
    script = [("standing", 1.0), ("wave_right", None), ("partner_near", 3.0), ("leaning_on_table", 3.0),
              ("arms_up", 3.0), ("talking", 2.0)]
    a = Jacket(seed=7, wearer=4, session=2, layout=layout).perform(script)
    j = Jacket(seed=7, wearer=4, session=2, layout=layout)
    parts = [j.perform(script[:3]), j.perform(script[3:])]
    assert np.array_equal(np.concatenate([p.freq_hz for p in parts]), a.freq_hz)
    other = Jacket(seed=7, wearer=5, session=2, layout=layout).perform(script)
    assert not np.array_equal(other.freq_hz[:100], a.freq_hz[:100])


def test_delivery_drops_and_delays_in_order():
    rng = np.random.default_rng(0)
    t = np.arange(20000) / 100.0
    f = np.column_stack([t, t])
    d = deliver(t, f, 100.0, np.random.default_rng(1), 0.01, 0.02)
    assert d.dropped == 20000 - d.t_s.size and 100 < d.dropped < 300  # about 1 %
    assert np.all(np.diff(d.arrival_s) >= 0) and np.all(d.arrival_s >= d.t_s + 0.01 - 1e-12)
    assert np.all(np.diff(d.t_s) > 0) and np.array_equal(d.freq_hz[:, 0], d.t_s)
    late = d.arrival_s - d.t_s > 0.011
    assert late.any()
    same = deliver(t, f, 100.0, np.random.default_rng(1), 0.01, 0.02)
    assert np.array_equal(same.arrival_s, d.arrival_s)
    clean = deliver(t, f, 100.0, rng, 0.0, 0.0)
    assert clean.dropped == 0 and np.allclose(clean.arrival_s, t + 0.01)


# ----- the CLI: troupe and serial port ----------------------------------------------------------

def test_troupe_cli_writes_labelled_takes(tmp_path):
    out = tmp_path / "troupe"
    assert main(["simulate", "--wearers", "2", "--sessions", "2", "--repetitions", "1", "--seed", "4",
                 "--out", str(out), "--layout", str(LAYOUTS / "sleeves_only.toml")]) == 0
    manifest = json.loads((out / "troupe.json").read_text())
    assert [t["file"] for t in manifest["takes"]] == [f"wearer{w}-session{s}.take" for w in range(2) for s in range(2)]
    assert manifest["kinds"] == FULL_GESTURES
    recs = [read_recording(out / t["file"]) for t in manifest["takes"]]
    assert {r.wearer for r in recs} == {"wearer0", "wearer1"} and recs[1].session == "session1"
    assert recs[0].channel_names == ("left_cuff", "right_cuff") and recs[0].layout.startswith("two cables")
    assert sorted(iv.label for iv in recs[0].intervals) == sorted(FULL_GESTURES)
    assert not np.array_equal(recs[0].freq_hz[:100], recs[2].freq_hz[:100])  # wearers differ


def test_troupe_cli_keeps_takes_already_in_the_folder_unless_told(tmp_path, capsys):
    out = tmp_path / "troupe"
    out.mkdir()
    earlier = ["wearer0-session0.take", "wearer0-session1.take", "wearer1-session0.take", "wearer1-session1.take"]
    for name in earlier:
        (out / name).write_bytes(b"an earlier run")
    run = ["simulate", "--wearers", "2", "--sessions", "2", "--repetitions", "1", "--out", str(out),
           "--layout", str(LAYOUTS / "sleeves_only.toml")]
    assert main(run) == 2
    err = capsys.readouterr().err
    # the first few are named, the rest counted
    assert "4 files" in err and "wearer0-session0.take" in err and "and 1 more" in err and "--overwrite" in err
    assert sorted(p.name for p in out.iterdir()) == earlier and not (out / "troupe.json").exists()
    assert all((out / n).read_bytes() == b"an earlier run" for n in earlier)
    (tmp_path / "plain").write_text("not a folder")
    assert main(["simulate", "--wearers", "1", "--out", str(tmp_path / "plain")]) == 2
    assert "is a file" in capsys.readouterr().err
    assert main(["simulate", "--wearers", "1", "--sessions", "1", *run[5:], "--overwrite"]) == 0
    assert read_recording(out / "wearer0-session0.take").wearer == "wearer0"


def test_serve_cli_behaves_like_a_serial_garment():
    import serial
    proc = subprocess.Popen(drape_cmd("simulate", "--serve", "--for", "8", "--seed", "3"), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        path = proc.stdout.readline().strip()
        assert path.startswith("/dev/")
        port = serial.Serial(path, 115200, timeout=0.2)
        data, t0 = b"", time.monotonic()
        while time.monotonic() - t0 < 2.5:
            data += port.read(4096)
        port.close()
        out, err = proc.communicate(timeout=30)
    finally:
        proc.kill()
    assert proc.returncode == 0, err
    # A host that opens the port first gets the channel names, as `drape simulate` writes them.
    assert data.startswith(b"t_s,left_sleeve,right_sleeve,left_front,right_front\n"), data[:80]
    parser = TextLineParser(4)
    samples = parser.feed(data)
    assert parser.channel_names == ("left_sleeve", "right_sleeve", "left_front", "right_front")
    # Real time: about 100 lines a second, each a device time and four frequencies.
    assert 150 <= len(samples) <= 300 and parser.stats.bad == 0
    times = np.array([s[0] for s in samples])
    assert np.all(np.diff(times) > 0)
    assert np.all((np.array([s[1] for s in samples]) > 150e3) & (np.array([s[1] for s in samples]) < 500e3))
    assert "lines sent" in err


def test_capture_from_the_served_jacket_names_the_channels_as_simulate_does(tmp_path):
    from bridge.garment import Jacket
    proc = subprocess.Popen(drape_cmd("simulate", "--serve", "--for", "30", "--seed", "3"), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        path = proc.stdout.readline().strip()
        out = tmp_path / "served.take"
        cap = subprocess.run(drape_cmd("capture", "--port", path, "--out", str(out), "--yes", "--no-keys",
                                       "--gestures", "bow", "--reps", "1", "--countdown-s", "0.5", "--window-s", "1",
                                       "--rest-s", "0.5", "--lead-s", "0.5", "--ordinary-s", "0"),
                             capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL)
    finally:
        proc.terminate()
        proc.communicate(timeout=20)
    assert cap.returncode == 0, cap.stdout + cap.stderr
    assert read_recording(out).channel_names == tuple(Jacket(seed=3).channel_names)


# ----- separability -------------------------------------------------------------------------

def test_unseen_wearer_is_above_chance_and_below_the_five_trained_on():
    # The sanity check: the default classifier trained on 5 simulated wearers scores
    # well above chance on a 6th, and lower than on the 5 (unseen wearers are harder).
    from bridge.evaluation.layouts import balanced_window_accuracy
    from bridge.garment.troupe import troupe_takes
    from bridge.recognition import fit_linear
    from bridge.sources import Recording

    recs = [Recording.from_take(take, GESTURES)
            for _, _, take in troupe_takes(1, 6, 1, GESTURES, NULL_ACTIVITIES, repetitions=2)]
    model = fit_linear(recs[:5], dict(GESTURES))
    on_the_five = balanced_window_accuracy(model, recs[:5])
    unseen = balanced_window_accuracy(model, recs[5:])
    chance = 1.0 / len(model.classes)
    print(f"on the five {on_the_five:.3f} unseen {unseen:.3f} chance {chance:.3f}")
    assert unseen > 3 * chance
    assert unseen < on_the_five


def test_a_host_that_clears_its_input_on_opening_still_gets_the_header():
    # pyserial's open() clears the port's input right after opening it: a header sent the
    # moment the host appeared would go with it. The device waits a boot time first.
    import os
    import termios

    from bridge.garment import Jacket
    from bridge.garment.vocabulary import GESTURES, NULL_ACTIVITIES
    from bridge.sources.pseudodevice import BOOT_S, PseudoGarment
    dev = PseudoGarment(Jacket(seed=3), np.random.default_rng(0), list(GESTURES), NULL_ACTIVITIES)
    dev.step(0.0)
    fd = os.open(dev.path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
    try:
        dev.step(0.05)                          # the host is seen: booting, nothing sent
        termios.tcflush(fd, termios.TCIFLUSH)   # what the host's serial library does on open
        dev.step(0.05 + BOOT_S + 0.1)
        data = os.read(fd, 65536)
    finally:
        os.close(fd)
    assert data.startswith(b"t_s,left_sleeve,right_sleeve,left_front,right_front\n"), data[:80]
    assert data.count(b"\n") > 5                # and the lines after it


def test_compare_layouts_gives_no_seen_figure_without_a_new_session(capsys):
    """Found by a docs walkthrough: with --sessions 1 the example printed a "seen wearer, new
    session" figure scored on the wearers' training takes (in-sample)."""
    import runpy
    script = runpy.run_path(str(ROOT / "examples" / "compare_layouts.py"))
    args = [str(LAYOUTS / "sleeves_only.toml"), "--wearers", "2", "--repetitions", "1", "--vocabulary", "demo"]
    assert script["main"]([*args, "--sessions", "1"]) == 0
    out = capsys.readouterr().out
    # held-out figures only: with one session each there is no new session to score "seen" on
    assert "seen wearer, new session n/a (one session each)" in out and "seen n/a" in out
    assert script["main"]([*args, "--sessions", "2"]) == 0
    out = capsys.readouterr().out
    assert re.search(r"seen wearer, new session \d\.\d{3}", out) and "n/a" not in out, out
