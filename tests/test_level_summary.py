"""Level summary: where the level stands at a window's end (minirocket's level features)."""

import numpy as np

from bridge.recognition.features import level_summary, level_summary_size


def test_level_summary_by_hand():
    # Two channels, 20 samples: channel 0 steps from 0 to 3 halfway, channel 1 holds −2.
    x = np.zeros((1, 2, 20))
    x[0, 0, 10:] = 3.0
    x[0, 1] = -2.0
    got = level_summary(x)
    assert got.shape == (1, level_summary_size(2)) == (1, 7)
    # held levels (last tenth), steps (last minus first tenth), then a², ab, b²
    np.testing.assert_allclose(got[0], [3.0, -2.0, 3.0, 0.0, 9.0, -6.0, 4.0])
    # A constant offset is invisible to zero-sum kernels, not to the held levels.
    assert not np.allclose(level_summary(x + 1.0), got)
