"""Other simulated people's performances of the wearer's gestures, added to a fit's cases
(`drape fit` on the built-in jacket's takes does it by default). What they do to the
spotting figures is in docs/benchmarks.md; these check the takes and the fit's handling."""

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation.simulated import built_in_others_cues
from bridge.garment import FULL_GESTURES, GESTURES, Jacket, training_script
from bridge.recognition.classifiers import fit_recordings
from bridge.sources import Recording, read_recording


def wearer_take(session, labels=("clap", "arms_up")):
    rng = np.random.default_rng([5, session])
    script = training_script(rng, 2, list(labels)) + [("walking", 20.0)]
    return Recording.from_take(Jacket(seed=5, wearer=2, session=session).perform(script),
                               {g: FULL_GESTURES[g] for g in labels})


def test_the_people_perform_only_the_wearers_gestures_each_so_often():
    got = built_in_others_cues(50.0, {"clap", "arms_up", "a_cue_of_our_own"}, people=2, repetitions=2)
    assert len(got) == 2
    for r in got:
        assert r.rate_hz == 50.0 and r.layout == "built-in"
        assert r.kinds == {"clap": "gesture", "arms_up": "posture"}
        labels = [iv.label for iv in r.intervals]
        assert sorted(labels) == ["arms_up", "arms_up", "clap", "clap"]
    n = min(r.freq_hz.shape[0] for r in got)
    assert not np.allclose(got[0].freq_hz[:n], got[1].freq_hz[:n])         # two people, not one twice
    assert built_in_others_cues(50.0, {"a_cue_of_our_own"}, people=2) == []


def test_a_fit_refuses_other_peoples_labels_the_wearer_never_performed():
    own = wearer_take(0)
    others = [wearer_take(1, ("clap", "bow"))]
    with pytest.raises(ValueError, match="labels the wearer's do not: bow"):
        fit_recordings("minirocket", [own], {**own.kinds, "bow": "gesture"}, others=others, estimate=False,
                       mine_rounds=0)


def test_the_window_is_the_wearers_and_their_cases_stay_counted_apart():
    own = [wearer_take(0)]
    # someone far slower: their gestures alone would call for a longer window
    slow = [wearer_take(1)]
    slow[0].intervals = tuple(type(iv)(iv.start_s - 1.5, iv.end_s, iv.label) for iv in slow[0].intervals)
    kinds = dict(own[0].kinds)
    alone = fit_recordings("minirocket", own, kinds, estimate=False, mine_rounds=0, n_features=84)
    joined = fit_recordings("minirocket", own, kinds, others=slow, estimate=False, mine_rounds=1, n_features=84)
    pooled = fit_recordings("minirocket", own + slow, kinds, estimate=False, mine_rounds=0, n_features=84)
    assert joined.windows.length == alone.windows.length < pooled.windows.length
    assert joined.summary["others_takes"] == 1 and joined.summary["recordings"] == 1
    assert "others_takes" not in alone.summary


def test_drape_fit_adds_the_people_performing_the_wearers_gestures(tmp_path, capsys):
    from bridge.cli.models import _simulated_others
    from bridge.cli.parser import build_parser
    from bridge.evaluation.simulated import OTHERS_CUE_PEOPLE
    assert main(["simulate", "--repetitions", "1", "--null-s", "5", "--rate-hz", "20",
                 "--out", str(tmp_path / "a.take")]) == 0
    recs = [read_recording(tmp_path / "a.take")]
    capsys.readouterr()
    got = _simulated_others(build_parser().parse_args(["fit", "a.take", "-o", "m.npz"]), recs)
    assert len(got["others"]) == OTHERS_CUE_PEOPLE == 6 and got["others"][0].rate_hz == 20.0
    assert {iv.label for r in got["others"] for iv in r.intervals} == set(GESTURES)
    assert "6 performing every gesture once" in capsys.readouterr().out
    assert _simulated_others(build_parser().parse_args(["fit", "a.take", "-o", "m.npz", "--no-simulated-others"]),
                             recs) == {}
