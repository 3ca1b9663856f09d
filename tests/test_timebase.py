"""Device clock to host clock, gaps and jumps, resampling onto the model's rate."""

import numpy as np

from bridge.sources.timebase import DeviceClock, Resampler


def test_offset_and_drift_are_recovered_from_jittered_arrivals():
    # Invented clocks: host = 12.5 s + (1 + 80e-6) * device, plus 0-8 ms of one-way delay.
    rng = np.random.default_rng(1)
    c = DeviceClock(0.01)
    for k in range(1200):  # two minutes in blocks of ten samples
        d = np.arange(10 * k, 10 * k + 10) / 100.0
        c.update(d, 12.5 + (1 + 80e-6) * d[-1] + rng.uniform(0.0, 0.008))
    assert abs(c.drift - 80e-6) < 10e-6
    assert abs(c.to_host(60.0) - (12.5 + (1 + 80e-6) * 60.0)) < 0.002
    assert c.gaps == 0 and c.jumps == 0


def test_gaps_and_jumps_are_counted():
    c = DeviceClock(0.01)
    c.update(np.array([0.0, 0.01, 0.02]), 1.0)
    c.update(np.array([0.10, 0.11]), 1.1)      # 7 samples missing
    c.update(np.array([0.05, 0.06]), 1.2)      # backwards: the device restarted
    assert c.gaps == 1 and c.missing == 7 and c.jumps == 1


def test_resampling_98_hz_onto_100_hz_stays_within_the_interpolation_bound():
    # Linear interpolation error is at most h^2/8 * max|f''| (the standard bound for piecewise
    # linear interpolation, e.g. Burden & Faires, Numerical Analysis, ch. 3).
    h = 1 / 98.0
    t = np.arange(0, 5, h)
    w = 2 * np.pi * 3.0  # a 3 Hz movement
    v = np.column_stack([np.sin(w * t), 1e5 + 50 * np.cos(w * t)])
    r = Resampler(100.0)
    parts = [r.process(t[i:i + 13], v[i:i + 13]) for i in range(0, t.size, 13)]
    gt = np.concatenate([p[0] for p in parts])
    gv = np.concatenate([p[1] for p in parts])
    np.testing.assert_allclose(np.diff(gt), 0.01, atol=1e-9)
    assert gt.size == int(np.floor(t[-1] / 0.01)) + 1
    bound = h ** 2 / 8 * w ** 2
    assert np.max(np.abs(gv[:, 0] - np.sin(w * gt))) <= bound * 1.0001
    assert np.max(np.abs(gv[:, 1] - (1e5 + 50 * np.cos(w * gt)))) <= 50 * bound * 1.0001


def test_resampler_does_not_bridge_a_gap():
    r = Resampler(100.0, max_gap_s=0.1)
    t = np.r_[np.arange(10) / 100, 1.0 + np.arange(10) / 100]
    gt, gv = r.process(t, np.column_stack([t]))
    assert r.restarts == 1 and not np.any((gt > 0.095) & (gt < 0.999))
    np.testing.assert_allclose(gv[:, 0], gt, atol=1e-12)
