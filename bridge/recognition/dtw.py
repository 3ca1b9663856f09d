"""Few-shot templates matched by dynamic time warping (DTW), with rejection thresholds.

Distances are dependent multivariate DTW: the cost of aligning query sample i with
template sample j is the squared difference summed over channels, the path cost is the
sum along the path, and alignments are confined to a Sakoe–Chiba band of ``radius``
samples around the diagonal. Reported distances are the square root of the best path
cost, in the unit of the series.

Each query's distance to a class is its distance to the nearest template of that class.
LB_Keogh lower bounds skip templates that cannot come nearer than the class's best so far.
Null can have templates too (windows of the unlabelled stretches), matched the same way.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import maximum_filter1d, minimum_filter1d

from .linear import expected_calibration_error, fit_temperature, probabilities

REJECT_OFF = 1e9  # null's floor when rejection is off: −1e9 is never chosen


def band_radius(length: int, band: float) -> int:
    """Sakoe–Chiba radius in samples for a band given as a fraction of the length.

    band 1.0 is unconstrained DTW (radius length − 1); band 0 is the Euclidean alignment.
    """
    if not 0.0 <= band <= 1.0:
        raise ValueError(f"band must be a fraction 0..1 of the length, got {band}")
    return int(min(length - 1, np.floor(band * length)))


def dtw_cost(query: np.ndarray, templates: np.ndarray, radius: int) -> np.ndarray:
    """Best warping-path cost between many pairs at once.

    query: (..., channels, n) and templates: (..., channels, n), broadcastable in the
    leading axes; returns the path cost (sum of squared differences, unit²) per pair.
    Both must have the same length n.

    Row by row, the recursion D[i,j] = c[i,j] + min(D[i−1,j−1], D[i−1,j], D[i,j−1]) is
    solved for a whole band row at once: with S the running sum of c along the row,
    D[i,j] = S[j] + min_{k≤j}(a[k] − S[k] + c[k]), a[k] = min(D[i−1,k−1], D[i−1,k]).
    """
    q = np.asarray(query, dtype=float)
    t = np.asarray(templates, dtype=float)
    n = q.shape[-1]
    if t.shape[-1] != n:
        raise ValueError(f"query has {n} samples but templates have {t.shape[-1]}")
    r = int(max(0, min(radius, n - 1)))
    lead = np.broadcast_shapes(q.shape[:-2], t.shape[:-2])
    prev = np.full(lead + (n + 1,), np.inf)  # prev[..., j+1] = D[i-1, j]; prev[..., 0] = D[i-1, -1]
    prev[..., 0] = 0.0
    cur = np.empty_like(prev)
    width = 2 * r + 1
    band = None
    if int(np.prod(lead, dtype=np.int64)) * q.shape[-2] * n * width <= 4_000_000:
        # all band costs at once: band[..., i, r + j - i] = cost of (i, j)
        tp = np.pad(t, [(0, 0)] * (t.ndim - 1) + [(r, r)])
        win = np.lib.stride_tricks.sliding_window_view(tp, width, axis=-1)     # (..., ch, n, width)
        diff = q[..., :, :, None] - win
        band = (diff * diff).sum(axis=-3)                                      # (..., n, width)
    for i in range(n):
        lo, hi = max(0, i - r), min(n, i + r + 1)
        if band is not None:
            c = band[..., i, lo - i + r:hi - i + r]
        else:
            diff = q[..., 0, i, None] - t[..., 0, lo:hi]      # (..., w), channels summed below
            c = diff * diff
            for ch in range(1, q.shape[-2]):
                diff = q[..., ch, i, None] - t[..., ch, lo:hi]
                c += diff * diff
        a = np.minimum(prev[..., lo:hi], prev[..., lo + 1:hi + 1])
        s = np.cumsum(c, axis=-1)
        a -= s
        a += c
        row = np.minimum.accumulate(a, axis=-1)
        row += s
        cur[...] = np.inf
        cur[..., lo + 1:hi + 1] = row
        prev, cur = cur, prev
    return prev[..., n].copy()


def distance_matrix(queries: np.ndarray, templates: np.ndarray, radius: int, chunk_pairs: int = 20_000) -> np.ndarray:
    """DTW distances (m, k) between queries (m, channels, n) and templates (k, channels, n)."""
    m, k = len(queries), len(templates)
    out = np.empty((m, k))
    rows = max(1, chunk_pairs // max(1, k))
    for a in range(0, m, rows):
        q = queries[a:a + rows, None]
        out[a:a + rows] = np.sqrt(dtw_cost(q, templates[None], radius))
    return out


def envelope(templates: np.ndarray, radius: int) -> tuple[np.ndarray, np.ndarray]:
    """Upper and lower running envelopes (k, channels, n) of templates over ±radius samples."""
    size = 2 * radius + 1
    return (maximum_filter1d(templates, size, axis=-1, mode="nearest"),
            minimum_filter1d(templates, size, axis=-1, mode="nearest"))


def lb_keogh(query: np.ndarray, upper: np.ndarray, lower: np.ndarray) -> np.ndarray:
    """LB_Keogh lower bounds (k,) of the DTW path cost of query (channels, n) to each template.

    Sum over channels and samples of the squared excursion of the query outside the
    template's envelope; never more than the banded DTW cost (unit²).
    """
    above = np.maximum(query[None] - upper, 0.0)
    below = np.maximum(lower - query[None], 0.0)
    e = above + below
    return np.einsum("kcn,kcn->k", e, e)


def class_distances_pruned(query: np.ndarray, templates: np.ndarray, template_class: np.ndarray, n_classes: int,
                           radius: int, upper: np.ndarray, lower: np.ndarray) -> tuple[np.ndarray, int]:
    """Exact nearest-template distance per class (n_classes,) for one query, with pruning.

    Round one computes, per class, the template with the lowest LB_Keogh bound; round two
    only the templates whose bound is below their class's distance so far. Classes with
    no template get inf. Returns (distances, number of templates whose DTW was computed).
    """
    lb = lb_keogh(query, upper, lower)
    best = np.full(n_classes, np.inf)
    first = []
    for c in np.unique(template_class):
        idx = np.flatnonzero(template_class == c)
        first.append(idx[np.argmin(lb[idx])])
    first = np.array(first)
    d1 = dtw_cost(query[None], templates[first], radius)
    np.minimum.at(best, template_class[first], d1)
    rest = np.setdiff1d(np.arange(len(templates)), first)
    rest = rest[lb[rest] < best[template_class[rest]]]
    if len(rest):
        d2 = dtw_cost(query[None], templates[rest], radius)
        np.minimum.at(best, template_class[rest], d2)
    return np.sqrt(best), len(first) + len(rest)


def scores_from_distances(class_dist: np.ndarray, thresholds, null_dist: np.ndarray | None = None,
                          null_scale: float = 1.0, reject: bool = True) -> np.ndarray:
    """Scores (m, 1 + classes) from nearest-template distances, on one scale for every class.

    class_dist: (m, classes); thresholds: (classes,) or a scalar, the distance at which
    a class's template stops counting as a match. A class scores minus its distance over
    its threshold; null scores −1 (nothing within reach), or more when a null template
    is near: −min(1, null_dist / null_scale). So a query is null unless some class is
    nearer than its threshold and, relative to the scales, nearer than the null templates.
    Without ``reject`` the floor is −REJECT_OFF: only null templates can make null win.
    """
    class_dist = np.asarray(class_dist, dtype=float)
    floor = 1.0 if reject else REJECT_OFF
    null = np.full((class_dist.shape[0], 1), -floor)
    if null_dist is not None:
        null[:, 0] = -np.minimum(floor, np.asarray(null_dist, dtype=float) / null_scale)
    return np.concatenate([null, -class_dist / np.asarray(thresholds, dtype=float)], axis=1)


def per_class_min(dist: np.ndarray, template_class: np.ndarray, n_classes: int) -> np.ndarray:
    """Nearest-template distance per class (m, n_classes) from distances (m, templates)."""
    out = np.full((dist.shape[0], n_classes), np.inf)
    for c in range(n_classes):
        sel = template_class == c
        if sel.any():
            out[:, c] = dist[:, sel].min(axis=1)
    return out


def spread(n: int, k: int) -> np.ndarray:
    """Indices of k items spread evenly over n (all n when k ≥ n)."""
    return np.arange(n) if k >= n else np.unique(np.linspace(0, n - 1, k).round().astype(int))


def fit_templates(X: np.ndarray, y: np.ndarray, n_classes: int, band: float = 0.1, reject: bool = True,
                  margin: float = 0.25, null_X: np.ndarray | None = None, null_templates: int = 30,
                  null_quantile: float = 0.005, null_reach: float = 0.8) -> dict:
    """Fit the template matcher.

    X: (m, channels, n) template cases; y: (m,) class indices 1..n_classes−1 (0 is null and
    has no templates). null_X: optional (p, channels, n) cases of "none of these", from
    the unlabelled stretches of recordings.

    Thresholds, one per class: (1 + margin) times the largest leave-one-out distance of
    a template to its nearest other template of the same class, over all classes (few
    templates make one class's figure noisy). With null cases, each class's threshold is
    also capped at the ``null_quantile`` quantile of the null cases' distances to that
    class, so that about that fraction of null windows come within reach of it.

    Null templates: up to ``null_templates`` null cases, spread evenly, are kept as
    templates of null, so that movement that is none of the gestures (walking, fidgeting)
    is matched as such rather than by the least unlike gesture. Their scale is the
    ``null_reach`` quantile of each one's distance to its nearest other null template.
    The remaining null cases set the thresholds (all of them when there are too few).

    The temperature is fitted on leave-one-out scores of the templates and the scores of
    the null cases. Returns the arrays and settings.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=int)
    if X.ndim != 3 or len(X) != len(y):
        raise ValueError("templates must be (m, channels, length) with one label each")
    if (y <= 0).any() or (y >= n_classes).any():
        raise ValueError("template labels must be class indices 1..n_classes-1 (0 is null)")
    if not 0.0 <= null_quantile <= 1.0 or not 0.0 < null_reach <= 1.0:
        raise ValueError("null_quantile must be in 0..1 and null_reach in (0, 1]")
    n = X.shape[-1]
    radius = band_radius(n, band)
    k = n_classes - 1
    dist = distance_matrix(X, X, radius)
    np.fill_diagonal(dist, np.inf)
    loo = per_class_min(dist, y - 1, k)                       # (m, k), self excluded
    own = loo[np.arange(len(y)), y - 1]
    finite_own = own[np.isfinite(own)]
    thresholds = np.full(k, max((1.0 + margin) * finite_own.max(), 1e-12) if finite_own.size else 1.0)
    null_X = np.empty((0,) + X.shape[1:]) if null_X is None else np.asarray(null_X, dtype=float)
    keep = spread(len(null_X), null_templates) if len(null_X) >= 2 * max(1, null_templates) else np.arange(0)
    nulls = null_X[keep]
    rest = null_X[np.setdiff1d(np.arange(len(null_X)), keep)]
    null_scale = 1.0
    if len(nulls) >= 2:
        nn = distance_matrix(nulls, nulls, radius)
        np.fill_diagonal(nn, np.inf)
        null_scale = float(np.quantile(nn.min(axis=1), null_reach))
        if not np.isfinite(null_scale) or null_scale <= 0:
            nulls, null_scale = nulls[:0], 1.0
    to_null = (lambda q: distance_matrix(q, nulls, radius).min(axis=1)) if len(nulls) else (lambda q: None)
    nd = per_class_min(distance_matrix(rest, X, radius), y - 1, k) if len(rest) else None
    if reject and nd is not None:
        thresholds = np.minimum(thresholds, np.maximum(np.quantile(nd, null_quantile, axis=0), 1e-12))
    # A template alone in its class has no leave-one-out score for it: left out of the
    # temperature fit, where its −∞ would drive the temperature to its bound (flat output).
    peer = np.isfinite(own)
    held = scores_from_distances(np.where(np.isfinite(loo), loo, 1e6)[peer], thresholds, to_null(X[peer]), null_scale,
                                 reject)
    target = y[peer]
    if nd is not None:
        held = np.concatenate([held, scores_from_distances(nd, thresholds, to_null(rest), null_scale, reject)])
        target = np.concatenate([target, np.zeros(len(nd), dtype=int)])
    temperature = fit_temperature(held, target, bounds=(-9.0, 9.0)) if len(target) else 1.0
    prob = probabilities(held, temperature)
    return {
        "templates": X, "template_class": y - 1, "radius": radius, "thresholds": thresholds,
        "null_templates": nulls, "null_scale": null_scale, "temperature": temperature,
        "summary": {
            "leave_one_out_accuracy": round(float((prob.argmax(axis=1) == target).mean()), 4) if len(target) else None,
            "calibration_error": round(expected_calibration_error(prob, target), 4) if len(target) else None,
            "templates": int(len(y)), "null_templates": int(len(nulls)), "band": band, "reject": bool(reject),
        },
    }
