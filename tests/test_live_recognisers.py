"""Live recognisers: per-hop probabilities equal the offline classifier on the same windows."""

import numpy as np
import pytest

from bridge.recognition import Recogniser
from bridge.recognition.classifiers import fit_cases, make_recogniser, predict_proba
from bridge.recognition.windows import WindowSpec
from bridge.signal import BandPass

RATE = 50.0
SPEC = WindowSpec(RATE, window_s=1.0, hop_s=0.1)


def fitted(name, stream, **options):
    rng = np.random.default_rng(5)
    n_in = 4 if stream == "both" else 2
    X = rng.normal(size=(9, n_in, SPEC.length)).cumsum(axis=2)
    y = np.repeat(["lift", "turn", "null"], 3)
    return fit_cases(name, X, y, ["lift", "turn"], rate_hz=RATE, windows=SPEC, conditioning=BandPass(RATE, 1.0, 10.0),
                     channel_names=("left", "right"), stream=stream, **options)


@pytest.mark.parametrize("name, stream, options", [
    ("minirocket", "both", {"n_features": 840}),
    ("minirocket", "motion", {"n_features": 840}),
    ("minirocket", "motion", {"n_features": 840, "edges": "valid"}),
    ("minirocket", "both", {"n_features": 840, "edges": "valid"}),
    ("dtw", "both", {"band": 0.1}),
    ("dtw", "level", {"band": 0.2}),
])
def test_live_equals_offline(name, stream, options):
    model = fitted(name, stream, **options)
    rng = np.random.default_rng(9)
    level = rng.normal(size=(300, 2)).cumsum(axis=0)
    motion = rng.normal(size=(300, 2))
    rec = make_recogniser(model)
    ends, probs, i = [], [], 0
    while i < 300:
        n = int(rng.integers(1, 17))
        e, p = rec.push(level[i:i + n], motion[i:i + n])
        ends += e
        probs += list(p)
        i += n
    assert ends == list(range(SPEC.length, 301, SPEC.hop))
    both = {"level": level, "motion": motion, "both": np.concatenate([level, motion], axis=1)}[stream]
    cases = np.stack([both[e - SPEC.length:e].T for e in ends])
    np.testing.assert_allclose(np.array(probs), predict_proba(model, cases), rtol=1e-7, atol=1e-12)


def test_linear_model_keeps_the_existing_recogniser():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(8, 2, SPEC.length))
    model = fit_cases("linear", X, np.repeat(["lift", "turn"], 4), ["lift", "turn"], rate_hz=RATE, windows=SPEC)
    assert type(make_recogniser(model)) is Recogniser


def test_pipeline_runs_any_classifier():
    from bridge.service import Pipeline
    model = fitted("dtw", "both", band=0.1)
    pipe = Pipeline(model)
    rng = np.random.default_rng(2)
    freq = 1.8e6 * (1 + 0.001 * rng.normal(size=(200, 2)))
    pipe.feed(freq)
    assert pipe.last_probabilities.shape == (3,) and abs(pipe.last_probabilities.sum() - 1) < 1e-9


def test_garment_minirocket_model_has_valid_edges_and_replays_alike_in_any_block_size():
    # Models fitted on takes use the valid-edge transform; its events over a new take are
    # the same fed in 5 s blocks (replay) as in 0.05 s ones (a live source). Simulated data.
    from bridge.garment import GESTURES, Jacket, random_script, training_script
    from bridge.recognition.classifiers import fit_recordings
    from bridge.service import replay_events
    from bridge.sources import Recording
    gestures = ["raise_left", "bow", "arms_crossed"]
    kinds = {g: GESTURES[g] for g in gestures}
    takes = [Recording.from_take(Jacket(seed=4, wearer=0, session=s).perform(
        training_script(np.random.default_rng(s), 3, gestures=gestures)), kinds) for s in range(2)]
    model = fit_recordings("minirocket", takes, kinds, estimate=False, n_features=840)
    assert model.params.edges == "valid"
    new = Recording.from_take(Jacket(seed=4, wearer=0, session=5).perform(
        random_script(np.random.default_rng(5), 40.0, gestures=gestures)), kinds)
    assert replay_events(new, model, None, 5.0) == replay_events(new, model, None, 0.05)
