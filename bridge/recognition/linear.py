"""A shrinkage linear discriminant with temperature-calibrated class probabilities."""

from __future__ import annotations

import numpy as np
from scipy import linalg
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax


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


def fit_ridge(x: np.ndarray, y: np.ndarray, n_classes: int, penalties, folds: np.ndarray | None = None
              ) -> tuple[np.ndarray, np.ndarray, float, np.ndarray | None]:
    """Ridge regression onto one-hot classes; the penalty is chosen on held-out folds.

    x: (m, d) features; y: (m,) class indices; penalties: relative to the mean eigenvalue
    of the centred XᵀX, so they do not depend on d; the bias is not shrunk; folds: (m,) group per row, or None to take the first
    penalty. Per-fold Gram matrices are summed once, so each trial costs one Cholesky solve.
    Returns (weights (d, k), bias (k,), chosen penalty, held-out scores (m, k) or None).
    """
    m, d = x.shape
    xa = np.hstack([x, np.ones((m, 1))])
    targets = np.eye(n_classes)[y]
    unpenalised = np.zeros(d + 1)
    unpenalised[:d] = 1.0  # the bias column is not shrunk

    def solve(gram, rhs, lam):
        # Mean eigenvalue of the centred XᵀX, from the Gram of [X, 1]: trace − |Σx|²/n.
        energy = max(float(np.trace(gram[:d, :d]) - gram[d, :d] @ gram[d, :d] / gram[d, d]) / d, 1e-12)
        return linalg.solve(gram + np.diag(lam * energy * unpenalised), rhs, assume_a="pos")

    groups = np.unique(folds) if folds is not None else np.zeros(1)
    parts = []
    for f in groups:
        sel = folds == f if folds is not None else np.ones(m, dtype=bool)
        parts.append((sel, xa[sel].T @ xa[sel], xa[sel].T @ targets[sel]))
    gram_all, rhs_all = sum(p[1] for p in parts), sum(p[2] for p in parts)
    best, held_best = penalties[0], None
    if len(parts) > 1:
        best_acc = -1.0
        for lam in penalties:
            held = np.zeros((m, n_classes))
            for sel, g, r in parts:
                held[sel] = xa[sel] @ solve(gram_all - g, rhs_all - r, lam)
            acc = float((held.argmax(axis=1) == y).mean())
            if acc > best_acc:
                best, best_acc, held_best = lam, acc, held
    w = solve(gram_all, rhs_all, best)
    return w[:d], w[d], float(best), held_best


def fit_temperature(scores: np.ndarray, y: np.ndarray, bounds: tuple[float, float] = (-3.0, 5.0)) -> float:
    """Temperature T minimising the negative log-likelihood of softmax(scores / T).

    bounds: the search interval of ln T.
    """
    def nll(log_t):
        return -log_softmax(scores / np.exp(log_t), axis=1)[np.arange(len(y)), y].mean()
    res = minimize_scalar(nll, bounds=bounds, method="bounded")
    return float(np.exp(res.x))


def probabilities(scores: np.ndarray, temperature: float) -> np.ndarray:
    """Calibrated class probabilities from discriminant scores.

    The softmax of scores / temperature along each row, by the same arithmetic as
    ``scipy.special.softmax`` (shift by the row maximum, exponentiate, divide by the sum)
    in fewer calls: it runs every hop.
    """
    x = scores / temperature
    x -= x.max(axis=1, keepdims=True)
    np.exp(x, out=x)
    x /= x.sum(axis=1, keepdims=True)
    return x


def expected_calibration_error(prob: np.ndarray, y: np.ndarray, bins: int = 10) -> float:
    """Mean gap between confidence and accuracy over equal-width confidence bins (ECE)."""
    return confidence_gap(prob.max(axis=1), prob.argmax(axis=1) == y, bins)


def confidence_gap(confidence: np.ndarray, correct: np.ndarray, bins: int = 10) -> float:
    """ECE from each decision's confidence (its top probability, 0..1) and whether it was right."""
    conf = np.asarray(confidence, dtype=float)
    correct = np.asarray(correct, dtype=bool)
    if conf.size == 0:
        return 0.0
    edges = np.linspace(0.0, 1.0, bins + 1)
    idx = np.clip(np.digitize(conf, edges[1:-1]), 0, bins - 1)
    ece = 0.0
    for b in range(bins):
        sel = idx == b
        if sel.any():
            ece += sel.mean() * abs(conf[sel].mean() - correct[sel].mean())
    return float(ece)
