"""Hard-negative mining: the ordinary movement a model mistakes for a gesture joins the null class."""

import numpy as np
import pytest

from bridge.garment import GESTURES, Jacket, training_script
from bridge.recognition.classifiers import fit_recordings, hard_negatives, window_scores
from bridge.recognition.linear import probabilities
from bridge.recognition.training import label_windows
from bridge.sources import Recording


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


# The mining tests check what mining adds and how many fits it makes, not the model's
# quality: fewer convolution features than the default keep those fits short.
FEATURES = 840


@pytest.fixture(scope="module")
def mined(takes):
    """A fit of both takes with one round of mining, and the number of cases of each
    ``fit_cases`` call it made (one fit shared by the tests below)."""
    from bridge.recognition import classifiers
    calls = []
    real = classifiers.fit_cases
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(classifiers, "fit_cases", lambda *a, **k: calls.append(len(a[1])) or real(*a, **k))
        model = fit_recordings("minirocket", takes, dict(GESTURES), estimate=False, mine_rounds=1, mine_level=0.1,
                               n_features=FEATURES)
    return model, calls


def test_a_fit_with_mining_reports_what_it_added(mined):
    model, _ = mined
    assert model.summary["hard_negatives"] > 0
    assert model.summary["recordings"] == 2


def test_ordinary_takes_must_hold_no_labels(takes):
    with pytest.raises(ValueError, match="no labelled gestures"):
        fit_recordings("minirocket", takes[:1], dict(GESTURES), ordinary=takes[1:])


def test_mining_fits_once_per_fold_and_once_after(mined, takes, monkeypatch):
    """With mining, the model is fitted once per mining fold and once on everything found:
    no full fit is made first and thrown away (it cost a fifth of a check-in fit). The model
    is the one a fit of the final windows gives."""
    from bridge.recognition import classifiers
    model, calls = mined
    assert len(calls) == 2 + 1                                   # two recordings: two folds, then the fit
    assert calls[-1] == model.summary["cases"] == max(calls)     # the last fit holds every window and the mined ones
    calls = []
    real = classifiers.fit_cases
    monkeypatch.setattr(classifiers, "fit_cases", lambda *a, **k: calls.append(len(a[1])) or real(*a, **k))
    fit_recordings("minirocket", takes, dict(GESTURES), estimate=False, mine_rounds=0, n_features=FEATURES)
    assert len(calls) == 1
