"""The fixed-kernel convolution transform: kernels, dilations, convolution and the rolling update."""

import numpy as np
import pytest

from bridge.recognition.minirocket import (
    N_KERNELS, RollingMiniRocket, _conv, _padded_taps, dilations_for, fit_minirocket, golden_quantiles,
    kernel_positions, kernel_weights, minirocket_transform,
)


def test_kernel_set_is_the_papers():
    # Dempster, Schmidt & Webb 2021 (arXiv:2012.08791), section 3.1: 84 kernels of length 9,
    # weights −1 and 2, exactly three 2s (all C(9,3) = 84 choices), so each sums to zero.
    w = kernel_weights()
    assert w.shape == (84, 9)
    assert ((w == 2).sum(axis=1) == 3).all() and ((w == -1).sum(axis=1) == 6).all()
    assert len({tuple(r) for r in w}) == 84
    np.testing.assert_array_equal(w.sum(axis=1), 0.0)


@pytest.mark.parametrize("length", [9, 60, 100, 150, 200, 1000])
def test_dilations_follow_the_papers_formula(length):
    # Same paper, section 3.3: dilations D = {⌊2^(i·E/(n−1))⌋ : i = 0 … n−1}, n = 32,
    # E = log2((l_input − 1)/(l_kernel − 1)); duplicates removed; 9,996 features in all
    # (10,000 rounded down to a multiple of 84).
    E = np.log2((length - 1) / 8)
    expected = sorted({int(np.floor(2 ** (i * E / 31))) for i in range(32)})
    dil, per_kernel = dilations_for(length)
    assert list(dil) == expected
    assert 84 * per_kernel.sum() == 9996 and (per_kernel >= 1).all()


def test_bias_quantiles_are_the_golden_ratio_sequence():
    # Same paper, section 3.4: quantiles from the low-discrepancy sequence frac(k·φ).
    q = golden_quantiles(5)
    phi = (1 + 5 ** 0.5) / 2
    np.testing.assert_allclose(q, [(k * phi) % 1 for k in range(1, 6)])


@pytest.mark.parametrize("dilation", [1, 3, 7])
def test_convolution_matches_numpy_correlate(dilation):
    # Reference: numpy.correlate (a dilated kernel is the kernel with d−1 zeros between
    # taps); "same" output with zero padding, centred on the middle tap.
    rng = np.random.default_rng(dilation)
    x = rng.normal(size=(1, 1, 80))
    conv = _conv(_padded_taps(x, dilation), np.ones((N_KERNELS, 1)), kernel_positions())
    for k in (0, 17, 83):
        dilated = np.zeros(8 * dilation + 1)
        dilated[::dilation] = kernel_weights()[k]
        ref = np.correlate(np.pad(x[0, 0], 4 * dilation), dilated, mode="valid")
        np.testing.assert_allclose(conv[k, 0], ref, atol=1e-12)


def test_features_are_proportions_and_deterministic():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(6, 2, 50)).cumsum(axis=2)
    p1, p2 = fit_minirocket(x, seed=3), fit_minirocket(x, seed=3)
    np.testing.assert_array_equal(p1.biases, p2.biases)
    f = minirocket_transform(p1, x)
    assert f.shape == (6, 9996) and (f >= 0).all() and (f <= 1).all()
    assert p1.channel_mask.sum(axis=2).min() >= 1


@pytest.mark.parametrize("hop", [1, 4, 13, 120])
def test_rolling_features_equal_the_batch_transform(hop):
    # The rolling update must give exactly the batch transform of the same window.
    rng = np.random.default_rng(hop)
    length, n_ch = 120, 3
    params = fit_minirocket(rng.normal(size=(4, n_ch, length)).cumsum(axis=2), seed=1)
    stream = rng.normal(size=(260 if hop == 1 else 500, n_ch)).cumsum(axis=0)
    rolling = RollingMiniRocket(params, hop)
    feats, ends, i = [], [], 0
    while i < len(stream):
        n = int(rng.integers(1, 40))
        f, e = rolling.push(stream[i:i + n])
        feats.extend(f)
        ends.extend(e)
        i += n
    assert ends == list(range(length, len(stream) + 1, hop))
    batch = minirocket_transform(params, np.stack([stream[e - length:e].T for e in ends]))
    np.testing.assert_allclose(np.array(feats), batch, rtol=0, atol=1e-9)
