"""Hard-negative mining: the ordinary movement a model mistakes for a gesture joins the null class."""

import numpy as np
import pytest

from bridge.garment import GESTURES, Jacket, training_script
from bridge.recognition.classifiers import fit_recordings, hard_negatives, window_scores
from bridge.recognition.linear import probabilities
from bridge.recognition.training import label_windows
from bridge.sources import Recording
from bridge.sources.recording import Label


def take(session):
    rng = np.random.default_rng([3, session])
    script = training_script(rng, 2, list(GESTURES)) + [("walking", 40.0), ("fidgeting", 40.0)]
    return Recording.from_take(Jacket(seed=3, wearer=1, session=session).perform(script), GESTURES)


@pytest.fixture(scope="module")
def takes():
    return [take(0), take(1)]


def test_mined_windows_are_null_windows_the_model_takes_for_a_gesture(takes):
    model = fit_recordings("minirocket", takes[:1], dict(GESTURES), estimate=False, mine_rounds=0)
    level = 0.1
    wins, origin, ends = hard_negatives(model, takes[1:], dict(GESTURES), level=level, most=50)
    assert 0 < len(wins) <= 50 and set(origin.tolist()) == {0}
    y = label_windows(ends, model.windows.length, model.rate_hz, takes[1].intervals, model.classes, dict(GESTURES))
    assert (y == 0).all()                                       # only ordinary movement, never a gesture
    prob = probabilities(window_scores(model, wins), model.temperature)
    assert (prob[:, 1:].max(axis=1) >= level - 1e-9).all()      # each one the model took for a gesture
    assert np.all(np.diff(ends) > 0)                            # in time order, each window once




def test_ordinary_takes_must_hold_no_labels(takes):
    with pytest.raises(ValueError, match="no labelled gestures"):
        fit_recordings("minirocket", takes[:1], dict(GESTURES), ordinary=takes[1:])


def test_mining_fits_once_per_fold_and_once_after(takes, monkeypatch):
    """With mining, the model is fitted once per mining fold and once on everything found:
    no full fit is made first and thrown away (it cost a fifth of a check-in fit). The model
    is the one a fit of the final windows gives."""
    from bridge.recognition import classifiers
    calls = []
    real = classifiers.fit_cases
    monkeypatch.setattr(classifiers, "fit_cases", lambda *a, **k: calls.append(len(a[1])) or real(*a, **k))
    model = fit_recordings("minirocket", takes, dict(GESTURES), estimate=False, mine_rounds=1, mine_level=0.1)
    assert len(calls) == 2 + 1                                   # two recordings: two folds, then the fit
    assert calls[-1] == model.summary["cases"] == max(calls)     # the last fit holds every window and the mined ones
    calls.clear()
    fit_recordings("minirocket", takes, dict(GESTURES), estimate=False, mine_rounds=0)
    assert len(calls) == 1


# --- how strongly each gesture shows on a take its model did not learn from ---

def _scripted(rate_hz, n, intervals):
    return Recording(rate_hz=rate_hz, channel_names=("a",), t_s=np.arange(n) / rate_hz, freq_hz=np.zeros((n, 1)),
                     intervals=tuple(Label(*iv) for iv in intervals))


def test_held_out_cue_strength_takes_each_performance_peak_and_the_ordinary_percentile():
    """Worked by hand: hops every 0.1 s (end sample / 100 Hz); 'bow' at 10–11 s peaks 0.4 at 12.4 s
    (inside start .. end + 1.5 s), a 0.9 hop at 12.6 s falls outside and does not count; 'wave' at
    30–31 s peaks 0.7; its second take has 'bow' at 10–11 s peaking 0.6. Ordinary hops (2 s before
    to 3 s after every performance excluded) hold one 0.95 among 0.1s: the 99.9th percentile
    follows numpy's linear interpolation."""
    from bridge.recognition.classifiers import held_out_cue_strength
    classes = ("null", "bow", "wave")
    ends = np.arange(10, 6001, 10)            # 0.1 .. 60.0 s
    t = ends / 100.0

    def probs(marks):
        p = np.full((len(ends), 3), 0.1)
        for at_s, j, v in marks:
            p[np.argmin(np.abs(t - at_s)), j] = v
        return p

    one = probs([(12.4, 1, 0.4), (12.6, 1, 0.9), (30.5, 2, 0.7), (50.0, 1, 0.95)])
    two = probs([(10.5, 1, 0.6)])
    r1 = _scripted(100.0, 6001, [(10.0, 11.0, "bow"), (30.0, 31.0, "wave")])
    r2 = _scripted(100.0, 6001, [(10.0, 11.0, "bow")])
    cues = held_out_cue_strength([(r1, ends, one), (r2, ends, two)], classes)
    assert cues["bow"]["performances"] == 2 and cues["wave"]["performances"] == 1
    assert cues["bow"]["median_peak"] == pytest.approx(0.5)        # median of 0.4 and 0.6
    assert cues["wave"]["median_peak"] == pytest.approx(0.7)
    quiet_one = ~(((t >= 8) & (t <= 14)) | ((t >= 28) & (t <= 34)))
    assert cues["bow"]["ordinary_q999"] == pytest.approx(round(float(np.quantile(one[quiet_one, 1], 0.999)), 4))
    assert cues["bow"]["ordinary_q999"] > 0.5                      # the 0.95 in ordinary movement shows
    assert cues["wave"]["ordinary_q999"] == pytest.approx(0.1)


def test_a_fit_with_mining_reports_what_it_added_and_each_take_as_a_model_that_never_saw_it_scores_it(
        takes, monkeypatch):
    from bridge.recognition import classifiers
    scored = []
    real = classifiers.take_hops
    monkeypatch.setattr(classifiers, "take_hops", lambda m, r: scored.append((id(r), m)) or real(m, r))
    model = fit_recordings("minirocket", takes, dict(GESTURES), estimate=False, mine_rounds=1, mine_level=0.1)
    assert model.summary["hard_negatives"] > 0
    assert model.summary["recordings"] == 2
    assert sorted(r for r, _ in scored) == sorted(id(r) for r in takes)   # each take scored once ...
    assert scored[0][1] is not scored[1][1] and all(m is not model for _, m in scored)   # ... by its own fold's model
    cues = model.summary["held_out_cues"]
    performed = {}
    for r in takes:
        for iv in r.intervals:
            performed[iv.label] = performed.get(iv.label, 0) + 1
    assert {c: v["performances"] for c, v in cues.items()} == performed
    assert all(0 <= v["median_peak"] <= 1 and 0 <= v["ordinary_q999"] <= 1 for v in cues.values())


def test_no_held_out_figures_when_no_fold_model_saw_another_of_the_wearers_takes(takes):
    """One take of the wearer beside other people's: the take's fold model knows only the
    others, so its figures would describe a stranger's model, not this wearer's."""
    others = [take(5)]
    model = fit_recordings("minirocket", takes[:1], dict(GESTURES), estimate=False, mine_rounds=1, mine_level=0.1,
                           others=others)
    assert "held_out_cues" not in model.summary


def test_held_out_gates_lower_only_weak_quiet_gestures():
    """The rule in numbers: below 0.65 median peak and at most 0.2 in ordinary movement, the
    threshold comes down to the peak (never below 0.45) on 3 of 5; anything else keeps the default."""
    from bridge.decisions.gate import gate_settings_for, held_out_gates
    kinds = {"a": "gesture", "b": "gesture", "c": "gesture", "d": "gesture", "e": "posture", "f": "gesture"}
    cues = {"a": {"median_peak": 0.55, "ordinary_q999": 0.2},     # weak, quiet: 0.55 on 3 of 5
            "b": {"median_peak": 0.3, "ordinary_q999": 0.05},     # very weak: the floor
            "c": {"median_peak": 0.55, "ordinary_q999": 0.21},    # fires in ordinary movement: default
            "d": {"median_peak": 0.65, "ordinary_q999": 0.0},     # strong enough: default
            "e": {"median_peak": 0.5, "ordinary_q999": 0.0},      # a posture: default
            "f": {"median_peak": None, "ordinary_q999": 0.0}}     # no figure: default
    gates = held_out_gates(cues, kinds)
    assert gates == {"a": {"threshold": 0.55, "agree_k": 3}, "b": {"threshold": 0.45, "agree_k": 3}}
    table = gate_settings_for(list(kinds), gates, kinds)
    assert (table["a"].threshold, table["a"].agree_k, table["a"].agree_n) == (0.55, 3, 5)
    assert table["a"].rearm_below == 0.3 and table["c"].threshold == 0.65 and table["c"].agree_k == 4
