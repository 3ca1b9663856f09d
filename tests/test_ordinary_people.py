"""`drape simulate --ordinary-people`: other simulated people's ordinary movement, for a
fit's null class (`drape fit --ordinary`). The spotting figures in docs/benchmarks.md
show what it does; these check the takes themselves (simulated data, our own scenario)."""

from pathlib import Path

import numpy as np
import pytest

from bridge.cli import main
from bridge.garment import FULL_NULL_ACTIVITIES
from bridge.garment.troupe import ordinary_script
from bridge.sources import read_recording

ROOT = Path(__file__).resolve().parent.parent


def test_people_takes_hold_only_ordinary_movement_of_every_kind(tmp_path, capsys):
    assert main(["simulate", "--ordinary-people", "2", "--ordinary-s", "25", "--out", str(tmp_path / "people")]) == 0
    out = capsys.readouterr().out
    takes = sorted((tmp_path / "people").glob("*.take"))
    assert [p.name for p in takes] == ["ordinary-person0.take", "ordinary-person1.take"]
    assert "drape fit TAKE --ordinary" in out
    # What it says to run puts every take after --ordinary, none among the takes to learn cues from.
    from bridge.cli.parser import build_parser
    a = build_parser().parse_args(["fit", "me.take", "--ordinary", *map(str, takes), "-o", "m.npz"])
    assert a.recordings == ["me.take"] and a.ordinary == [str(p) for p in takes]
    recs = [read_recording(p) for p in takes]
    for r in recs:
        assert r.intervals == ()                       # no cue at all: all of it is null
        assert abs(r.freq_hz.shape[0] / r.rate_hz - 25) < 0.1
        assert r.channel_names == ("left_sleeve", "right_sleeve", "left_front", "right_front")
        assert r.wearer.startswith("ordinary-person")
    # Two different people, not one rendered twice.
    n = min(r.freq_hz.shape[0] for r in recs)
    assert not np.allclose(recs[0].freq_hz[:n], recs[1].freq_hz[:n])


def test_people_keep_takes_already_in_the_folder_unless_told(tmp_path, capsys):
    folder = tmp_path / "people"
    folder.mkdir()
    (folder / "ordinary-person1.take").write_bytes(b"an earlier run")
    run = ["simulate", "--ordinary-people", "3", "--ordinary-s", "12", "--out", str(folder)]
    assert main(run) == 2
    err = capsys.readouterr().err
    assert "1 file this would write exists already" in err and "ordinary-person1.take" in err and "--overwrite" in err
    assert sorted(p.name for p in folder.iterdir()) == ["ordinary-person1.take"]   # nothing written
    assert (folder / "ordinary-person1.take").read_bytes() == b"an earlier run"
    assert main([*run, "--overwrite"]) == 0
    assert read_recording(folder / "ordinary-person1.take").wearer == "ordinary-person1"


def test_people_follow_a_layout_file(tmp_path, capsys):
    layout = ROOT / "examples" / "layouts" / "sleeves_only.toml"
    assert main(["simulate", "--ordinary-people", "1", "--ordinary-s", "12", "--layout", str(layout),
                 "--out", str(tmp_path)]) == 0
    assert f"{tmp_path}: 1 simulated person's ordinary movement" in capsys.readouterr().out
    r = read_recording(tmp_path / "ordinary-person0.take")
    assert r.channel_names == ("left_cuff", "right_cuff")


def test_people_refuse_options_that_would_add_cues(tmp_path, capsys):
    assert main(["simulate", "--ordinary-people", "1", "--repetitions", "2", "--out", str(tmp_path)]) == 2
    assert "ordinary movement only" in capsys.readouterr().err
    with pytest.raises(SystemExit) as refused:   # the parser refuses it, exit status 2
        main(["simulate", "--ordinary-people", "0", "--out", str(tmp_path)])
    assert refused.value.code == 2 and "--ordinary-people: must be a whole number, 1 or more" in capsys.readouterr().err
    assert not list(tmp_path.glob("*.take"))


def test_the_script_cycles_through_every_kind_before_repeating_one():
    script = ordinary_script(np.random.default_rng(0), 8 * 40.0, FULL_NULL_ACTIVITIES)
    assert sum(d for _, d in script) == 8 * 40.0
    assert all(10.0 <= d <= 40.0 for _, d in script[:-1])
    assert sorted(k for k, _ in script[:8]) == sorted(FULL_NULL_ACTIVITIES)


def test_the_fit_adds_the_built_in_people_only_to_the_built_in_jackets_takes(tmp_path):
    """`drape fit` (minirocket) adds simulated people's ordinary movement by default, but
    only to takes of the built-in jacket: for a real garment, or a simulated layout file,
    they would be another garment's movement."""
    from bridge.evaluation.simulated import (
        OTHERS_SEED,
        built_in_jacket_takes,
        built_in_others,
    )
    from bridge.garment.troupe import ordinary_take
    assert main(["simulate", "--duration-s", "5", "--out", str(tmp_path / "a.take")]) == 0
    own = read_recording(tmp_path / "a.take")
    assert built_in_jacket_takes([own])
    assert not built_in_jacket_takes([])
    own.layout = "blazer v2"                                     # a real garment's take
    assert not built_in_jacket_takes([own])
    layout = ROOT / "examples" / "layouts" / "sleeves_only.toml"
    assert main(["simulate", "--duration-s", "5", "--layout", str(layout), "--out", str(tmp_path / "b.take")]) == 0
    assert not built_in_jacket_takes([read_recording(tmp_path / "b.take")])
    # The same people as `drape simulate --ordinary-people N --seed 1` (seed + 1000), at the takes' rate.
    assert main(["simulate", "--ordinary-people", "2", "--ordinary-s", "20", "--seed", str(OTHERS_SEED - 1000),
                 "--rate-hz", "50", "--out", str(tmp_path / "p")]) == 0
    mine = built_in_others(50.0, people=2, seconds=20.0)
    for k, r in enumerate(mine):
        assert r.intervals == () and r.rate_hz == 50.0
        np.testing.assert_allclose(r.freq_hz, read_recording(tmp_path / "p" / f"ordinary-person{k}.take").freq_hz,
                                   rtol=1e-9)
    assert np.array_equal(mine[0].freq_hz, ordinary_take(OTHERS_SEED, 0, 20.0, FULL_NULL_ACTIVITIES, None, 50.0).freq_hz)


def test_fit_and_the_held_out_schemes_add_the_same_people(tmp_path, capsys):
    """`drape evaluate --scheme` estimates what `drape fit` will make, so its folds get the
    people too; --no-simulated-others and the other classifiers get none."""
    from bridge.cli.models import _simulated_others
    from bridge.cli.parser import build_parser
    assert main(["simulate", "--duration-s", "5", "--rate-hz", "10", "--out", str(tmp_path / "a.take")]) == 0
    recs = [read_recording(tmp_path / "a.take")]
    parse = build_parser().parse_args
    for verb in (["fit", "a.take", "-o", "m.npz"], ["evaluate", "a.take", "--scheme", "leave-wearer-out"]):
        capsys.readouterr()
        got = _simulated_others(parse(verb), recs)
        assert len(got["ordinary"]) == 6 and got["ordinary"][0].rate_hz == 10.0
        assert abs(got["ordinary"][0].freq_hz.shape[0] - 6000) <= 1   # 10 minutes at 10 Hz, to a gate
        assert "adding the ordinary movement of 6 simulated people (10 min each)" in capsys.readouterr().out
        assert _simulated_others(parse([*verb, "--no-simulated-others"]), recs) == {}
        assert _simulated_others(parse([*verb, "--classifier", "linear"]), recs) == {}


@pytest.mark.parametrize("verb, refused", [
    (["fit", "-o", "m.npz", "--band-hz", "3", "1"], "LOW must be below HIGH"),
    (["fit", "-o", "m.npz", "--band-hz", "1", "7"], "does not fit a 10 Hz source"),
    (["evaluate", "--scheme", "leave-wearer-out"], "leave-wearer-out needs takes of at least two wearers"),
])
def test_options_are_checked_before_the_people_are_announced(tmp_path, monkeypatch, capsys, verb, refused):
    """A fit or an evaluation refused for its options says nothing of people it never adds."""
    monkeypatch.chdir(tmp_path)
    assert main(["simulate", "--repetitions", "1", "--rate-hz", "10", "--out", "a.take"]) == 0
    capsys.readouterr()
    assert main([verb[0], "a.take", *verb[1:]]) == 2
    said = capsys.readouterr()
    assert refused in said.err and "adding" not in said.out
    assert not (tmp_path / "m.npz").exists()


def test_the_fit_names_the_layout_when_it_suggests_people_for_another_garment(tmp_path, capsys):
    """Found by a docs walkthrough: fitting a take of examples/layouts/eight_cables.toml, the
    hint said `drape simulate --ordinary-people 6 --out others`, whose takes (the built-in four
    cables) that fit then refuses; the README says to add `--layout FILE` for your garment."""
    layout = ROOT / "examples" / "layouts" / "sleeves_only.toml"
    take = tmp_path / "coat.take"
    assert main(["simulate", "--layout", str(layout), "--rate-hz", "20", "--repetitions", "2", "--null-s", "20",
                 "--out", str(take)]) == 0
    capsys.readouterr()
    assert main(["fit", str(take), "-o", str(tmp_path / "coat.npz"), "--classifier", "dtw"]) == 0
    hint = [line for line in capsys.readouterr().out.splitlines() if line.startswith("no --ordinary takes")]
    assert len(hint) == 1 and "--ordinary-people 6 --layout FILE --out others" in hint[0]
    # the built-in jacket's takes keep the plain command (the people wear the same cables)
    plain = tmp_path / "plain.take"
    assert main(["simulate", "--rate-hz", "20", "--repetitions", "2", "--null-s", "20", "--out", str(plain)]) == 0
    capsys.readouterr()
    assert main(["fit", str(plain), "-o", str(tmp_path / "plain.npz"), "--classifier", "dtw"]) == 0
    hint = [line for line in capsys.readouterr().out.splitlines() if line.startswith("no --ordinary takes")]
    assert len(hint) == 1 and "--ordinary-people 6 --out others" in hint[0] and "--layout" not in hint[0]
