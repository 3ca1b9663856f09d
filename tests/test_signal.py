"""Streaming conditioning against scipy references and the Butterworth definition."""

import numpy as np
import pytest
from scipy import signal as sps

from bridge.signal import (
    BandPass, Conditioner, bandpass_block, bandpass_init, design_bandpass, relative_capacitance, track_baseline,
)


@pytest.mark.parametrize("seed", range(5))
def test_streaming_bandpass_equals_whole_stream_sosfilt(seed):
    # Reference: scipy.signal.sosfilt over the whole signal (scipy is the reference library).
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(3000, 4))
    sos = design_bandpass(100.0, 1.0, 10.0)
    whole = sps.sosfilt(sos, x, axis=0)
    cuts = np.sort(rng.choice(np.arange(1, 3000), size=rng.integers(1, 60), replace=False))
    zi = bandpass_init(sos, 4)
    parts = []
    for block in np.split(x, cuts):
        y, zi = bandpass_block(sos, block, zi)
        parts.append(y)
    np.testing.assert_allclose(np.concatenate(parts), whole, rtol=0, atol=1e-9)


@pytest.mark.parametrize("rate_hz", [50.0, 100.0, 200.0])
def test_bandpass_is_minus_3db_at_both_cutoffs(rate_hz):
    # Butterworth definition: |H| = 1/sqrt(2) (−3.01 dB) at the cut-offs; scipy.signal.sosfreqz as the reference.
    sos = design_bandpass(rate_hz, 1.0, 10.0)
    _, h = sps.sosfreqz(sos, worN=[1.0, 10.0], fs=rate_hz)
    np.testing.assert_allclose(20 * np.log10(np.abs(h)), [-3.0103, -3.0103], atol=1e-3)
    _, h_mid = sps.sosfreqz(sos, worN=[np.sqrt(10.0)], fs=rate_hz)  # geometric centre: passband
    assert abs(20 * np.log10(abs(h_mid[0]))) < 0.1


def test_bandpass_rejects_impossible_band():
    with pytest.raises(ValueError, match="rate_hz/2"):
        design_bandpass(15.0, 1.0, 10.0)


def test_relative_capacitance_round_trips_through_lc_formula():
    # f = 1/(2π√(LC)) (any electronics handbook): with L fixed, C/C0 = (f0/f)².
    L = 1e-3
    c0 = 100e-12
    c = c0 * np.array([1.0, 1.001, 1.02, 1.3])
    f0 = 1 / (2 * np.pi * np.sqrt(L * c0))
    f = 1 / (2 * np.pi * np.sqrt(L * c))
    assert f0 == pytest.approx(503_292.1, rel=1e-6)  # 1 mH, 100 pF → 503.29 kHz
    np.testing.assert_allclose(relative_capacitance(f[:, None], [f0]).ravel(), c / c0 - 1, rtol=1e-9, atol=1e-15)


def test_baseline_tracking_in_blocks_equals_whole():
    rng = np.random.default_rng(3)
    x = np.cumsum(rng.normal(size=(2000, 2)), axis=0)
    whole, _ = track_baseline(x, x[0], 100.0, 5.0)
    b, parts = x[0], []
    for block in np.array_split(x, 17):
        y, b = track_baseline(block, b, 100.0, 5.0)
        parts.append(y)
    np.testing.assert_allclose(np.concatenate(parts), whole, atol=1e-9)


def test_conditioner_block_size_does_not_change_output():
    rng = np.random.default_rng(4)
    f = 250e3 * (1 - 0.002 * np.sin(np.linspace(0, 40, 3000)))[:, None] + rng.normal(0, 2, (3000, 3))
    a = Conditioner(BandPass(100.0))
    la, ma = a.process(f)
    b = Conditioner(BandPass(100.0))
    outs = [b.process(blk) for blk in np.array_split(f, 41)]
    np.testing.assert_allclose(np.concatenate([o[0] for o in outs]), la, atol=1e-12)
    np.testing.assert_allclose(np.concatenate([o[1] for o in outs]), ma, atol=1e-12)


@pytest.mark.parametrize("seed", range(3))
def test_live_sized_blocks_give_the_whole_stream_bit_for_bit(seed):
    # Live blocks hold one to a few samples and take a written-out recursion instead of
    # scipy's sosfilt and lfilter (the reference library); replay takes big blocks through
    # scipy. Live and replay must decide the same events, so the numbers must be equal, not close.
    rng = np.random.default_rng(seed)
    f = 250e3 * (1 - 0.003 * np.sin(np.linspace(0, 60, 4000)))[:, None] + rng.normal(0, 3, (4000, 4))
    whole_level, whole_motion = Conditioner(BandPass(100.0)).process(f)
    c = Conditioner(BandPass(100.0))
    cuts = np.cumsum(rng.integers(1, 9, size=1000))
    outs = [c.process(blk) for blk in np.split(f, cuts[cuts < 4000])]
    assert max(len(b) for b in np.split(f, cuts[cuts < 4000])) <= 8
    assert np.array_equal(np.concatenate([o[0] for o in outs]), whole_level)
    assert np.array_equal(np.concatenate([o[1] for o in outs]), whole_motion)
    sos = design_bandpass(100.0, 1.0, 10.0)
    zi = rng.normal(size=(sos.shape[0], 2, 4)) * 1e-3
    for n in range(1, 9):
        x = rng.normal(size=(n, 4)) * 1e-3
        ours, ref = bandpass_block(sos, x, zi), sps.sosfilt(sos, x, axis=0, zi=zi)
        assert np.array_equal(ours[0], ref[0]) and np.array_equal(ours[1], ref[1])
