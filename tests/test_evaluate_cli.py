"""`drape fit` and `drape evaluate`: .ts files through the command line, and the held-out schemes."""

import json
from pathlib import Path

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation.heldout import classification_scores, cross_validate
from bridge.garment import GESTURES, Jacket, training_script
from bridge.recognition import TrainingSettings
from bridge.sources import Recording

DATA = Path(__file__).parent / "data"


def test_fit_and_evaluate_gunpoint_through_the_command_line(tmp_path, capsys):
    model = tmp_path / "gp.npz"
    assert main(["fit", "--ts", str(DATA / "GunPoint_TRAIN.ts"), "--classifier", "dtw", "-o", str(model)]) == 0
    out = capsys.readouterr().out
    assert "dtw, 2 classes from 50 cases" in out and "leave one out accuracy" in out
    assert main(["evaluate", "--model", str(model), "--ts", str(DATA / "GunPoint_TEST.ts"), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert {"accuracy", "macro_f1", "per_class", "confusion", "calibration_error"} <= set(result)
    assert 0.0 <= result["calibration_error"] < 0.2
    assert np.array(result["confusion"]).sum() == 150 == result["windows"]
    # UCR archive 2018 summary (Dau et al. 2019), GunPoint test split: 1-NN DTW full window
    # 0.9067, 1-NN Euclidean 0.9133. Nearest template with a 10 % band: measured 0.94.
    assert result["accuracy"] >= 0.90
    assert result["per_class"]["1"]["support"] == 76 and result["per_class"]["2"]["support"] == 74  # the test split's class counts


def test_published_gunpoint_dtw_figure_from_the_command_line(tmp_path, capsys):
    # UCR archive 2018 summary (Dau et al. 2019), GunPoint test split: 1-NN DTW with an
    # unconstrained window, 0.9067 (136 of 150). --band 1 --no-rejection is that classifier.
    model = tmp_path / "gp-full.npz"
    assert main(["fit", "--ts", str(DATA / "GunPoint_TRAIN.ts"), "--classifier", "dtw", "--band", "1",
                 "--no-rejection", "-o", str(model)]) == 0
    capsys.readouterr()
    assert main(["evaluate", "--model", str(model), "--ts", str(DATA / "GunPoint_TEST.ts"), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert np.trace(np.array(result["confusion"])) == 136


@pytest.mark.parametrize("args, message", [
    (["--band", "0.5"], "--classifier dtw"),
    (["--classifier", "dtw", "--band", "1.5"], "fraction from 0 to 1"),
])
def test_dtw_settings_are_checked(tmp_path, capsys, args, message):
    assert main(["fit", "--ts", str(DATA / "GunPoint_TRAIN.ts"), *args, "-o", str(tmp_path / "m.npz")]) == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "m.npz").exists()


def test_unequal_length_cases_are_resampled_to_the_models_window(tmp_path, capsys):
    model = tmp_path / "gp.npz"
    assert main(["fit", "--ts", str(DATA / "GunPoint_TRAIN.ts"), "--classifier", "dtw", "-o", str(model)]) == 0
    # The test split with every case cut to 120–150 samples at its end, as a .ts with @equalLength false.
    from bridge.sources.ts_format import read_ts
    X, y, _ = read_ts(DATA / "GunPoint_TEST.ts")
    rng = np.random.default_rng(0)
    lines = ["@problemName GunPointCut", "@timeStamps false", "@missing false", "@univariate true",
             "@equalLength false", "@classLabel true 1 2", "@data"]
    for case, label in zip(X, y):
        n = int(rng.integers(120, 151))
        lines.append(",".join(f"{v:.6f}" for v in case[0, :n]) + f":{label}")
    cut = tmp_path / "cut.ts"
    cut.write_text("\n".join(lines) + "\n")
    capsys.readouterr()
    assert main(["evaluate", "--model", str(model), "--ts", str(cut), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["windows"] == 150 and 0.6 <= result["accuracy"] <= 1.0


def test_classification_scores_on_a_worked_example():
    # Worked by hand: true 0,0,1,1,2 against predicted 0,1,1,1,0.
    # class 0: P 1/2, R 1/2, F1 1/2; class 1: P 2/3, R 1, F1 0.8; class 2: P 0, R 0, F1 0.
    s = classification_scores([0, 0, 1, 1, 2], [0, 1, 1, 1, 0], ("a", "b", "c"))
    assert s["accuracy"] == 0.6 and s["confusion"] == [[1, 1, 0], [0, 2, 0], [1, 0, 0]]
    assert s["per_class"]["b"] == {"precision": 0.6667, "recall": 1.0, "f1": 0.8, "support": 2}
    assert s["macro_f1"] == pytest.approx((0.5 + 0.8 + 0.0) / 3, abs=1e-4)


@pytest.fixture(scope="module")
def small_troupe():
    """Three simulated wearers, three sessions each: short training takes plus ordinary movement.

    Both schemes then train on six takes, so only who is held out differs.
    """
    recs = []
    for wearer in range(3):
        for session in range(3):
            rng = np.random.default_rng([3, wearer, session])
            script = training_script(rng, 2) + [("walking", 10.0), ("fidgeting", 10.0)]
            rec = Recording.from_take(Jacket(seed=3, wearer=wearer, session=session).perform(script), GESTURES)
            recs.append(rec)
    return recs


def test_unseen_wearers_score_lower_than_new_sessions_of_known_ones(small_troupe):
    # One window for every fold (the automatic one follows each fold's own takes), so that
    # both schemes score the same windows.
    settings = TrainingSettings(fourier_features=300, hop_s=0.2, window_s=2.0)
    lso = cross_validate(small_troupe, dict(GESTURES), "leave-session-out", "linear", settings)
    lwo = cross_validate(small_troupe, dict(GESTURES), "leave-wearer-out", "linear", settings, events=False)
    print("leave-session-out", lso["accuracy"], lso["macro_f1"], "leave-wearer-out", lwo["accuracy"], lwo["macro_f1"])
    assert [f["held_out"] for f in lwo["folds"]] == ["wearer0", "wearer1", "wearer2"]
    assert [f["held_out"] for f in lso["folds"]] == ["session0", "session1", "session2"]
    assert lso["windows"] == lwo["windows"]  # every take is held out once under either scheme
    # Measured: accuracy 0.84 vs 0.81, macro F1 0.62 vs 0.52 (behaviour, not exact figures).
    assert lwo["accuracy"] < lso["accuracy"] and lwo["macro_f1"] < lso["macro_f1"]
    assert lso["events"]["performed"] > 0 and lso["events"]["latency_s"]["count"] > 0
    # Calibration measured on the held-out windows, pooled and per fold.
    assert 0.0 <= lso["calibration_error"] < 0.5 and all(0.0 <= f["calibration_error"] < 0.5 for f in lso["folds"])


def test_scheme_needs_the_metadata_it_groups_by(small_troupe):
    one = [Recording(r.rate_hz, r.channel_names, r.t_s, r.freq_hz, r.intervals, "", r.session) for r in small_troupe]
    with pytest.raises(ValueError, match="wearer in its metadata"):
        cross_validate(one, dict(GESTURES), "leave-wearer-out")


def test_report_writes_a_page_with_its_pictures(tmp_path, capsys):
    pytest.importorskip("matplotlib", reason="the report's pictures need the plot extra (matplotlib)")
    from bridge.evaluation.events import Span
    from bridge.evaluation.heldout import classification_scores
    from bridge.evaluation.report import write_report
    from bridge.decisions import Event
    rec = Recording(100.0, ("a", "b"), np.arange(3000) / 100.0, 2e5 + np.random.default_rng(0).normal(0, 50, (3000, 2)),
                    wearer="wearer0", session="session1")
    result = classification_scores([0, 1, 1, 2], [0, 1, 2, 2], ("null", "bow", "sweep_across"))
    result["takes"] = [{"rec": rec, "truth": [Span(5.0, 6.5, "bow")], "events": [Event(6.8, "bow", "gesture", 0.9)],
                        "latency_s": [0.3]}]
    page = write_report(result, tmp_path / "rep", "a test report")
    text = page.read_text()
    for png in ("confusion.png", "per_class.png", "timeline.png", "latency.png"):
        assert f"src='{png}'" in text
        assert (tmp_path / "rep" / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, RFC 2083)
    assert "Accuracy 0.750" in text and "wearer0" in text


# dtw: two templates a class and six null templates (from 60 null windows, not 300): every
# hop still matches pruned templates of every class and of null, at a fifth of the cost.
@pytest.mark.parametrize("classifier, options", [
    ("linear", {}), ("dtw", {"templates_per_class": 2, "null_cases": 60, "null_templates": 6})])
def test_window_scores_from_the_replayed_hops_equal_a_separate_pass(small_troupe, classifier, options):
    # Evaluation reads window predictions off the replay's hops instead of scoring every
    # window again; both must agree window for window.
    from bridge.evaluation.heldout import hop_windows, take_windows
    from bridge.recognition.classifiers import fit_recordings
    from bridge.service import replay_take
    settings = TrainingSettings(fourier_features=300, hop_s=0.2)
    extra = {} if classifier == "linear" else {"estimate": False, "stream": "motion", "cases_per_class": 20}
    model = fit_recordings(classifier, small_troupe[:4], dict(GESTURES), settings, **extra, **options)
    rec = small_troupe[4]
    events, hops, skipped = replay_take(rec, model, None, 1.0)
    assert skipped == 0 and len(hops) > 100
    y_hop, p_hop, c_hop = hop_windows(rec, model, hops)
    y_all, p_all, c_all = take_windows(rec, model)
    np.testing.assert_array_equal(y_hop, y_all)
    assert (p_hop == p_all).mean() == 1.0
    np.testing.assert_allclose(c_hop, c_all, rtol=0, atol=1e-9)


def test_calibration_error_worked_example():
    # Expected calibration error as defined by Guo, Pleiss, Sun & Weinberger, "On calibration
    # of modern neural networks" (ICML 2017): sum over equal-width confidence bins of
    # |bin| / n × |accuracy(bin) − mean confidence(bin)|. Worked by hand: two windows at
    # 0.95, one right (gap 0.45, weight 1/2) and two at 0.55, both right (gap 0.45, weight
    # 1/2): ECE 0.45. A perfectly calibrated set (0.75 confidence, 3 of 4 right) gives 0.
    from bridge.recognition.linear import confidence_gap, expected_calibration_error
    assert confidence_gap([0.95, 0.95, 0.55, 0.55], [True, False, True, True]) == pytest.approx(0.45)
    assert confidence_gap([0.75] * 4, [True, True, True, False]) == pytest.approx(0.0)
    prob = np.array([[0.05, 0.95], [0.95, 0.05], [0.45, 0.55], [0.55, 0.45]])
    assert expected_calibration_error(prob, np.array([1, 1, 1, 0])) == pytest.approx(0.45)


def test_fit_edges_option(tmp_path, capsys):
    # GunPoint (UCR archive 2018, Dau et al. 2019), tests/data: a .ts fit keeps the paper's
    # padding unless --edges valid is given; the option is refused for other classifiers.
    from bridge.recognition import load_model
    ts = str(DATA / "GunPoint_TRAIN.ts")
    assert main(["fit", "--ts", ts, "--classifier", "minirocket", "-o", str(tmp_path / "a.npz")]) == 0
    assert load_model(tmp_path / "a.npz").params.edges == "alternate"
    assert main(["fit", "--ts", ts, "--classifier", "minirocket", "--edges", "valid", "-o", str(tmp_path / "v.npz")]) == 0
    assert load_model(tmp_path / "v.npz").params.edges == "valid"
    capsys.readouterr()
    assert main(["fit", "--ts", ts, "--classifier", "dtw", "--edges", "valid", "-o", str(tmp_path / "d.npz")]) != 0
    assert "--edges applies to --classifier minirocket only" in capsys.readouterr().err
