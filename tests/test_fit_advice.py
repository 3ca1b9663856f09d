"""`drape fit` tells a wearer with takes from two sessions or fewer to record a check-in,
and says nothing of it once three sessions (dressings) are given."""

from bridge.cli import main
from bridge.sources import read_recording


def _take(tmp_path, session):
    out = tmp_path / f"w0-s{session}.take"
    assert main(["simulate", "--rate-hz", "20", "--repetitions", "2", "--null-s", "20", "--seed", "5",
                 "--session", str(session), "--out", str(out)]) == 0
    return out


def test_fit_advises_a_check_in_only_for_two_sessions_or_fewer(tmp_path, capsys):
    takes = [_take(tmp_path, s) for s in (0, 1, 2)]
    assert len({read_recording(t).session for t in takes}) == 3   # the sessions are told apart
    model = tmp_path / "m.npz"
    capsys.readouterr()
    assert main(["fit", str(takes[0]), str(takes[1]), "-o", str(model), "--classifier", "linear"]) == 0
    out = capsys.readouterr().out
    assert "takes from 2 sessions" in out and "drape capture --check-in" in out
    assert main(["fit", *map(str, takes), "-o", str(model), "--classifier", "linear", "--overwrite"]) == 0
    assert "check-in" not in capsys.readouterr().out


def test_fit_gives_no_check_in_advice_when_a_check_in_is_among_the_takes(tmp_path, capsys):
    import dataclasses

    from bridge.sources import write_recording
    takes = [_take(tmp_path, s) for s in (0, 1)]
    checkin = write_recording(tmp_path / "w0-show-checkin.take",
                              dataclasses.replace(read_recording(takes[1]), session="show", check_in=True))
    capsys.readouterr()
    assert main(["fit", str(takes[0]), str(checkin), "-o", str(tmp_path / "m.npz"), "--classifier", "linear"]) == 0
    assert "check-in" not in capsys.readouterr().out

