"""Ridge regression onto ±1 class targets, with the penalty chosen by held-out error.

Held out means leave-one-out for independent cases, or whole groups of cases (takes, or
stretches of one take) when neighbouring cases share samples: windows that overlap 95 %
make leave-one-out scores nearly in-sample. Either way the held-out scores come in closed
form from one eigendecomposition, for every penalty tried, without refitting.
"""

from __future__ import annotations

import numpy as np

DEFAULT_ALPHAS = np.logspace(-3, 3, 13)


def _decompose(zc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Thin factors of centred features zc (m, d) = u · diag(s) · vᵀ, through the eigen-
    decomposition of the smaller Gram matrix: zcᵀzc (d × d) when features are fewer,
    zc·zcᵀ (m × m) when cases are. Directions with s² below 1e-12 of the largest are
    dropped: any penalty in use shrinks them to nothing anyway."""
    m, d = zc.shape
    if d <= m:
        s2, v = np.linalg.eigh(zc.T @ zc)
    else:
        s2, v = np.linalg.eigh(zc @ zc.T)
    keep = s2 > max(float(s2.max(initial=0.0)), 1e-300) * 1e-12
    s2, v = s2[keep], v[:, keep]
    s = np.sqrt(s2)
    if d <= m:
        return (zc @ v) / s, s, v
    return v, s, (zc.T @ v) / s


def fit_ridge_heldout(z: np.ndarray, y: np.ndarray, n_classes: int, splits=None,
                      alphas: np.ndarray = DEFAULT_ALPHAS) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """Fit ridge regression from standardised features z (m, d) to targets +1/−1 per class.

    The penalty is alpha · m for each alpha in ``alphas`` (so alpha is per case and
    comparable across training-set sizes); the one with the least held-out squared error
    wins. ``splits``: None for leave-one-out, or a list of (held, dropped) boolean masks
    (m,): the held cases are scored by the fit on the cases outside ``dropped`` (held ⊆
    dropped; dropping more than is held keeps overlapping neighbours out of the fit).
    Every case must be held exactly once.

    Closed forms (the hat matrix h of ridge with an unpenalised bias is
    1/m + u·diag(s²/(s² + λ))·uᵀ on the centred features): leave-one-out residual
    e_i = (y_i − ŷ_i) / (1 − h_ii); the residuals of a dropped set D from the fit without
    it, e_D = (I − h_DD)⁻¹ (y_D − ŷ_D) (block deletion, by the Woodbury identity).

    Returns (weights (d, k), bias (k,), chosen alpha, held-out scores (m, k)); scores of
    new cases are ``z @ weights + bias``. A class with no cases gets target −1 throughout.
    """
    z = np.asarray(z, dtype=float)
    m = z.shape[0]
    target = -np.ones((m, n_classes))
    target[np.arange(m), y] = 1.0
    t_mean = target.mean(axis=0)
    z_mean = z.mean(axis=0)
    zc = z - z_mean
    tc = target - t_mean
    u, s, v = _decompose(zc)
    ut_t = u.T @ tc                       # (r, k)
    s2 = s * s
    if splits is not None:
        splits = [(np.asarray(h, bool), np.asarray(d, bool)) for h, d in splits]
        count = sum(h.astype(int) for h, _ in splits)
        if np.any(count != 1) or any(np.any(h & ~d) for h, d in splits):
            raise ValueError("splits must hold every case exactly once, each inside its dropped set")
    best = None
    for alpha in np.asarray(alphas, dtype=float):
        lam = alpha * m
        shrink = s2 / (s2 + lam)          # (r,)
        fitted = u @ (shrink[:, None] * ut_t) + t_mean
        if splits is None:
            h = 1.0 / m + (u * u) @ shrink
            held = target - (target - fitted) / np.maximum(1.0 - h, 1e-12)[:, None]
        else:
            held = np.empty_like(target)
            for hold, drop in splits:
                ud = u[drop]
                i_minus_h = np.eye(len(ud)) - (ud * shrink) @ ud.T - 1.0 / m
                e = np.linalg.solve(i_minus_h, target[drop] - fitted[drop])
                held[hold] = (target[drop] - e)[hold[drop]]
        err = float(((target - held) ** 2).mean())
        if best is None or err < best[0]:
            best = (err, alpha, held)
    _, alpha, held_scores = best
    lam = alpha * m
    weights = v @ ((s / (s2 + lam))[:, None] * ut_t)
    bias = t_mean - z_mean @ weights
    return weights, bias, float(alpha), held_scores


def fit_ridge_loo(z: np.ndarray, y: np.ndarray, n_classes: int, alphas: np.ndarray = DEFAULT_ALPHAS
                  ) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """``fit_ridge_heldout`` with leave-one-out: for independent cases (not overlapping windows)."""
    return fit_ridge_heldout(z, y, n_classes, None, alphas)
