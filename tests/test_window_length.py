"""The automatic window: typical gestures with 25 % room, the longest one whole.

A gesture trains only windows that hold all of it and fires only when several hops agree,
so a window no longer than a slow wearer's gestures leaves them unlearnt. Invented takes
(random frequencies with labels at chosen times): these check the arithmetic of windows
and labels, not recognition.
"""

import numpy as np
import pytest

from bridge.recognition import TrainingSettings
from bridge.recognition.classifiers import recording_windows
from bridge.recognition.training import MIN_WINDOW_S, window_length_s
from bridge.sources.recording import Label, Recording

RATE = 50.0
KINDS = {"sweep": "gesture", "lean": "posture"}


def take(gesture_s: float, reps: int = 4, posture_s: float = 6.0) -> Recording:
    """Reps of a gesture lasting gesture_s and one long posture, 4 s of rest around each."""
    labels, t = [], 4.0
    for _ in range(reps):
        labels.append(Label(t, t + gesture_s, "sweep"))
        t += gesture_s + 4.0
    labels.append(Label(t, t + posture_s, "lean"))
    t += posture_s + 4.0
    n = int(t * RATE)
    rng = np.random.default_rng(0)
    freq = 400_000.0 + rng.normal(0.0, 5.0, (n, 2))
    return Recording(RATE, ("a", "b"), np.arange(n) / RATE, freq, tuple(labels), kinds=dict(KINDS))


def test_window_holds_typical_gestures_with_room_and_the_longest_whole():
    s = TrainingSettings(hop_s=0.1)
    assert window_length_s([take(1.2)], KINDS, s) == MIN_WINDOW_S        # short gestures: 2 s
    assert window_length_s([take(2.0)], KINDS, s) == pytest.approx(2.5)  # 1.25 x 2.0 s (90th percentile)
    assert window_length_s([take(2.02)], KINDS, s) == pytest.approx(2.6)  # rounded up to the hop
    # The longest over all takes; the 6 s posture does not count.
    assert window_length_s([take(1.2), take(2.4)], KINDS, s) == pytest.approx(3.0)
    assert window_length_s([take(2.4)], KINDS, TrainingSettings(window_s=1.5)) == 1.5
    # One long gesture among short ones: room for it and two hops, not 25 % more.
    odd = take(1.2, reps=9)
    odd.intervals = odd.intervals[:1] + (Label(odd.intervals[1].start_s, odd.intervals[1].start_s + 2.3, "sweep"),) \
        + odd.intervals[2:]
    assert window_length_s([odd], KINDS, s) == pytest.approx(2.5)


def test_slow_gestures_get_several_training_windows_each():
    rec = take(2.0, reps=4)
    counts = {}
    for name, settings in (("fixed 2 s", TrainingSettings(window_s=2.0, hop_s=0.1)),
                           ("automatic", TrainingSettings(hop_s=0.1))):
        _, y, _, classes, _, _ = recording_windows([rec], KINDS, settings)
        counts[name] = int((y == classes.index("sweep")).sum())
    # A 2 s window holds a 2 s gesture at one hop at most; 2.5 s holds it at about
    # 0.5 s / 0.1 s = 5 hops per repetition.
    assert counts["fixed 2 s"] <= 4
    assert counts["automatic"] >= 4 * 4
