"""The linear model's ridge fit: the same solution whether windows or features are more numerous."""

import numpy as np
import pytest

from bridge.recognition.linear import fit_ridge


@pytest.mark.parametrize("m, d", [(30, 200), (300, 40)])
def test_ridge_matches_the_normal_equations(m, d):
    # Ridge estimator w = (XᵀX + λI)⁻¹ Xᵀ(T − mean T) on centred X (Hoerl & Kennard,
    # Technometrics 12(1), 1970); here λ is relative to the mean eigenvalue of XᵀX.
    rng = np.random.default_rng(m)
    x = rng.normal(size=(m, d))
    y = rng.integers(0, 3, m)
    xc = x - x.mean(axis=0)
    t = np.eye(3)[y]
    ref = np.linalg.eigvalsh(xc.T @ xc).mean()
    for lam in (0.01, 1.0):
        w, b, chosen, held = fit_ridge(x, y, 3, [lam])
        assert chosen == lam and held is None
        want = np.linalg.solve(xc.T @ xc + lam * ref * np.eye(d), xc.T @ (t - t.mean(axis=0)))
        np.testing.assert_allclose(w, want, rtol=1e-6, atol=1e-9)
        np.testing.assert_allclose(b, t.mean(axis=0) - x.mean(axis=0) @ want, rtol=1e-6, atol=1e-9)
