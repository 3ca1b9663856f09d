"""Event matching (worked by hand) and choosing the operating point on held-out takes."""

from types import SimpleNamespace as NS

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation.matching import match_events
from bridge.evaluation.tuning import tune_model
from bridge.garment import GESTURES, Jacket, random_script
from bridge.recognition import load_model
from bridge.sources import Recording, write_recording


def test_matching_by_hand():
    ivs = [NS(start_s=1.0, end_s=2.0, label="bow"), NS(start_s=5.0, end_s=9.0, label="hold"),
           NS(start_s=20.0, end_s=21.0, label="bow")]
    evs = [NS(t_s=4.4, gesture="bow", kind="gesture"),     # within end + 2.5 s of the first bow
           NS(t_s=4.6, gesture="bow", kind="gesture"),     # a second one: false
           NS(t_s=6.0, gesture="hold", kind="entered"),    # inside the posture
           NS(t_s=8.0, gesture="hold", kind="left"),       # not a firing event
           NS(t_s=19.9, gesture="bow", kind="gesture")]    # before the start: false; the last bow is missed
    m = match_events(evs, ivs)
    assert [(iv.start_s, e.t_s) for iv, e in m.hits] == [(1.0, 4.4), (5.0, 6.0)]
    assert [iv.start_s for iv in m.missed] == [20.0]
    assert [e.t_s for e in m.false] == [4.6, 19.9]
    assert m.latencies_s == pytest.approx([2.4, 1.0])  # gesture: from its end; posture: from its start


def take(session, seconds):
    jacket = Jacket(seed=1, wearer=0, session=session)
    return Recording.from_take(jacket.perform(random_script(np.random.default_rng(session), seconds)), GESTURES)


def test_tuning_keeps_false_triggers_within_the_budget(demo_model, demo_model_file, tmp_path):
    recs = [take(7, 150.0)]
    r = tune_model(demo_model, recs, max_false_per_hour=1.0, thresholds=(0.5, 0.7, 0.9), debounce=((2, 3), (4, 5)))
    hours = r.after.hours
    assert r.after.false <= max(int(1.0 * hours), r.before.false)
    if r.before.false > int(hours):  # untuned was over budget: tuning must not make it worse
        assert r.after.false <= r.before.false
    assert set(r.settings) == set(demo_model.classes[1:])
    # the verb stores the settings in the model file and prints both operating points
    path = write_recording(tmp_path / "held_out.take", recs[0])
    out = tmp_path / "tuned.npz"
    assert main(["tune", "--model", str(demo_model_file), str(path), "-o", str(out)]) == 0
    tuned = load_model(out)
    assert set(tuned.decision) == set(demo_model.classes[1:])
    assert all(0 < d["threshold"] <= 1 and 1 <= d["agree_k"] <= d["agree_n"] for d in tuned.decision.values())
