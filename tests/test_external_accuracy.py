"""Accuracy of each classifier on open archive data, against published figures.

Data: tests/data (see PROVENANCE.md). Accuracy is on the archive's fixed test split after
fitting on its train split; labels are the archive's. Fitting is deterministic (seed 0).
"""

from pathlib import Path

import numpy as np
import pytest

from bridge.recognition.classifiers import fit_cases, predict_proba
from bridge.sources.ts_format import read_ts, stack_cases

DATA = Path(__file__).parent / "data"


def load(name):
    X, y, meta = read_ts(DATA / f"{name}_TRAIN.ts")
    Xt, yt, _ = read_ts(DATA / f"{name}_TEST.ts")
    return stack_cases(X), y, stack_cases(Xt), yt, meta["class_labels"]


@pytest.fixture(scope="module")
def gunpoint():
    return load("GunPoint")


@pytest.fixture(scope="module")
def basicmotions():
    return load("BasicMotions")


def accuracy(model, Xt, yt, skip_null=False):
    p = predict_proba(model, Xt)
    assert p.shape == (len(Xt), len(model.classes))
    np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=1e-9)
    if skip_null:
        p = p[:, 1:]
        return float((np.array(model.classes[1:])[p.argmax(axis=1)] == yt).mean())
    return float((np.array(model.classes)[p.argmax(axis=1)] == yt).mean())


def test_dtw_full_window_1nn_on_gunpoint(gunpoint):
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("dtw", X, y, classes, band=1.0, reject=False)
    # UCR archive 2018, DataSummary.csv (Dau et al. 2019): GunPoint 1-NN DTW with a 100 %
    # warping window has test error 0.0933, i.e. accuracy 0.9067 (140/150).
    assert round(accuracy(model, Xt, yt), 4) == 0.9067


def test_euclidean_1nn_on_gunpoint(gunpoint):
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("dtw", X, y, classes, band=0.0, reject=False)
    # UCR archive 2018, DataSummary.csv (Dau et al. 2019): GunPoint 1-NN Euclidean distance
    # test error 0.0867, i.e. accuracy 0.9133 (137/150). A zero-width band is Euclidean.
    assert round(accuracy(model, Xt, yt), 4) == 0.9133


def test_dependent_dtw_on_basicmotions(basicmotions):
    X, y, Xt, yt, classes = basicmotions
    model = fit_cases("dtw", X, y, classes, band=1.0, reject=False)
    # Bagnall et al. 2018, "The UEA multivariate time series classification archive",
    # results table: BasicMotions DTW_D (dependent, full window) accuracy 0.975.
    # Quoted from memory of that table; our measured figure is 39/40.
    assert round(accuracy(model, Xt, yt), 4) == 0.975


def test_dtw_rejection_on_gunpoint_keeps_most_cases(gunpoint):
    # With rejection on, cases of known classes should rarely be sent to null; the
    # threshold comes from leave-one-out template distances. No external figure: a
    # behavioural check that the threshold is not absurdly tight.
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("dtw", X, y, classes, band=0.1)
    p = predict_proba(model, Xt)
    assert (p.argmax(axis=1) == 0).mean() < 0.1


def test_minirocket_on_gunpoint(gunpoint):
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("minirocket", X, y, classes)
    # Dempster, Schmidt & Webb 2021 (arXiv:2012.08791), per-dataset results: GunPoint mean
    # accuracy 0.9924 over 30 resamples. One split and one seed: we ask for >= 0.98
    # (measured 0.9933).
    assert accuracy(model, Xt, yt) >= 0.98


def test_minirocket_on_basicmotions(basicmotions):
    X, y, Xt, yt, classes = basicmotions
    model = fit_cases("minirocket", X, y, classes)
    # Published accuracy of the method on BasicMotions is 1.0 (multivariate results of the
    # method's authors, quoted in the brief and from memory); measured 1.0 here.
    assert accuracy(model, Xt, yt) == 1.0


def test_linear_window_features_well_above_chance(gunpoint, basicmotions):
    # Chance is 0.5 (GunPoint, 2 balanced classes) and 0.25 (BasicMotions, 4 balanced
    # classes), from the archive's class counts. Measured: GunPoint 0.8067, BasicMotions
    # 0.95. These features were designed for capacitance streams, not for these data.
    X, y, Xt, yt, classes = gunpoint
    assert accuracy(fit_cases("linear", X, y, classes), Xt, yt) >= 0.7
    X, y, Xt, yt, classes = basicmotions
    assert accuracy(fit_cases("linear", X, y, classes), Xt, yt) >= 0.85


def test_temperature_from_held_out_improves_test_likelihood(gunpoint):
    # Temperature scaling (Guo et al. 2017, "On calibration of modern neural networks"):
    # a temperature fitted on held-out (here leave-one-out) scores should give a lower
    # negative log-likelihood on the test split than the unscaled distances (T = 1).
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("dtw", X, y, classes, band=0.1, reject=False)
    from bridge.recognition.classifiers import scores
    from scipy.special import log_softmax
    s = scores(model, Xt)
    idx = np.array([model.classes.index(v) for v in yt])
    nll = lambda t: -log_softmax(s / t, axis=1)[np.arange(len(idx)), idx].mean()
    assert nll(model.temperature) < nll(1.0)
    assert 0.0 <= model.summary["calibration_error"] <= 1.0


# Convolution features with valid edges (no zero padding; what garment models use), on the
# same archive files: GunPoint from the UCR archive 2018 (Dau et al. 2019), BasicMotions
# from the UEA archive (Bagnall et al. 2018), see tests/data/PROVENANCE.md. These are our
# own measured figures, not published ones: the published figures above are for the
# paper's alternating padding. Measured with seed 0: GunPoint 1.0 (150/150), BasicMotions
# 1.0 (40/40); over seeds 1-5 GunPoint 0.9933-1.0 (mean 0.9973), BasicMotions 1.0. The floors
# sit a little below (one or two cases of slack).

def test_minirocket_valid_edges_on_gunpoint(gunpoint):
    X, y, Xt, yt, classes = gunpoint
    model = fit_cases("minirocket", X, y, classes, edges="valid")
    assert model.params.edges == "valid"
    assert accuracy(model, Xt, yt) >= 0.98


def test_minirocket_valid_edges_on_basicmotions(basicmotions):
    X, y, Xt, yt, classes = basicmotions
    model = fit_cases("minirocket", X, y, classes, edges="valid")
    assert accuracy(model, Xt, yt) >= 0.95
