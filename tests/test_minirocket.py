"""The fixed-kernel convolution transform: kernels, dilations, convolution and the rolling update."""

import numpy as np
import pytest

from bridge.recognition.minirocket import (
    N_KERNELS, RollingMiniRocket, RollingValidMiniRocket, _conv, _conv_summed, _padded_taps, dilations_for,
    fit_minirocket, golden_quantiles, kernel_positions, kernel_weights, minirocket_transform, rolling_transform,
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


# --- valid edges ------------------------------------------------------------------------

def stream_features(rolling, stream, sizes):
    """Push ``stream`` in blocks of the given sizes (cycled); features and window ends."""
    feats, ends, i, k = [], [], 0, 0
    while i < len(stream):
        n = sizes[k % len(sizes)]
        f, e = rolling.push(stream[i:i + n])
        assert f.shape == (len(e), rolling.params.n_features)
        feats.extend(f)
        ends.extend(e)
        i += n
        k += 1
    return np.array(feats), ends


@pytest.mark.parametrize("hop, sizes, max_steps", [
    (5, [1], None),                 # one sample at a time (a live source)
    (5, [5], None),                 # one hop at a time
    (5, [500], None),               # 5 s blocks at 100 Hz (replay)
    (5, [500], 37),                 # the same, processed in pieces of 37 steps
    (5, [7, 3, 11, 2], None),       # blocks not aligned with the hop
    (13, [1, 40, 9, 120, 4], None),
    (1, [3, 1, 17], None),
    (120, [64, 250], None),         # a hop as long as the window
])
def test_valid_rolling_features_equal_the_batch_transform_bit_for_bit(hop, sizes, max_steps):
    rng = np.random.default_rng(hop + len(sizes))
    length, n_ch = 120, 3
    params = fit_minirocket(rng.normal(size=(4, n_ch, length)).cumsum(axis=2), n_features=2000, seed=1,
                            edges="valid")
    stream = rng.normal(size=(400 if hop == 1 else 1300, n_ch)).cumsum(axis=0)
    rolling = RollingValidMiniRocket(params, hop, max_steps=max_steps)
    feats, ends = stream_features(rolling, stream, sizes)
    last = (len(stream) - length) // hop * hop + length
    assert ends == list(range(length, last + 1, hop))
    batch = minirocket_transform(params, np.stack([stream[e - length:e].T for e in ends]))
    np.testing.assert_array_equal(feats, batch)


def test_valid_rolling_with_many_channels_and_long_run():
    # Eight channels (many distinct channel subsets) and a run long enough for the ring of
    # running totals to wrap many times.
    rng = np.random.default_rng(8)
    length, n_ch = 40, 8
    params = fit_minirocket(rng.normal(size=(5, n_ch, length)).cumsum(axis=2), n_features=840, seed=2,
                            edges="valid")
    stream = rng.normal(size=(3000, n_ch))
    feats, ends = stream_features(RollingValidMiniRocket(params, 3, max_steps=10), stream, [1, 29, 6])
    pick = np.arange(0, len(ends), 37)
    batch = minirocket_transform(params, np.stack([stream[ends[i] - length:ends[i]].T for i in pick]))
    np.testing.assert_array_equal(feats[pick], batch)


def test_valid_features_pool_over_the_valid_positions_only():
    # Reference: numpy.correlate in "valid" mode (no padding) of the sum of the kernel's
    # channels with the dilated kernel; each feature is the share of those outputs above
    # its bias. Compared at a tolerance: our additions run in another order.
    rng = np.random.default_rng(3)
    length, n_ch = 90, 2
    params = fit_minirocket(rng.normal(size=(6, n_ch, length)).cumsum(axis=2), n_features=840, seed=0,
                            edges="valid")
    x = rng.normal(size=(1, n_ch, length)).cumsum(axis=2)
    f = minirocket_transform(params, x)[0]
    offs = params.offsets()
    w = kernel_weights()
    checked = 0
    for di, d in enumerate(params.dilations):
        per = int(params.features_per_kernel[di])
        for k in (0, 41, 83):
            dilated = np.zeros(8 * int(d) + 1)
            dilated[::int(d)] = w[k]
            summed = (params.channel_mask[di, k][:, None] * x[0]).sum(axis=0)
            out = np.correlate(summed, dilated, mode="valid")
            assert len(out) == length - 8 * int(d)
            for j in range(per):
                i = offs[di] + k * per + j
                assert f[i] == pytest.approx(np.mean(out > params.biases[i]), abs=1e-12)
                checked += 1
    assert checked >= 3 * len(params.dilations)


def test_valid_edges_share_the_random_draws_and_change_only_the_pooling():
    # Same seed, same dilations and channel subsets; the biases come from the valid part
    # of the same case's output, so each lies within that part's range.
    rng = np.random.default_rng(4)
    x = rng.normal(size=(6, 2, 80)).cumsum(axis=2)
    valid = fit_minirocket(x, n_features=840, seed=0, edges="valid")
    alternate = fit_minirocket(x, n_features=840, seed=0)
    np.testing.assert_array_equal(valid.channel_mask, alternate.channel_mask)
    np.testing.assert_array_equal(valid.dilations, alternate.dilations)
    assert not np.array_equal(minirocket_transform(valid, x), minirocket_transform(alternate, x))


def test_channel_first_convolution_equals_the_per_channel_one():
    rng = np.random.default_rng(5)
    taps = rng.normal(size=(9, 4, 3, 50))
    mask = (rng.random((N_KERNELS, 4)) < 0.5).astype(float)
    mask[mask.sum(axis=1) == 0, 0] = 1.0
    np.testing.assert_allclose(_conv_summed(taps, mask, kernel_positions()), _conv(taps, mask, kernel_positions()),
                               rtol=1e-12, atol=1e-12)


def test_edge_mode_is_checked_and_picks_the_rolling_transform():
    rng = np.random.default_rng(6)
    x = rng.normal(size=(3, 1, 30))
    with pytest.raises(ValueError, match="edges"):
        fit_minirocket(x, n_features=840, edges="wrapped")
    valid = fit_minirocket(x, n_features=840, edges="valid")
    alternate = fit_minirocket(x, n_features=840)
    assert alternate.edges == "alternate"
    assert type(rolling_transform(valid, 2)) is RollingValidMiniRocket
    assert type(rolling_transform(alternate, 2)) is RollingMiniRocket
    with pytest.raises(ValueError, match="edges"):
        RollingMiniRocket(valid, 2)
    with pytest.raises(ValueError, match="edges"):
        RollingValidMiniRocket(alternate, 2)
    with pytest.raises(ValueError, match="shape"):
        RollingValidMiniRocket(valid, 2).push(np.zeros((4, 2)))


def test_valid_rolling_counts_survive_the_totals_wrapping_around():
    # The running totals are unsigned 32-bit and wrap after 2^32 positive outcomes (248
    # days at 100 Hz for a feature positive at every step); counts are differences, exact
    # modulo 2^32. Start the totals just below the wrap and check against the batch.
    rng = np.random.default_rng(9)
    length = 60
    params = fit_minirocket(rng.normal(size=(4, 2, length)).cumsum(axis=2), n_features=840, seed=0, edges="valid")
    rolling = RollingValidMiniRocket(params, 4)
    rolling.totals += np.uint32(2 ** 32 - 50)
    stream = rng.normal(size=(400, 2)).cumsum(axis=0)
    feats, ends = stream_features(rolling, stream, [9])
    assert (rolling.totals[(rolling.done - 1) % rolling.ring_len] < 2 ** 31).any()  # some did wrap
    batch = minirocket_transform(params, np.stack([stream[e - length:e].T for e in ends]))
    np.testing.assert_array_equal(feats, batch)


@pytest.mark.parametrize("engine", ["numpy", "compiled"])
@pytest.mark.parametrize("edges", ["valid", "alternate"])
@pytest.mark.parametrize("n_ch, length, n_features, chunk", [(4, 200, 10_000, None), (3, 60, 2_000, 7),
                                                              (8, 120, 3_000, 5), (1, 300, 840, None),
                                                              (2, 9, 840, 1)])
def test_batch_transform_equals_the_reference_bit_for_bit(engine, edges, n_ch, length, n_features, chunk):
    # The vectorised batch path, and the compiled kernels of the accelerate extra, against
    # the plain one kept as reference (zero-padded taps, ``_conv`` / ``_conv_summed``, one
    # dilation at a time): same outputs, same comparisons.
    from bridge.recognition.minirocket import compiled_kernels, reference_transform
    if engine == "compiled" and compiled_kernels() is None:
        pytest.skip("numba not installed (the accelerate extra)")
    rng = np.random.default_rng(length + n_ch)
    x = rng.normal(size=(13, n_ch, length)).cumsum(axis=2)
    params = fit_minirocket(x, n_features, seed=2, edges=edges)
    got = minirocket_transform(params, x, chunk=chunk, engine=engine)
    np.testing.assert_array_equal(got, reference_transform(params, x))
    assert minirocket_transform(params, x[:0], engine=engine).shape == (0, params.n_features)
