"""Dynamic time warping distances, lower bounds, pruning and rejection."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from bridge.recognition.classifiers import fit_cases, predict_proba
from bridge.recognition.dtw import (
    band_radius, class_distances_pruned, distance_matrix, dtw_cost, envelope, lb_keogh, per_class_min,
)


def reference_dtw(q, t, r):
    """Textbook O(n²) recursion (Sakoe & Chiba 1978), squared cost summed over channels."""
    n = q.shape[1]
    D = np.full((n + 1, n + 1), np.inf)
    D[0, 0] = 0.0
    for i in range(n):
        for j in range(max(0, i - r), min(n, i + r + 1)):
            c = ((q[:, i] - t[:, j]) ** 2).sum()
            D[i + 1, j + 1] = c + min(D[i, j], D[i, j + 1], D[i + 1, j])
    return D[n, n]


@pytest.mark.parametrize("radius", [0, 1, 3, 11])
def test_matches_the_textbook_recursion(radius):
    # Definition of DTW with a Sakoe–Chiba band: common practice, no source beyond the
    # 1978 paper's recursion, written out plainly above.
    rng = np.random.default_rng(radius)
    q = rng.normal(size=(2, 12))
    t = rng.normal(size=(5, 2, 12))
    got = dtw_cost(q[None], t, radius)
    np.testing.assert_allclose(got, [reference_dtw(q, x, radius) for x in t], rtol=1e-12)


def test_zero_band_is_squared_euclidean():
    rng = np.random.default_rng(1)
    q, t = rng.normal(size=(3, 2, 30)), rng.normal(size=(4, 2, 30))
    d = distance_matrix(q, t, 0)
    np.testing.assert_allclose(d, np.sqrt(((q[:, None] - t[None]) ** 2).sum(axis=(2, 3))), rtol=1e-12)


def test_band_radius():
    assert band_radius(150, 1.0) == 149 and band_radius(150, 0.0) == 0 and band_radius(200, 0.1) == 20
    with pytest.raises(ValueError):
        band_radius(10, 1.5)


@settings(max_examples=40, deadline=None)
@given(arrays(np.float64, (2, 16), elements=st.floats(-5, 5)), arrays(np.float64, (3, 2, 16), elements=st.floats(-5, 5)),
       st.integers(0, 15))
def test_lb_keogh_never_exceeds_dtw(q, t, r):
    # Keogh & Ratanamahatana 2005, "Exact indexing of dynamic time warping": LB_Keogh is a
    # lower bound of banded DTW; for dependent multivariate DTW the per-channel sum is one
    # too (Rakthanmanon et al. 2012 use the same envelope argument).
    up, lo = envelope(t, r)
    assert (lb_keogh(q, up, lo) <= dtw_cost(q[None], t, r) * (1 + 1e-9) + 1e-9).all()


def test_pruned_class_distances_equal_the_full_search():
    rng = np.random.default_rng(2)
    templates = rng.normal(size=(12, 3, 40)).cumsum(axis=2)
    cls = np.repeat(np.arange(4), 3)
    up, lo = envelope(templates, 4)
    for _ in range(5):
        q = rng.normal(size=(3, 40)).cumsum(axis=1)
        got, computed = class_distances_pruned(q, templates, cls, 4, 4, up, lo)
        full = per_class_min(distance_matrix(q[None], templates, 4), cls, 4)[0]
        np.testing.assert_allclose(got, full, rtol=1e-12)
        assert 4 <= computed <= 12


def test_rejection_sends_strangers_to_null():
    rng = np.random.default_rng(3)
    base = {"up": np.sin(np.linspace(0, np.pi, 50)), "down": -np.sin(np.linspace(0, np.pi, 50))}
    X = np.stack([base[c][None] + 0.05 * rng.normal(size=(1, 50)) for c in ("up", "down") for _ in range(4)])
    y = np.repeat(["up", "down"], 4)
    model = fit_cases("dtw", X, y, ["up", "down"], band=0.1)
    assert model.classes == ("null", "up", "down")
    queries = np.stack([base["up"][None], base["down"][None], 5 + base["up"][None]])
    p = predict_proba(model, queries)
    assert list(p.argmax(axis=1)) == [1, 2, 0]
