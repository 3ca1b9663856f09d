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
    Both must have the same length n. See ``band_dtw`` for the recursion.
    """
    q = np.asarray(query, dtype=float)
    t = np.asarray(templates, dtype=float)
    n = q.shape[-1]
    if t.shape[-1] != n:
        raise ValueError(f"query has {n} samples but templates have {t.shape[-1]}")
    if q.shape[-2] != t.shape[-2]:
        raise ValueError(f"query has {q.shape[-2]} channels but templates have {t.shape[-2]}")
    lead = np.broadcast_shapes(q.shape[:-2], t.shape[:-2])
    shape = lead + q.shape[-2:]
    qf = np.broadcast_to(q, shape).reshape(-1, *q.shape[-2:])
    tf = np.broadcast_to(t, shape).reshape(-1, *q.shape[-2:])
    return band_dtw(qf, tf, radius).reshape(lead)


def _band_costs(q: np.ndarray, t: np.ndarray, r: int, rows: slice) -> np.ndarray:
    """Local costs (rows, 2r + 1, pairs) in band coordinates: entry w of row i is the
    squared difference, summed over channels in order, of query sample i and template
    sample j = i − r + w; 0 where j is outside the template (never on a path, see
    ``band_dtw``)."""
    p, n_ch, n = q.shape
    width = 2 * r + 1
    i = np.arange(n)[rows]
    tp = np.zeros((p, n_ch, n + 2 * r))
    tp[:, :, r:r + n] = t
    st = tp.strides
    view = np.lib.stride_tricks.as_strided(tp[:, :, i[0]:], (p, n_ch, len(i), width), st + (st[2],),
                                           writeable=False)                 # view[.., i, w] = tp[.., i + w]
    c = None
    for ch in range(n_ch):
        d = q[:, ch, i, None] - view[:, ch]
        c = d * d if c is None else c + d * d
    j = i[:, None] - r + np.arange(width)
    c *= (j >= 0) & (j < n)
    return np.ascontiguousarray(c.transpose(1, 2, 0))


def band_dtw(q: np.ndarray, t: np.ndarray, radius: int, bound: np.ndarray | None = None,
             costs: np.ndarray | None = None) -> np.ndarray:
    """Banded DTW path costs (pairs,) of queries q (pairs, channels, n) to templates t (same shape).

    Row by row, the recursion D[i,j] = c[i,j] + min(D[i−1,j−1], D[i−1,j], D[i,j−1]) is
    solved for a whole band row at once: with S the running sum of c along the row,
    D[i,j] = S[j] + min_{k≤j}(a[k] − S[k] + c[k]), a[k] = min(D[i−1,k−1], D[i−1,k]).
    Rows are kept in band coordinates (entry w of row i is column i − r + w), so both
    terms of a are plain shifts of the previous row. Columns before the template's
    start hold inf from row 0 on; those past its end hold values that only ever feed
    other columns past the end, never the answer D[n−1, n−1].

    bound: (pairs,) optional; a pair whose every entry of some row exceeds its bound
    is abandoned (every path crosses every row, so its cost exceeds the bound too) and
    gets inf. Without a bound (or inf) the cost is exact.

    costs: optional (n, 2r + 1, pairs), the local costs as ``_band_costs`` gives them
    (from ``StreamCosts`` in a stream); q and t then only give the shapes.
    """
    q = np.asarray(q, dtype=float)
    t = np.asarray(t, dtype=float)
    pairs, _, n = q.shape
    r = int(max(0, min(radius, n - 1)))
    width = 2 * r + 1
    out = np.full(pairs, np.inf)
    if pairs == 0:
        return out
    live = np.arange(pairs)
    bound = None if bound is None else np.asarray(bound, dtype=float)
    # Band costs and their running sums, precomputed in blocks of rows (bounded memory);
    # pairs last, so each step of a row is one vector operation over all pairs.
    block = n if costs is not None else max(1, min(n, 4_000_000 // max(1, pairs * width)))
    prev = np.full((width + 1, pairs), np.inf)
    a = np.empty((width, pairs))
    for start in range(0, n, block):
        rows = slice(start, min(n, start + block))
        c = np.ascontiguousarray(costs) if costs is not None else _band_costs(q[live], t[live], r, rows)
        s = np.empty_like(c)                 # running sum along the band (as cumsum adds: in order,
        s[:, 0] = c[:, 0]                    # one column at a time, which is faster on this layout)
        for w in range(1, width):
            np.add(s[:, w - 1], c[:, w], out=s[:, w])
        for k in range(c.shape[0]):
            i = start + k
            if i == 0:
                # D[−1, −1] = 0 starts every path: row 0 is the running sum from column 0.
                prev[:width] = s[0]
                prev[:r] = np.inf
            else:
                np.minimum(prev[:width], prev[1:], out=a)
                a -= s[k]
                a += c[k]
                np.minimum.accumulate(a, axis=0, out=prev[:width])
                prev[:width] += s[k]
            if bound is not None and (k % 8 == 7 or i == n - 1):
                gone = prev[:width].min(axis=0) > bound
                if gone.any():
                    keep = ~gone
                    live, prev, bound = live[keep], prev[:, keep], bound[keep]
                    c, s, a = c[:, :, keep], s[:, :, keep], a[:, keep]
                    if not len(live):
                        return out
    out[live] = prev[r]
    return out


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


def lb_kim(query: np.ndarray, templates: np.ndarray) -> np.ndarray:
    """LB_Kim (first and last samples) lower bounds (k,) of the DTW path cost of query
    (channels, n) to templates (k, channels, n): every path holds the cells (0, 0) and
    (n − 1, n − 1)."""
    first = ((query[None, :, 0] - templates[:, :, 0]) ** 2).sum(axis=1)
    if query.shape[-1] == 1:
        return first
    return first + ((query[None, :, -1] - templates[:, :, -1]) ** 2).sum(axis=1)


def lb_keogh_reversed(templates: np.ndarray, query: np.ndarray, radius: int) -> np.ndarray:
    """LB_Keogh the other way round (k,): each template's excursion outside the query's
    envelope. Banded DTW is symmetric, so this bounds it too."""
    size = 2 * radius + 1
    up = maximum_filter1d(query, size, axis=-1, mode="nearest")
    lo = minimum_filter1d(query, size, axis=-1, mode="nearest")
    e = np.maximum(templates - up, 0.0) + np.maximum(lo - templates, 0.0)
    return np.einsum("kcn,kcn->k", e, e)


# Bounds are compared with a hair of slack, so rounding in a bound's sum can never prune
# a template whose distance ties the best so far.
_SLACK = 1.0 + 1e-9


def class_distances_pruned(query: np.ndarray, templates: np.ndarray, template_class: np.ndarray, n_classes: int,
                           radius: int, upper: np.ndarray, lower: np.ndarray, costs=None) -> tuple[np.ndarray, int]:
    """Exact nearest-template distance per class (n_classes,) for one query, with pruning.

    Lower bounds, all vectorised (Rakthanmanon et al., KDD 2012): LB_Kim, LB_Keogh with
    the templates' envelopes (``upper``, ``lower``), LB_Keogh with the query's; a
    template's bound is the largest. Upper bound of each class: its nearest template by
    the diagonal (Euclidean) path, which is one of the paths DTW minimises over. Only the
    templates whose lower bound is within their class's upper bound are matched, all in
    one pass over the rows, each abandoned as soon as a whole row exceeds that upper bound
    (``band_dtw``): the nearest template of a class never is, so the result is exact.
    Classes with no template get inf. costs: optional (n, 2r + 1, templates) local costs
    (``StreamCosts.band``). Returns (distances, number of templates whose DTW was started).
    """
    query = np.asarray(query, dtype=float)
    lb = np.maximum(lb_kim(query, templates), lb_keogh(query, upper, lower))
    lb = np.maximum(lb, lb_keogh_reversed(templates, query, radius))
    diff = templates - query[None]
    diagonal = np.einsum("kcn,kcn->k", diff, diff)
    upper_cls = np.full(n_classes, np.inf)
    np.minimum.at(upper_cls, template_class, diagonal)
    bound = upper_cls[template_class] * _SLACK
    todo = np.flatnonzero(lb <= bound)
    todo = todo[np.argsort(lb[todo], kind="stable")]
    d = band_dtw(np.broadcast_to(query[None], (len(todo),) + query.shape), templates[todo], radius, bound[todo],
                 None if costs is None else costs[:, :, todo])
    best = np.full(n_classes, np.inf)
    np.minimum.at(best, template_class[todo], d)
    return np.sqrt(best), len(todo)


class StreamCosts:
    """Local costs of a stream's samples against every template sample, kept over hops.

    A hop moves the window by a few samples, but each sample's costs against the
    templates do not depend on the window: only the new samples are costed (against all
    template samples, with the band's margin of r zero columns on either side), and each
    window's band of costs is a strided view of the store. State: the store (a ring of
    2 × ``length`` sample rows, written twice so that any window's rows are contiguous),
    and the next sample index it lacks. Costs are summed over channels in the order of
    ``_band_costs``, so they are bit-equal to it.
    """

    def __init__(self, templates: np.ndarray, radius: int):
        t = np.asarray(templates, dtype=float)
        k, n_ch, n = t.shape
        self.length, self.r = n, int(max(0, min(radius, n - 1)))
        cols = n + 2 * self.r
        tp = np.zeros((n_ch, cols, k))
        tp[:, self.r:self.r + n] = t.transpose(1, 2, 0)
        self.columns = tp                                          # (channels, columns, templates)
        self.inside = np.zeros((cols, 1))
        self.inside[self.r:self.r + n] = 1.0
        self.ring = 2 * n
        self.store = np.zeros((2 * self.ring, cols, k))
        self.next = 0

    def band(self, start: int, window: np.ndarray) -> np.ndarray:
        """Costs (n, 2r + 1, templates) of the window (channels, n) that starts at stream
        sample ``start``; windows must come in order of start."""
        n, ring = self.length, self.ring
        first = max(self.next, start)
        if first < start + n:
            x = window[:, first - start:]                          # (channels, new samples)
            c = None
            for ch in range(x.shape[0]):
                d = x[ch, :, None, None] - self.columns[ch][None]
                c = d * d if c is None else c + d * d
            c *= self.inside
            rows = np.arange(first, start + n) % ring
            self.store[rows] = c
            self.store[rows + ring] = c
            self.next = start + n
        st = self.store.strides
        base = self.store[start % ring:]
        return np.lib.stride_tricks.as_strided(base, (n, 2 * self.r + 1, base.shape[2]),
                                               (st[0] + st[1], st[1], st[2]), writeable=False)


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
