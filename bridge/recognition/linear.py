"""A shrinkage linear discriminant with temperature-calibrated class probabilities."""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax, softmax


def fit_lda(x: np.ndarray, y: np.ndarray, n_classes: int, shrinkage: float = 0.2) -> tuple[np.ndarray, np.ndarray]:
    """Linear discriminant with a pooled covariance shrunk towards its mean variance.

    x: (m, d) standardised features; y: (m,) class indices. Returns weights (d, k) and
    bias (k,) so that scores = x @ weights + bias are log-posteriors up to a constant.
    Classes absent from y get a bias of −inf-like so they are never chosen.
    """
    m, d = x.shape
    means = np.zeros((n_classes, d))
    counts = np.bincount(y, minlength=n_classes).astype(float)
    for k in range(n_classes):
        if counts[k]:
            means[k] = x[y == k].mean(axis=0)
    centred = x - means[y]
    cov = centred.T @ centred / max(1, m - n_classes)
    target = np.trace(cov) / d
    cov = (1.0 - shrinkage) * cov + shrinkage * target * np.eye(d)
    prec_means = np.linalg.solve(cov, means.T)  # (d, k)
    prior = np.where(counts > 0, counts / counts.sum(), 1.0)
    bias = -0.5 * np.einsum("kd,dk->k", means, prec_means) + np.log(prior)
    bias[counts == 0] = -1e9
    return prec_means, bias


def fit_ridge(x: np.ndarray, y: np.ndarray, n_classes: int, penalties) -> list[tuple[np.ndarray, np.ndarray]]:
    """Ridge regression onto one-hot classes, for each penalty, from one eigendecomposition.

    x: (m, d) features; returns [(weights (d, k), bias (k,)), ...] per penalty; the penalty
    is relative to the mean eigenvalue so it does not depend on the feature count.
    """
    targets = np.eye(n_classes)[y]
    xm, ym = x.mean(axis=0), targets.mean(axis=0)
    xc = x - xm
    m, d = xc.shape
    out = []
    if m < d:
        # Fewer windows than features: the same solution from a thin SVD of the m × d data
        # (x'x has the squared singular values as eigenvalues, the other d − m are zero).
        u, sv, vt = np.linalg.svd(xc, full_matrices=False)
        proj = u.T @ (targets - ym)
        ref = max(float((sv * sv).sum() / d), 1e-12)
        for lam in penalties:
            w = vt.T @ ((sv / (sv * sv + lam * ref))[:, None] * proj)
            out.append((w, ym - xm @ w))
        return out
    evals, evecs = np.linalg.eigh(xc.T @ xc)
    proj = evecs.T @ (xc.T @ (targets - ym))
    ref = max(float(evals.mean()), 1e-12)
    for lam in penalties:
        w = evecs @ (proj / (evals + lam * ref)[:, None])
        out.append((w, ym - xm @ w))
    return out


def fit_temperature(scores: np.ndarray, y: np.ndarray, bounds: tuple[float, float] = (-3.0, 5.0)) -> float:
    """Temperature T minimising the negative log-likelihood of softmax(scores / T).

    bounds: the search interval of ln T.
    """
    def nll(log_t):
        return -log_softmax(scores / np.exp(log_t), axis=1)[np.arange(len(y)), y].mean()
    res = minimize_scalar(nll, bounds=bounds, method="bounded")
    return float(np.exp(res.x))


def probabilities(scores: np.ndarray, temperature: float) -> np.ndarray:
    """Calibrated class probabilities from discriminant scores."""
    return softmax(scores / temperature, axis=1)


def expected_calibration_error(prob: np.ndarray, y: np.ndarray, bins: int = 10) -> float:
    """Mean gap between confidence and accuracy over equal-width confidence bins (ECE)."""
    conf = prob.max(axis=1)
    correct = prob.argmax(axis=1) == y
    edges = np.linspace(0.0, 1.0, bins + 1)
    idx = np.clip(np.digitize(conf, edges[1:-1]), 0, bins - 1)
    ece = 0.0
    for b in range(bins):
        sel = idx == b
        if sel.any():
            ece += sel.mean() * abs(conf[sel].mean() - correct[sel].mean())
    return float(ece)
