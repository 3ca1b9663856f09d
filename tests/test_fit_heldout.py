"""Fit-time held-out figures of minirocket on takes: grouped folds, never neighbouring windows.

Windows of a take overlap their neighbours (a 2 s window every 0.1 s shares 95 % of its
samples), so leave-one-out scores are nearly in-sample. On takes whose labels have
nothing to do with the signal, an honest held-out accuracy sits near chance, and the
calibration temperature must come from the same grouped scores.
"""

import numpy as np
import pytest

from bridge.recognition.classifiers import class_figures, fit_recordings, recording_windows, window_splits, windows_to_cases
from bridge.recognition.linear import fit_temperature
from bridge.recognition.minirocket import minirocket_transform
from bridge.recognition.ridge import fit_ridge_heldout
from bridge.recognition.training import TrainingSettings
from bridge.sources.recording import Label, Recording

KINDS = {"a": "posture", "b": "posture"}


def _noise_take(seed: int, seconds: float = 120.0, rate_hz: float = 50.0) -> Recording:
    """Random-walk frequencies of three channels; postures a and b on a fixed timetable
    that does not depend on the signal (invented data: labels the signal cannot predict)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * rate_hz)
    freq = 2.0e5 + np.cumsum(rng.normal(size=(n, 3)), axis=0) * 50.0
    labels = tuple(Label(s, s + 8.0, "ab"[i % 2]) for i, s in enumerate(np.arange(4.0, seconds - 10.0, 12.0)))
    return Recording(rate_hz, ("c0", "c1", "c2"), np.arange(n) / rate_hz, freq, labels)


def test_one_take_is_held_out_by_stretches_not_neighbours():
    settings = TrainingSettings(window_s=2.0, hop_s=0.1)
    model = fit_recordings("minirocket", [_noise_take(1)], KINDS, settings, n_features=840)
    s = model.summary
    # Before: "leave one out accuracy" near 1.0 from the overlapping neighbours.
    assert "leave_one_out_accuracy" not in s
    assert s["held_out_by"] == "stretches of one recording" and s["folds"] >= 2
    # Chance here is the share of the largest class, about 1/3 of the windows.
    assert s["cross_validated_window_accuracy"] < 0.75


def test_window_splits_keep_overlapping_windows_out_of_the_fit():
    ends = np.arange(100, 1100, 10)
    splits, by = window_splits(np.zeros(len(ends), int), ends, 100)
    assert by == "stretches of one recording" and len(splits) == 5
    assert np.array_equal(sum(h.astype(int) for h, _ in splits), np.ones(len(ends), int))
    for held, dropped in splits:
        fit_ends = ends[~dropped]
        gap = np.abs(fit_ends[:, None] - ends[held][None, :]).min()
        assert gap >= 100  # no window of the fit shares a sample with a held one
    splits, by = window_splits(np.array([0, 0, 1, 1, 2, 2]), np.arange(6), 100)
    assert by == "recording" and all(np.array_equal(h, d) for h, d in splits)


def test_temperature_and_figures_come_from_refits_without_each_take():
    """Held-out scores checked against explicit refits: the ridge estimator
    w = (ZᵀZ + λI)⁻¹ Zᵀ(T − mean T) on the fold's centred features (Hoerl & Kennard,
    Technometrics 12(1), 1970), the bias unpenalised."""
    takes = [_noise_take(s, seconds=60.0) for s in (2, 3, 4)]
    settings = TrainingSettings(window_s=2.0, hop_s=0.1)
    model = fit_recordings("minirocket", takes, KINDS, settings, n_features=840, cases_per_class=None,
                           mine_rounds=0)  # the windows as given: mining would add some
    assert model.summary["held_out_by"] == "recording" and model.summary["folds"] == 3
    w, y, g, _, _, _, e = recording_windows(takes, KINDS, settings, with_ends=True)
    f = minirocket_transform(model.params, windows_to_cases(w, model.stream))
    z = (f - model.feature_mean) / model.feature_scale
    m = len(y)
    target = -np.ones((m, 3))
    target[np.arange(m), y] = 1.0
    lam = model.summary["ridge_alpha"] * m
    held = np.empty_like(target)
    for take in range(3):
        fit, out = g != take, g == take
        zc = z[fit] - z[fit].mean(axis=0)
        t_mean = target[fit].mean(axis=0)
        coef = np.linalg.solve(zc.T @ zc + lam * np.eye(z.shape[1]), zc.T @ (target[fit] - t_mean))
        held[out] = (z[out] - z[fit].mean(axis=0)) @ coef + t_mean
    splits, _ = window_splits(g, e, w.shape[2])
    _, _, _, closed = fit_ridge_heldout(z, y, 3, splits, alphas=[model.summary["ridge_alpha"]])
    np.testing.assert_allclose(closed, held, atol=1e-8)
    assert model.temperature == pytest.approx(fit_temperature(held, y, bounds=(-9.0, 5.0)), rel=1e-6)
    assert model.summary["cross_validated_window_accuracy"] == pytest.approx((held.argmax(1) == y).mean(), abs=1e-4)
    # per class, from the same held-out scores (argmax is unchanged by the temperature)
    for j, name in ((1, "a"), (2, "b")):
        c = model.summary["held_out_by_class"][name]
        assert c["recall"] == pytest.approx((held[y == j].argmax(1) == j).mean(), abs=1e-4)
        assert c["from_null"] == pytest.approx((held[y == 0].argmax(1) == j).mean(), abs=1e-5)


def test_class_figures_by_hand():
    prob = np.array([[0.9, 0.1, 0.0], [0.2, 0.7, 0.1], [0.1, 0.1, 0.8],   # null, null taken for a, a taken for b
                     [0.1, 0.8, 0.1], [0.6, 0.2, 0.2],                    # a right, a missed (taken for null)
                     [0.0, 0.1, 0.9]])                                    # b right
    y = np.array([0, 0, 1, 1, 1, 2])
    figs = class_figures(prob, y, ("null", "a", "b"))
    assert figs == {"a": {"recall": pytest.approx(1 / 3, abs=1e-4), "from_null": 0.5},
                    "b": {"recall": 1.0, "from_null": 0.0}}
    assert class_figures(prob[:2], y[:2], ("null", "a", "b"))["b"]["recall"] is None   # no window of b


def test_one_take_of_cues_beside_ordinary_takes_is_held_out_by_stretches():
    """One take holds every cue, two others only ordinary movement: folds by recording
    would hold the cue take out whole and fit a fold that never saw a cue (its scores,
    and the temperature fitted on them, then say nothing of the cues). Each recording is
    cut into stretches instead, and every fold's fit keeps windows of every class."""
    cues = _noise_take(1)
    quiet = [Recording(r.rate_hz, r.channel_names, r.t_s, r.freq_hz, ()) for r in (_noise_take(5), _noise_take(6))]
    settings = TrainingSettings(window_s=2.0, hop_s=0.1)
    w, y, g, _, _, spec, e = recording_windows([cues, *quiet], KINDS, settings, with_ends=True)
    assert window_splits(g, e, spec.length)[1] == "recording"            # without labels: as before
    splits, by = window_splits(g, e, spec.length, labels=y)
    assert by == "stretches of each recording"
    assert np.array_equal(sum(h.astype(int) for h, _ in splits), np.ones(len(y), int))
    for held, dropped in splits:
        assert set(np.unique(y[~dropped])) == {0, 1, 2}                  # every class left to fit on
        assert set(np.unique(g[held])) == {0, 1, 2}                      # a stretch of every recording
        for take in range(3):
            mine = g == take
            if (held & mine).any() and (~dropped & mine).any():
                gap = np.abs(e[~dropped & mine][:, None] - e[held & mine][None, :]).min()
                assert gap >= spec.length                                # no shared sample within a take
    model = fit_recordings("minirocket", [cues], KINDS, settings, n_features=840, ordinary=quiet)
    assert model.summary["held_out_by"] == "stretches of each recording"


def test_windows_are_cut_only_where_selected_and_equal_the_full_cut():
    """Selecting windows before cutting them (an hour of ordinary takes would otherwise
    take about a gigabyte) gives the very windows of the full cut."""
    from bridge.recognition.training import condition_recording, label_windows
    from bridge.recognition.windows import all_windows
    take = _noise_take(2, seconds=60.0)
    settings = TrainingSettings(window_s=2.0, hop_s=0.1)
    w, y, g, classes, conditioning, spec, e = recording_windows([take], KINDS, settings, with_ends=True)
    streams = condition_recording(take, conditioning)
    full, ends = all_windows(spec, streams[0], streams[1])
    labels = label_windows(ends, spec.length, take.rate_hz, take.intervals, classes, KINDS)
    assert np.array_equal(w, full[labels >= 0]) and np.array_equal(e, ends[labels >= 0])
    ws, ys, _, _, _, _, es = recording_windows([take], KINDS, settings, with_ends=True,
                                               select=lambda y, g: np.flatnonzero(y == 1)[::3])
    pick = np.flatnonzero(y == 1)[::3]
    assert np.array_equal(ws, w[pick]) and np.array_equal(es, e[pick]) and set(ys) == {1}


@pytest.mark.parametrize("d", [10, 40, 300])   # rank below a fold's dropped cases, near it, above it
def test_dropped_stretches_and_every_penalty_match_explicit_refits(d):
    """Held-out scores of folds that drop more than they hold (a stretch and its
    neighbours), for every penalty of the grid, from the closed form against explicit
    ridge refits without each dropped set (Hoerl & Kennard, Technometrics 12(1), 1970:
    w = (ZᵀZ + λI)⁻¹ Zᵀ(T − mean T) on centred features, the bias unpenalised). The
    penalty chosen is the grid point of least held-out squared error."""
    rng = np.random.default_rng(7)
    m, k = 120, 3
    z = rng.normal(size=(m, d))
    y = rng.integers(0, k, size=m)
    z[:, :3] += 1.5 * np.eye(k)[y]                       # some signal, so a penalty wins
    target = -np.ones((m, k))
    target[np.arange(m), y] = 1.0
    splits = []
    for f in range(4):                                    # four stretches; each drops 5 neighbours more
        held = np.zeros(m, bool)
        held[30 * f:30 * f + 30] = True
        dropped = held.copy()
        dropped[max(0, 30 * f - 5):30 * f + 35] = True
        splits.append((held, dropped))
    alphas = [1e-3, 0.1, 1.0, 30.0]
    errs = []
    for alpha in alphas:
        lam = alpha * m
        want = np.empty_like(target)
        for held, dropped in splits:
            fit = ~dropped
            mu = z[fit].mean(axis=0)
            zc = z[fit] - mu
            t_mean = target[fit].mean(axis=0)
            coef = np.linalg.solve(zc.T @ zc + lam * np.eye(d), zc.T @ (target[fit] - t_mean))
            want[held] = (z[held] - mu) @ coef + t_mean
        _, _, _, got = fit_ridge_heldout(z, y, k, splits, alphas=[alpha])
        np.testing.assert_allclose(got, want, atol=1e-7)
        errs.append(((target - want) ** 2).mean())
    _, _, chosen, _ = fit_ridge_heldout(z, y, k, splits, alphas=alphas)
    assert chosen == alphas[int(np.argmin(errs))]


@pytest.mark.parametrize("d", [40, 300])   # features fewer than cases, and more
@pytest.mark.parametrize("grouped", [False, True])
def test_centring_in_place_gives_the_same_fit_to_the_bit(d, grouped):
    """`overwrite_z` (the fit's memory: no copy of the features) changes nothing of the
    result, and leaves the features centred as it says."""
    rng = np.random.default_rng(3)
    m, k = 120, 3
    z = rng.normal(loc=2.0, size=(m, d))
    y = rng.integers(0, k, size=m)
    z[:, :3] += 1.5 * np.eye(k)[y]
    splits = None
    if grouped:
        splits = [(np.arange(m) // 40 == f, np.abs(np.arange(m) - (40 * f + 20)) < 25) for f in range(3)]
    want = fit_ridge_heldout(z, y, k, splits)
    work = z.copy()
    got = fit_ridge_heldout(work, y, k, splits, overwrite_z=True)
    for a, b in zip(want, got):
        assert np.array_equal(a, b)
    np.testing.assert_array_equal(work, z - z.mean(axis=0))
    assert not np.array_equal(work, z)
