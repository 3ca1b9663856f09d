"""The fast linear path computes what the plain definitions say, live as in a batch."""

import numpy as np
import pytest

from bridge.recognition import Recogniser, load_model
from bridge.recognition.classifiers import fit_cases, window_scores
from bridge.recognition.features import FEATURES_PER_CHANNEL, N_SEGMENTS, N_SHAPE, window_features
from bridge.recognition.windows import WindowSpec, all_windows
from bridge.signal import BandPass

RATE = 50.0
SPEC = WindowSpec(RATE, window_s=2.0, hop_s=0.1)


def plain_features(windows):
    """The features written out one by one (the definition the weight matrices encode)."""
    level, motion = windows[:, 0], windows[:, 1]
    m, L, C = level.shape
    head_n = max(1, L // 10)
    head = level[:, :head_n].mean(axis=1)
    tail = level[:, -head_n:].mean(axis=1)
    mean = level.mean(axis=1)
    t = np.linspace(-1.0, 1.0, L)
    slope = np.einsum("l,mlc->mc", t, level - mean[:, None]) / np.dot(t, t)

    def stretches(x, n):
        return np.stack([p.mean(axis=1) for p in np.array_split(x, n, axis=1)], axis=1)

    feats = np.concatenate([
        np.stack([mean, mean - head, tail - head, slope, motion.std(axis=1), motion.max(axis=1), motion.min(axis=1),
                  motion.argmax(axis=1) / L, motion.argmin(axis=1) / L], axis=1),
        stretches(motion * motion, N_SEGMENTS) ** 0.5, stretches(level, N_SHAPE) - head[:, None],
        stretches(motion, N_SHAPE)], axis=1)
    return feats.transpose(0, 2, 1).reshape(m, C * FEATURES_PER_CHANNEL)


def test_features_match_their_plain_definition():
    rng = np.random.default_rng(3)
    for L, C, m in ((100, 2, 5), (37, 3, 4), (8, 1, 2), (200, 8, 1)):
        w = rng.normal(size=(m, 2, L, C)).cumsum(axis=2) * 0.01 + 0.05
        np.testing.assert_allclose(window_features(w), plain_features(w), rtol=1e-9, atol=1e-13)


def fitted(fourier_features=300):
    rng = np.random.default_rng(5)
    X = rng.normal(size=(30, 3, SPEC.length)).cumsum(axis=2)
    y = np.repeat(["lift", "turn", "null"], 10)
    return fit_cases("linear", X, y, ["lift", "turn"], rate_hz=RATE, windows=SPEC, conditioning=BandPass(RATE, 1.0, 10.0),
                     channel_names=("a", "b", "c"), fourier_features=fourier_features)


def test_live_hops_score_as_the_batch_does(tmp_path):
    model = fitted()
    rng = np.random.default_rng(9)
    level = rng.normal(size=(600, 3)).cumsum(axis=0)
    motion = rng.normal(size=(600, 3))
    rec = Recogniser(model)
    ends, probs, i = [], [], 0
    while i < 600:  # blocks of one hop or less (the live case) and longer ones
        n = int(rng.choice([1, 3, 5, 60]))
        e, p = rec.push(level[i:i + n], motion[i:i + n])
        ends += e
        probs += list(p)
        i += n
    w, want_ends = all_windows(SPEC, level, motion)
    assert ends == list(want_ends)
    batch = window_scores(model, w)
    from bridge.recognition.linear import probabilities
    # Same numbers up to float32 rounding at most (on this machine's BLAS they are bit-equal).
    np.testing.assert_allclose(np.array(probs), probabilities(batch, model.temperature), rtol=0, atol=1e-6)
    # A saved and loaded model (float64 map in the file, float32 copy made on load) scores alike.
    again = load_model(model.save(tmp_path / "m.npz"))
    np.testing.assert_array_equal(window_scores(again, w), batch)


def test_float32_map_stays_within_rounding_of_float64():
    model = fitted()
    rng = np.random.default_rng(2)
    f = window_features(rng.normal(size=(200, 2, SPEC.length, 3)).cumsum(axis=2))
    z = (f - model.feature_mean) / model.feature_scale
    exact = np.cos(z @ model.projection + model.phase) * np.sqrt(2.0 / model.phase.size) @ model.weights + model.bias
    got = model.scores(f)
    assert np.abs(got - exact).max() <= 1e-5 * max(1.0, np.abs(exact).max())  # measured 3e-7
    assert (got.argmax(axis=1) == exact.argmax(axis=1)).mean() >= 0.99


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_rows_matmul_gives_each_row_the_same_bits_in_any_batch_size(dtype):
    # Plain `a @ b` fails this with some OpenBLAS kernels (3, 7 or 16 rows round
    # differently from 2), which made live hops and replayed blocks disagree.
    from bridge.recognition.model import rows_matmul
    rng = np.random.default_rng(5)
    a = rng.normal(size=(40, 300)).astype(dtype)
    b = rng.normal(size=(300, 2000)).astype(dtype)
    alone = np.concatenate([rows_matmul(a[i:i + 1], b) for i in range(len(a))])
    for m in (2, 3, 4, 7, 8, 16, 40):
        batched = np.concatenate([rows_matmul(a[i:i + m], b) for i in range(0, len(a), m)])
        assert np.array_equal(batched, alone), m
