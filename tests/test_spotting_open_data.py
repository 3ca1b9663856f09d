"""Spotting on continuous takes built from open recordings, at their native 10 Hz.

Data: the UEA BasicMotions cases in tests/data (Bagnall et al., "The UEA multivariate time
series classification archive, 2018", arXiv:1811.00075; see PROVENANCE.md): 10 s of a
wrist-worn accelerometer and gyroscope (6 channels) at 10 Hz while standing, walking,
running or playing badminton. A take strings cases together, alternating ordinary
movement (Standing, Walking: the null class) with activities to spot (Running, Badminton).
The activities last the whole 10 s case, so drape takes them as held postures: each
must fire once ("entered") and nothing else may fire. Counted with the one matcher.

The six channels are turned into the frequencies drape reads by a small linear map around
250 kHz (each channel scaled by its spread over the train cases): a made-up transducer, so
that the open data passes through the whole live chain (band-pass that follows the 10 Hz
rate, windows, classifier, decision layer) unchanged in shape.
"""

from pathlib import Path

import numpy as np
import pytest

from bridge.evaluation.matching import count_take
from bridge.recognition.classifiers import fit_recordings
from bridge.recognition.training import TrainingSettings
from bridge.service import replay_events
from bridge.sources.recording import Label, Recording
from bridge.sources.ts_format import read_ts, stack_cases

DATA = Path(__file__).parent / "data"
SPOT = ("Running", "Badminton")
ORDINARY = ("Standing", "Walking")
KINDS = {name: "posture" for name in SPOT}


def take_from_cases(X, y, scale, seed, session):
    """Ordinary and spotted cases alternating, in a shuffled order; (Recording, count of each)."""
    rng = np.random.default_rng(seed)
    ordinary = [i for i in rng.permutation(len(y)) if y[i] in ORDINARY]
    spotted = [i for i in rng.permutation(len(y)) if y[i] in SPOT]
    parts, labels, t = [], [], 0.0
    for k, j in enumerate(spotted):
        parts.append(X[ordinary[k % len(ordinary)]])
        t += X.shape[2] / 10.0
        parts.append(X[j])
        labels.append(Label(t, t + X.shape[2] / 10.0, str(y[j])))
        t += X.shape[2] / 10.0
    parts.append(X[ordinary[len(spotted) % len(ordinary)]])
    series = np.concatenate(parts, axis=1).T                       # (n, 6)
    freq = 250e3 * (1.0 + 2e-3 * series / scale.T)
    n = freq.shape[0]
    rec = Recording(10.0, tuple(f"d{i}" for i in range(6)), np.arange(n) / 10.0, freq, tuple(labels),
                    wearer="uea", session=session, kinds=dict(KINDS))
    return rec


@pytest.fixture(scope="module")
def takes():
    X, y, _ = read_ts(DATA / "BasicMotions_TRAIN.ts")
    Xt, yt, _ = read_ts(DATA / "BasicMotions_TEST.ts")
    X, Xt = stack_cases(X), stack_cases(Xt)
    scale = X.transpose(1, 0, 2).reshape(6, -1).std(axis=1)[:, None]
    train = [take_from_cases(X, y, scale, seed, f"train{seed}") for seed in (0, 1)]
    test = take_from_cases(Xt, yt, scale, 7, "test")
    return train, test


def test_each_activity_fires_once_and_nothing_else_fires(takes):
    train, test = takes
    model = fit_recordings("minirocket", train, KINDS, TrainingSettings(window_s=5.0, hop_s=0.5), estimate=False)
    assert model.conditioning.high_hz < 5.0               # the band follows the 10 Hz rate
    events = replay_events(test, model)
    c = count_take(events, test.intervals, test.freq_hz.shape[0] / test.rate_hz)
    print({k: c[k] for k in ("performed", "hit", "double", "wrong_name", "ordinary")})
    assert c["performed"] == 20
    assert c["hit"] == c["performed"]
    assert c["false"] == 0
