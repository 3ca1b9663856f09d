"""How steadily each cable sits between dressings: a property of the garment's layout,
drawn by the simulator for every session, and the spotting bench's --spotting-layout."""

import json
from dataclasses import asdict, replace

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation.spotting import Protocol, protocol_takes
from bridge.garment import Jacket, LayoutError, default_layout
from bridge.garment.antennas import LAYOUTS, SleeveLayout, draw_fit
from bridge.garment.layout import parse_layout

SLEEVE = {"name": "left_sleeve", "on": "sleeve", "side": "left", "upper_arm": [0.3, 0.95], "forearm": [0.08, 0.95]}
PANEL = {"name": "left_front", "on": "torso", "path": [[0.8, 31.5, 12], [0.15, 31.5, 35]]}


def _layout_toml(sleeve_extra: str = "", second: str = "left_front") -> str:
    return f"""name = "test garment"
[[cable]]
name = "left_sleeve"
on = "sleeve"
side = "left"
upper_arm = [0.3, 0.95]
forearm = [0.08, 0.95]
{sleeve_extra}
[[cable]]
name = "{second}"
on = "torso"
path = [[0.8, 31.5, 12], [0.15, 31.5, 35]]
"""


def test_a_layout_without_spreads_sits_as_loosely_as_the_built_in_jacket():
    layout = parse_layout({"cable": [SLEEVE, PANEL]}).as_dict()
    for name in ("left_sleeve", "left_front"):
        built_in = LAYOUTS[name]
        got = layout[name]
        assert (got.turn_spread_rad, got.gap_spread_m, got.slide_spread_m) == \
            (built_in.turn_spread_rad, built_in.gap_spread_m, built_in.slide_spread_m)
    assert layout["left_sleeve"].turn_spread_rad == 0.15 and layout["left_front"].turn_spread_rad == 0.05


def test_spreads_are_read_in_degrees_and_millimetres():
    table = {**SLEEVE, "turn_spread_deg": 4.5, "gap_spread_mm": 2, "slide_spread_mm": 0}
    got = parse_layout({"cable": [table, PANEL]}).as_dict()["left_sleeve"]
    assert got.turn_spread_rad == pytest.approx(np.radians(4.5))
    assert (got.gap_spread_m, got.slide_spread_m) == (0.002, 0.0)


@pytest.mark.parametrize("key, value", [("turn_spread_deg", -1), ("turn_spread_deg", 30), ("gap_spread_mm", 9),
                                        ("slide_spread_mm", "a lot"), ("gap_spread_mm", True)])
def test_impossible_spreads_are_refused_naming_the_cable_and_key(key, value):
    with pytest.raises(LayoutError, match=rf"cable 1 \(left_sleeve\): '{key}' must be a number"):
        parse_layout({"cable": [{**SLEEVE, key: value}, PANEL]})


def test_halving_a_sleeves_spreads_halves_each_placement_from_the_same_draws():
    loose = {n: LAYOUTS[n] for n in ("left_sleeve", "right_sleeve", "left_front", "right_front")}
    snug = {n: (replace(c, turn_spread_rad=c.turn_spread_rad / 2, gap_spread_m=c.gap_spread_m / 2)
                if isinstance(c, SleeveLayout) else c) for n, c in loose.items()}
    halved = 0
    for seed in range(40):
        a = draw_fit(np.random.default_rng(seed), list(loose), loose)
        b = draw_fit(np.random.default_rng(seed), list(snug), snug)
        for name, c in loose.items():
            if not isinstance(c, SleeveLayout):
                assert a[name] == b[name]          # panels as before
                continue
            assert b[name].slide_m == a[name].slide_m
            if abs(a[name].turn_rad) < 0.4:       # unclipped
                assert b[name].turn_rad == a[name].turn_rad / 2
                halved += 1
            if abs(a[name].gap_m) < 0.008:
                assert b[name].gap_m == a[name].gap_m / 2
    assert halved > 60


def test_a_garment_with_no_spread_sits_the_same_in_every_session():
    still = {n: replace(c, turn_spread_rad=0.0, gap_spread_m=0.0, slide_spread_m=0.0)
             for n, c in default_layout().cables}
    layout = replace(default_layout(), cables=tuple(still.items()))
    monday, friday = Jacket(3, 1, 0, layout=layout), Jacket(3, 1, 4, layout=layout)
    assert monday.fits == friday.fits and monday.centre_hz == friday.centre_hz
    # the loose built-in jacket does not
    assert Jacket(3, 1, 0).centre_hz != Jacket(3, 1, 4).centre_hz


TINY = Protocol(wearers=1, fit_reps=1, fit_null_s=5.0, tune_reps=1, tune_null_s=5.0, score_reps=1, score_null_s=5.0)


def test_the_protocol_renders_its_wearers_in_the_garment_it_names(tmp_path):
    p = replace(TINY, garment=_layout_toml(second="chest"))
    take = protocol_takes(p, tmp_path / "a", roles=("fit0",))[(0, "fit0")]
    assert take.channel_names == ("left_sleeve", "chest")
    built_in = protocol_takes(TINY, tmp_path / "b", roles=("fit0",))[(0, "fit0")]
    assert built_in.channel_names == default_layout().channel_names
    # a cache holds one garment's takes
    with pytest.raises(ValueError, match="another protocol"):
        protocol_takes(TINY, tmp_path / "a", roles=("fit0",))


def test_a_cache_written_before_garments_could_be_named_still_serves_the_built_in_jacket(tmp_path):
    protocol_takes(TINY, tmp_path, roles=("fit0",))
    stamp = tmp_path / "protocol.json"
    old = json.loads(stamp.read_text())
    del old["garment"]
    stamp.write_text(json.dumps(old))
    protocol_takes(TINY, tmp_path, roles=("fit0",))    # no error
    assert "garment" in json.loads(stamp.read_text())
    assert asdict(TINY)["garment"] == ""


def test_bench_refuses_a_bad_layout_before_rendering(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(_layout_toml('turn_spread_deg = 40'))
    rc = main(["bench", "--spotting", "--spotting-layout", str(bad), "--spotting-cache", str(tmp_path / "c")])
    assert rc != 0 and "turn_spread_deg" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()


def test_bench_refuses_cables_the_simulated_people_do_not_wear(tmp_path, capsys):
    other = tmp_path / "other.toml"
    other.write_text(_layout_toml(second="chest"))
    rc = main(["bench", "--spotting", "--spotting-layout", str(other), "--spotting-cache", str(tmp_path / "c")])
    err = capsys.readouterr().err
    assert rc != 0 and "--spotting-prior 0 --spotting-prior-cues 0" in err and "chest" in err
    assert not (tmp_path / "c").exists()


def test_the_snug_example_is_the_built_in_jacket_with_half_the_sleeve_spreads():
    from pathlib import Path

    from bridge.garment import load_layout
    # examples/ are in the checkout, not the installed package
    path = Path(__file__).resolve().parents[1] / "examples" / "layouts" / "snug_sleeves.toml"
    snug = load_layout(path)
    assert snug.channel_names == default_layout().channel_names
    for name, cable in snug.cables:
        built_in = LAYOUTS[name]
        factor = 0.5 if isinstance(cable, SleeveLayout) else 1.0
        assert cable.turn_spread_rad == pytest.approx(factor * built_in.turn_spread_rad, rel=1e-12)
        assert cable.gap_spread_m == pytest.approx(factor * built_in.gap_spread_m, rel=1e-12)
        assert cable.slide_spread_m == built_in.slide_spread_m
        # the same cables, to rounding
        for field in ("angle_rad", "gap_m", "azimuths_rad", "gaps_m", "heights_frac"):
            if hasattr(built_in, field):
                assert np.allclose(getattr(cable, field), getattr(built_in, field), rtol=0, atol=1e-12)
