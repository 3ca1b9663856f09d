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
        u = zc @ v
        u /= s      # in place: u is m × r, as large as the features
        return u, s, v
    w = zc.T @ v
    w /= s
    return v, s, w


def _solve_spd(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a⁻¹b for a symmetric positive definite a: Cholesky (twice as fast as LU), or LU when
    rounding has left a not quite positive definite (a penalty near zero)."""
    from scipy.linalg import LinAlgError, cho_factor, cho_solve
    try:
        return cho_solve(cho_factor(a, overwrite_a=False, check_finite=False), b, check_finite=False)
    except LinAlgError:
        return np.linalg.solve(a, b)


def fit_ridge_heldout(z: np.ndarray, y: np.ndarray, n_classes: int, splits=None,
                      alphas: np.ndarray = DEFAULT_ALPHAS, overwrite_z: bool = False
                      ) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
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
    ``overwrite_z``: centre a float64 z in place (it is left centred) instead of copying it;
    the results are the same to the bit.
    """
    z = np.asarray(z, dtype=float)
    m = z.shape[0]
    target = -np.ones((m, n_classes))
    target[np.arange(m), y] = 1.0
    t_mean = target.mean(axis=0)
    z_mean = z.mean(axis=0)
    if overwrite_z:
        zc = z
        zc -= z_mean
    else:
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
    alphas = np.asarray(alphas, dtype=float)
    shrinks = s2[None, :] / (s2[None, :] + alphas[:, None] * m)          # (alphas, r)
    fitted = [u @ (f[:, None] * ut_t) + t_mean for f in shrinks]
    if splits is None:
        helds = []
        for f, fit in zip(shrinks, fitted):
            h = 1.0 / m + (u * u) @ f
            helds.append(target - (target - fit) / np.maximum(1.0 - h, 1e-12)[:, None])
    else:
        # Splits outside, penalties inside: what a split needs is computed once for all
        # penalties. I − h_DD = I − b·bᵀ with b = [u_D·√shrink, 1/√m] (n_D × (r+1)), which
        # is symmetric positive definite for any penalty > 0. When r + 1 < n_D, Woodbury
        # turns its n_D × n_D solve into one of size r + 1: (I − bbᵀ)⁻¹ = I + b(I − bᵀb)⁻¹bᵀ,
        # with bᵀb built from u_Dᵀu_D (once a split). Otherwise b·bᵀ is a symmetric product
        # (BLAS syrk) and the solve a Cholesky.
        helds = [np.empty_like(target) for _ in alphas]
        root_m = np.sqrt(m)
        for hold, drop in splits:
            ud = u[drop]
            inside = hold[drop]
            n_d = len(ud)
            small = len(s2) + 1 < n_d
            if small:
                gram, colsum = ud.T @ ud, ud.sum(axis=0)
            for f, fit, held in zip(shrinks, fitted, helds):
                rhs = target[drop] - fit[drop]
                sf = np.sqrt(f)
                if small:
                    k = np.empty((len(sf) + 1, len(sf) + 1))
                    k[:-1, :-1] = -(sf[:, None] * gram * sf[None, :])
                    k[:-1, :-1][np.diag_indices(len(sf))] += 1.0
                    k[:-1, -1] = k[-1, :-1] = -sf * colsum / root_m
                    k[-1, -1] = 1.0 - n_d / m
                    bt_rhs = np.vstack([sf[:, None] * (ud.T @ rhs), rhs.sum(axis=0, keepdims=True) / root_m])
                    c = _solve_spd(k, bt_rhs)
                    e = rhs + ud @ (sf[:, None] * c[:-1]) + c[-1:] / root_m
                else:
                    b = ud * sf
                    i_minus_h = b @ b.T
                    i_minus_h *= -1.0
                    i_minus_h -= 1.0 / m
                    i_minus_h[np.diag_indices_from(i_minus_h)] += 1.0
                    e = _solve_spd(i_minus_h, rhs)
                held[hold] = (target[drop] - e)[inside]
    best = None
    for alpha, held in zip(alphas, helds):
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
