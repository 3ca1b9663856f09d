"""Ridge regression onto ±1 class targets, with the penalty chosen by exact leave-one-out error."""

from __future__ import annotations

import numpy as np

DEFAULT_ALPHAS = np.logspace(-3, 3, 13)


def fit_ridge_loo(z: np.ndarray, y: np.ndarray, n_classes: int, alphas: np.ndarray = DEFAULT_ALPHAS
                  ) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """Fit ridge regression from standardised features z (m, d) to targets +1/−1 per class.

    The penalty is alpha · m for each alpha in ``alphas`` (so alpha is per case and
    comparable across training-set sizes); the one with the least leave-one-out squared
    error wins. Leave-one-out residuals come in closed form from one thin SVD of the centred
    features: e_i = (y_i − ŷ_i) / (1 − h_ii), with h the hat matrix diagonal.

    Returns (weights (d, k), bias (k,), chosen alpha, leave-one-out scores (m, k)); scores
    of new cases are ``z @ weights + bias``. A class with no cases gets target −1 throughout.
    """
    z = np.asarray(z, dtype=float)
    m = z.shape[0]
    target = -np.ones((m, n_classes))
    target[np.arange(m), y] = 1.0
    t_mean = target.mean(axis=0)
    z_mean = z.mean(axis=0)
    zc = z - z_mean
    tc = target - t_mean
    u, s, vt = np.linalg.svd(zc, full_matrices=False)
    ut_t = u.T @ tc                       # (r, k)
    s2 = s * s
    best = None
    for alpha in np.asarray(alphas, dtype=float):
        lam = alpha * m
        shrink = s2 / (s2 + lam)          # (r,)
        fitted = u @ (shrink[:, None] * ut_t) + t_mean
        h = 1.0 / m + (u * u) @ shrink
        resid = (target - fitted) / np.maximum(1.0 - h, 1e-12)[:, None]
        err = float((resid ** 2).mean())
        if best is None or err < best[0]:
            best = (err, alpha, target - resid)
    _, alpha, loo_scores = best
    lam = alpha * m
    weights = vt.T @ ((s / (s2 + lam))[:, None] * ut_t)
    bias = t_mean - z_mean @ weights
    return weights, bias, float(alpha), loo_scores
