"""Continuous controls: every sample updates them at once (no classifier window), a posture
can gate them, and the per-wearer range comes from two captures."""

import json

import numpy as np
import pytest

from bridge.decisions import (ControlSettings, Controls, LevelRange, OneEuroSettings, RangeError, load_range,
                              range_from_levels)
from bridge.mapping import parse_mapping
from bridge.service import Pipeline

from test_hot_reload import CHANNELS, small_model


def test_each_sample_gives_a_control_value_before_any_window_is_full():
    model = small_model()  # 0.5 s windows: the classifier says nothing for 50 samples
    m = parse_mapping('[destinations.d]\nosc = "127.0.0.1:9"\n[[control]]\nname = "reach"\n'
                      'mix = { right_sleeve = 1.0 }\nrelaxed = 0.0\nclosest = 0.1\nto = "d"\naddress = "/r"\n',
                      "m.toml", model.classes, model.kinds, CHANNELS)
    pipe = Pipeline(model, m)
    early = []
    for k in range(5):
        f = np.array([[2e5, 2e5 / np.sqrt(1 + 0.02 * k)]])  # ΔC/C0 on right_sleeve: 0, 0.02, 0.04, ...
        events = pipe.feed(f, early=early.extend)
        assert events == []                                   # delivered early, before recognition
    assert [round(e.t_s, 2) for e in early] == [0.01, 0.02, 0.03, 0.04, 0.05]
    assert all(e.kind == "control" and e.gesture == "reach" for e in early)
    assert early[0].level == 0.0 and 0 < early[1].level < 0.2 and early[4].level > early[1].level


def test_only_while_a_posture_is_held():
    rng = LevelRange(("a",), (0.0,), (1.0,))
    c = Controls([ControlSettings("x", (1.0,), rng, OneEuroSettings(), only_while="guard")])
    t = np.array([0.0, 0.01])
    assert c.step(t, np.array([[0.5], [0.5]]), held={}) == []
    ev = c.step(t + 1, np.array([[0.5], [0.7]]), held={"guard": (0.9, 0.9)})
    assert [e.level for e in ev][0] == 0.5 and len(ev) == 2


def test_weighted_mix_and_clipping():
    rng = LevelRange(("a", "b"), (0.0, 0.1), (0.2, 0.3))
    c = Controls([ControlSettings("x", (3.0, 1.0), rng)])
    # a: 0.1 → 0.5; b: 0.5 → clipped 1.0; mix (3·0.5 + 1·1.0)/4 = 0.625
    [e] = c.step(np.array([0.0]), np.array([[0.1, 0.5]]))
    assert e.level == pytest.approx(0.625)


def test_range_from_captures_and_file_round_trip(tmp_path):
    rng = np.random.default_rng(0)
    relaxed = rng.normal(0.001, 1e-4, size=(500, 2))
    closest = np.column_stack([np.linspace(0, 0.05, 500), np.linspace(0, 0.02, 500)])
    r = range_from_levels(("a", "b"), relaxed, closest)
    assert r.relaxed == pytest.approx((0.001, 0.001), abs=2e-5)
    assert r.closest == pytest.approx((0.0475, 0.019), rel=1e-3)  # the 95th percentile of a ramp
    back = load_range(r.save(tmp_path / "w.range.json"))
    assert back == r
    with pytest.raises(RangeError, match="on b"):
        range_from_levels(("a", "b"), relaxed, np.column_stack([closest[:, 0], np.zeros(500)]))  # b never rose
    (tmp_path / "bad.json").write_text(json.dumps({"channels": ["a"], "relaxed": [0.1], "closest": [0.0]}))
    with pytest.raises(RangeError, match="closest must be above relaxed"):
        load_range(tmp_path / "bad.json")


def test_channels_that_do_not_rise_can_be_left_out():
    rng = np.random.default_rng(0)
    relaxed = rng.normal(0.001, 1e-4, size=(500, 3))
    closest = np.column_stack([np.linspace(0, 0.05, 500), np.zeros(500), np.linspace(0, 0.02, 500)])
    with pytest.raises(RangeError, match="--leave-out-flat"):  # the error names the option that exists
        range_from_levels(("a", "b", "c"), relaxed, closest)
    r = range_from_levels(("a", "b", "c"), relaxed, closest, leave_out_flat=True)
    assert r.channel_names == ("a", "c") and len(r.relaxed) == len(r.closest) == 2
    with pytest.raises(RangeError, match="on a, b, c"):  # nothing rose: nothing to keep
        range_from_levels(("a", "b", "c"), relaxed, np.zeros((500, 3)), leave_out_flat=True)


def test_range_counts_down_before_each_capture_and_the_countdown_is_not_captured(capsys, tmp_path):
    from bridge.cli import main
    assert main(["range", "--out", str(tmp_path / "r.json"), "--seconds", "2", "--countdown-s", "3"]) == 0
    kept = (tmp_path / "r.json").read_bytes()   # a wearer's range is not written over unless asked
    assert main(["range", "--out", str(tmp_path / "r.json"), "--seconds", "2", "--countdown-s", "3"]) == 2
    assert (tmp_path / "r.json").read_bytes() == kept
    assert "r.json exists; choose another --out or pass --overwrite" in capsys.readouterr().err
    assert main(["range", "--out", str(tmp_path / "r.json"), "--seconds", "2", "--countdown-s", "3", "--overwrite"]) == 0
    lines = capsys.readouterr().out.splitlines()
    reach = next(i for i, l in enumerate(lines) if l.startswith("reach as close"))
    # Right before the second capture: its announcement and a countdown to it.
    assert lines[reach - 3].startswith("next: reach as close") and "starting in 3 s" in lines[reach - 3]
    assert [l.strip() for l in lines[reach - 2:reach]] == ["2 ...", "1 ..."]
    assert lines[0].startswith("next: stand relaxed")


def test_the_range_captures_split_one_long_block_at_the_right_samples():
    """A source may hand over many seconds at once; each stretch (countdown, relaxed,
    countdown, closest) must still take exactly its own samples."""
    from bridge.decisions import capture_range
    from bridge.signal import BandPass, Conditioner
    from bridge.sources.base import Block, empty_block

    rate, f0 = 100.0, 2e5
    dc = np.concatenate([np.zeros(300), np.linspace(0, 0.04, 100), np.full(200, 0.04)])  # ΔC/C0 on channel b
    freq = np.column_stack([np.full(600, f0), f0 / np.sqrt(1 + dc)])                     # C/C0 = (f0/f)^2

    class OneBlock:
        rate_hz, ended = rate, False

        def read(self):
            if self.ended:
                return empty_block(2, 0.0)
            self.ended = True
            return Block(np.arange(600) / rate, freq, 0.0)

    r = capture_range(OneBlock(), Conditioner(BandPass(rate)), ("a", "b"), seconds=2.0, prompt=lambda t: None,
                      countdown_s=1.0, leave_out_flat=True)
    # Relaxed: samples 100-299 (level 0); closest: samples 400-599 (level 0.04); a is flat.
    assert r.channel_names == ("b",)
    assert r.relaxed[0] == pytest.approx(0.0, abs=1e-9) and r.closest[0] == pytest.approx(0.04, rel=1e-6)
