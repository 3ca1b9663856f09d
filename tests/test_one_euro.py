"""The one-euro filter against its published formulas, on a sequence worked by hand.

Source: G. Casiez, N. Roussel, D. Vogel, "1€ Filter: A Simple Speed-based Low-pass Filter for
Noisy Input in Interactive Systems", CHI 2012. Its formulas:
    alpha = 1 / (1 + τ/Tₑ),  τ = 1/(2π·f_c)
    dx = (x − x̂_prev)/Tₑ,  dx̂ = low-pass of dx with f_c = d_cutoff
    f_c = min_cutoff + beta·|dx̂|,  x̂ = x̂_prev + alpha·(x − x̂_prev)
The numbers are chosen so every step is a plain fraction: Tₑ = 0.1 s and cut-offs of
5/π Hz make τ = 0.1 s, so alpha = 1/2.
"""

import math

import numpy as np
import pytest

from bridge.decisions import OneEuroSettings, one_euro, one_euro_step, smoothing_factor

C0 = 5 / math.pi  # Hz: τ = 1/(2π·C0) = 0.1 s


def test_smoothing_factor_is_the_papers_alpha():
    assert smoothing_factor(0.1, C0) == pytest.approx(0.5)        # τ = Tₑ → 1/(1+1)
    assert smoothing_factor(0.1, 2 * C0) == pytest.approx(2 / 3)  # τ = Tₑ/2 → 1/(1+1/2)


def test_worked_sequence_by_hand():
    s = OneEuroSettings(min_cutoff_hz=C0, beta=C0, d_cutoff_hz=C0)
    # sample 0: passes unchanged, derivative 0
    y0, st = one_euro_step(0.0, 0.0, None, s)
    assert y0 == 0.0 and st.dx_hat == 0.0
    # sample 1 (t 0.1, x 0.2): dx = 0.2/0.1 = 2; dx̂ = 0 + ½·2 = 1;
    # f_c = C0 + C0·1 = 2·C0 → alpha = 2/3; x̂ = 0 + ⅔·0.2 = 2/15
    y1, st = one_euro_step(0.2, 0.1, st, s)
    assert st.dx_hat == pytest.approx(1.0)
    assert y1 == pytest.approx(2 / 15)
    # sample 2 (t 0.2, x 0.2): dx = (0.2 − 2/15)/0.1 = 2/3; dx̂ = 1 + ½(2/3 − 1) = 5/6;
    # f_c = C0·(11/6) → τ = 1/(2π·(5/π)·11/6) = 6/110 → alpha = 1/(1 + 6/11) = 11/17;
    # x̂ = 2/15 + 11/17·(1/15) = 3/17
    y2, st = one_euro_step(0.2, 0.2, st, s)
    assert st.dx_hat == pytest.approx(5 / 6)
    assert y2 == pytest.approx(3 / 17)
    # the array form gives the same
    y, _ = one_euro(np.array([0.0, 0.2, 0.2]), np.array([0.0, 0.1, 0.2]), None, s)
    assert y == pytest.approx([0, 2 / 15, 3 / 17])


def test_beta_zero_is_a_fixed_first_order_low_pass():
    # With beta = 0 the cut-off never moves: alpha = ½ at every step, so a step input
    # approaches 1 as 1 − ½ⁿ (the paper's "min_cutoff only" case).
    s = OneEuroSettings(min_cutoff_hz=C0, beta=0.0, d_cutoff_hz=C0)
    x = np.array([0.0] + [1.0] * 5)
    y, _ = one_euro(x, np.arange(6) * 0.1, None, s)
    assert y == pytest.approx([0, 0.5, 0.75, 0.875, 0.9375, 0.96875])


def test_faster_movement_means_less_lag():
    slow = OneEuroSettings(min_cutoff_hz=1.0, beta=0.0)
    fast = OneEuroSettings(min_cutoff_hz=1.0, beta=5.0)
    t = np.arange(20) * 0.01
    ramp = t * 10.0  # 10 units/s
    y_slow, _ = one_euro(ramp, t, None, slow)
    y_fast, _ = one_euro(ramp, t, None, fast)
    assert ramp[-1] - y_fast[-1] < ramp[-1] - y_slow[-1]


def test_repeated_time_stamp_keeps_state():
    s = OneEuroSettings()
    _, st = one_euro_step(1.0, 0.5, None, s)
    y, st2 = one_euro_step(9.0, 0.5, st, s)
    assert y == 1.0 and st2 == st
