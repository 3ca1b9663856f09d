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


def _troupe_like(rng, n_null=80):
    """Two gestures, and null windows that are slow wandering (like fidgeting) near gesture size."""
    t = np.linspace(0, np.pi, 50)
    base = {"up": np.sin(t), "down": -np.sin(t)}
    X = [base[c][None] + 0.05 * rng.normal(size=(1, 50)) for c in ("up", "down") for _ in range(5)]
    y = list(np.repeat(["up", "down"], 5))
    for _ in range(n_null):
        X.append(np.cumsum(rng.normal(scale=0.08, size=(1, 50)), axis=1))
        y.append("null")
    return np.stack(X), np.array(y), base


def test_null_windows_become_null_templates_and_cap_the_thresholds():
    rng = np.random.default_rng(5)
    X, y, base = _troupe_like(rng)
    with_null = fit_cases("dtw", X, y, ["up", "down"], band=0.1, null_templates=20)
    without = fit_cases("dtw", X[y != "null"], y[y != "null"], ["up", "down"], band=0.1)
    assert with_null.null_templates.shape == (20, 1, 50) and without.null_templates.shape == (0, 1, 50)
    assert with_null.thresholds.shape == (2,)
    # Capped by the null windows' distances, never looser than the templates' own rule.
    assert (with_null.thresholds <= without.thresholds[0] + 1e-12).all()
    # Fresh wandering (none of the gestures) goes to null; the gestures are still found.
    wander = np.stack([np.cumsum(rng.normal(scale=0.08, size=(1, 50)), axis=1) for _ in range(40)])
    p = predict_proba(with_null, np.concatenate([wander, np.stack([base["up"][None], base["down"][None]])]))
    assert (p[:40].argmax(axis=1) == 0).mean() >= 0.9
    assert list(p[40:].argmax(axis=1)) == [1, 2]


def test_live_recogniser_matches_batch_scores_with_null_templates():
    from bridge.recognition.classifiers import DtwRecogniser, scores as batch_scores
    from bridge.recognition.linear import probabilities
    rng = np.random.default_rng(6)
    X, y, _ = _troupe_like(rng, 60)
    model = fit_cases("dtw", X, y, ["up", "down"], band=0.1, null_templates=10, stream="level", rate_hz=25.0)
    stream = np.concatenate([X[i, 0] for i in (0, 20, 7, 30)])[:, None]
    rec = DtwRecogniser(model)
    ends, live = rec.push(stream, np.zeros_like(stream))
    windows = np.stack([stream[e - 50:e, :].T for e in ends])
    np.testing.assert_allclose(live, probabilities(batch_scores(model, windows), model.temperature), atol=1e-12)
    assert rec.computed <= rec.offered


def test_a_single_threshold_file_gives_the_same_probabilities(tmp_path):
    # Files written before per-class thresholds hold one threshold and scores in distance
    # units; the loader divides scores and temperature alike, which changes no probability.
    import json
    import zipfile
    from bridge.recognition import load_model
    from bridge.recognition.dtw import per_class_min
    from bridge.recognition.linear import probabilities
    rng = np.random.default_rng(7)
    X, y, base = _troupe_like(rng, 0)
    model = fit_cases("dtw", X, y, ["up", "down"], band=0.1, rate_hz=25.0)
    path = model.save(tmp_path / "new.npz")
    old = tmp_path / "old.npz"
    threshold, temperature = 0.9, 0.05
    with zipfile.ZipFile(path) as src, zipfile.ZipFile(old, "w") as dst:
        for name in src.namelist():
            if name in ("thresholds.npy", "null_templates.npy"):
                continue
            data = src.read(name)
            if name == "meta_json.npy":
                meta = json.loads(np.load(__import__("io").BytesIO(data)).tobytes())
                for key in ("null_scale", "reject", "n_null_templates"):
                    meta.pop(key)
                meta.update(threshold=threshold, temperature=temperature)
                buf = __import__("io").BytesIO()
                np.save(buf, np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8))
                data = buf.getvalue()
            dst.writestr(name, data)
    loaded = load_model(old)
    q = np.stack([base["up"][None], base["down"][None], 3 + base["up"][None]])
    d = per_class_min(distance_matrix(q, X, loaded.radius), loaded.template_class, 2)
    old_scores = np.concatenate([np.full((3, 1), -threshold), -d], axis=1)   # the old formula
    np.testing.assert_allclose(predict_proba(loaded, q), probabilities(old_scores, temperature), rtol=1e-9, atol=1e-12)


def test_a_class_with_one_template_does_not_flatten_the_probabilities():
    # A gesture recorded once has no leave-one-out distance to its own class; it must not
    # enter the temperature fit (it used to drive the temperature to its bound, e^9).
    rng = np.random.default_rng(8)
    X, y, base = _troupe_like(rng, 80)
    X = np.concatenate([X, np.cos(np.linspace(0, 3 * np.pi, 50))[None, None]])
    y = np.append(y, "twist")
    model = fit_cases("dtw", X, y, ["up", "down", "twist"], band=0.1, null_templates=20)
    assert model.temperature < 10.0
    p = predict_proba(model, np.stack([base["up"][None], base["down"][None]]))
    assert list(p.argmax(axis=1)) == [1, 2] and (p.max(axis=1) > 0.5).all()
    single = fit_cases("dtw", X[[0, 5]], y[[0, 5]], ["up", "down"], band=0.1)   # one template each, no null
    assert single.temperature == 1.0 and single.summary["leave_one_out_accuracy"] is None


@pytest.mark.parametrize("n_ch, radius, hop", [(8, 20, 5), (3, 4, 1), (2, 0, 7), (1, 39, 3)])
def test_stream_search_equals_the_exhaustive_search_bit_for_bit(n_ch, radius, hop):
    # The lower-bound cascade (LB_Kim, LB_Keogh both ways; Rakthanmanon et al., KDD 2012),
    # the diagonal-path upper bound, early abandoning and the costs kept over hops must not
    # change a single distance: the exhaustive search computes every template in full.
    from bridge.recognition.dtw import StreamCosts
    rng = np.random.default_rng(n_ch * 100 + radius)
    n = 40
    templates = rng.normal(size=(15, n_ch, n)).cumsum(axis=2)
    cls = np.repeat(np.arange(5), 3)
    stream = rng.normal(size=(n_ch, n + 30 * hop)).cumsum(axis=1)
    templates[4] = stream[:, 10:10 + n] + 0.01  # one near match, so abandoning has work to do
    up, lo = envelope(templates, radius)
    costs = StreamCosts(templates, radius)
    pruned_some = False
    for start in range(0, stream.shape[1] - n + 1, hop):
        q = stream[:, start:start + n]
        got, computed = class_distances_pruned(q, templates, cls, 5, radius, up, lo, costs.band(start, q))
        full = per_class_min(distance_matrix(q[None], templates, radius), cls, 5)[0]
        np.testing.assert_array_equal(got, full)
        pruned_some |= computed < len(templates)
    assert pruned_some


def test_abandoning_only_drops_pairs_above_their_bound():
    from bridge.recognition.dtw import band_dtw
    rng = np.random.default_rng(9)
    q = rng.normal(size=(6, 2, 50)).cumsum(axis=2)
    t = rng.normal(size=(6, 2, 50)).cumsum(axis=2)
    exact = band_dtw(q, t, 5)
    bound = exact * np.array([0.5, 2.0, 1.0, 0.99, 1.01, np.inf])
    got = band_dtw(q, t, 5, bound)
    keep = exact <= bound
    np.testing.assert_array_equal(got[keep], exact[keep])
    # above the bound: abandoned (inf) once a whole row exceeds it, else computed in full
    assert (np.isinf(got[~keep]) | (got[~keep] == exact[~keep])).all() and np.isinf(got[0])
