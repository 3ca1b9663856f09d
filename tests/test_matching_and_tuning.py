"""Event matching (worked by hand) and choosing the operating point on held-out takes."""

from types import SimpleNamespace as NS

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation.matching import match_events
from dataclasses import replace

from bridge.decisions import GateSettings
from bridge.evaluation.tuning import choose, class_firings, gate_events, tune_model
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


def test_one_class_search_walk_equals_the_gate():
    # class_firings is the search's fast walk; with one gesture class (no refractory
    # between classes) and no quiet time around postures it must decide exactly what
    # Gate.step decides. With the quiet time the gate fires fewer than the walk counts
    # (the search errs on the safe side).
    rng = np.random.default_rng(4)
    classes, kinds = ("null", "wave", "hold"), {"wave": "gesture", "hold": "posture"}
    raw = rng.dirichlet([0.3, 0.3, 0.3], size=3000)
    raw = np.repeat(raw, rng.integers(1, 12, size=3000), axis=0)[:6000]   # runs of similar hops
    times = np.round(np.arange(len(raw)) * 0.1, 6)
    for s in (GateSettings(), GateSettings(threshold=0.4, agree_k=1, agree_n=1, rearm_below=0.2, rearm_hops=5),
              GateSettings(threshold=0.7, agree_k=4, agree_n=5, refractory_s=3.0, rearm_hops=1),
              GateSettings(threshold=0.5, agree_k=3, agree_n=5, min_confidence=0.75)):
        for quiet_s in (-1.0, s.after_posture_s):
            s = replace(s, after_posture_s=quiet_s)
            settings = {"wave": s, "hold": replace(s, exit_threshold=min(0.35, s.threshold))}
            events = gate_events(NS(classes=classes, kinds=kinds), times, raw, settings)
            want = [e.t_s for e in events if e.gesture == "wave"]
            got = class_firings(times, raw, 1, "gesture", settings["wave"]).tolist()
            if quiet_s < 0:
                assert got == want and len(want) > 3, s
            else:
                assert 3 < len(want) < len(got), s
            held = [e.t_s for e in events if e.gesture == "hold" and e.kind == "entered"]
            assert class_firings(times, raw, 2, "posture", settings["hold"]).tolist() == held and len(held) > 3, s


def test_choose_keeps_within_the_cap_and_says_when_it_cannot():
    a, b = GateSettings(threshold=0.9), GateSettings(threshold=0.5)     # strictest first
    table = {"wave": ([a, b], np.array([[3], [5]]), np.array([[0], [2]])),
             "bow": ([a, b], np.array([[1], [4]]), np.array([[1], [1]]))}
    use = np.array([True])
    chosen, met = choose(table, use, cap=1, current={})
    assert met and chosen == {"wave": a, "bow": b}          # 1 false: bow's loose setting has more hits
    chosen, met = choose(table, use, cap=3, current={})
    assert met and chosen == {"wave": b, "bow": b}
    chosen, met = choose(table, use, cap=0, current={})     # bow always fires one: cannot be met
    assert not met and chosen == {"wave": a, "bow": a}


def test_tune_reports_held_out_and_never_fires_more_than_it_started(demo_model, demo_model_file, tmp_path, capsys):
    recs = [take(7, 150.0), take(8, 150.0)]
    r = tune_model(demo_model, recs, max_false_per_hour=1.0, thresholds=(0.5, 0.7, 0.9), debounce=((2, 3), (4, 5)))
    assert set(r.settings) == set(demo_model.classes[1:])
    assert r.pieces == 2 and r.held_out is not None
    assert r.held_out["performed"] == sum(len(x.intervals) for x in recs)   # every piece scored once
    assert r.in_sample["false"] <= r.before["false"]                       # never fires more than before
    # the verb stores the settings in the model file when the budget is met, says so otherwise
    paths = [write_recording(tmp_path / f"held_out{i}.take", x) for i, x in enumerate(recs)]
    out = tmp_path / "tuned.npz"
    code = main(["tune", "--model", str(demo_model_file), *map(str, paths), "-o", str(out), "--max-false-per-hour", "1"])
    text = capsys.readouterr()
    assert "held out (settings chosen on the other 1 of 2 pieces" in text.out
    # the search keeps each class's needed mean: the posture default's 0.65 is printed and stored
    postures = [c for c in demo_model.classes[1:] if demo_model.kinds[c] == "posture"]
    assert postures and all(f"{c} " in text.out for c in postures)
    assert text.out.count("averaging ≥ 0.65") == len(postures)
    if code == 0:
        tuned = load_model(out)
        assert all(tuned.decision[c]["min_confidence"] == 0.65 for c in postures)
        assert set(tuned.decision) == set(demo_model.classes[1:])
        assert all(0 < d["threshold"] <= 1 and 1 <= d["agree_k"] <= d["agree_n"] for d in tuned.decision.values())
    else:
        assert code == 3 and "budget missed" in text.err and not out.exists()


def test_a_missed_budget_exits_non_zero_and_stores_nothing(demo_model_file, tmp_path, monkeypatch, capsys):
    import bridge.evaluation.tuning as tuning
    recs = [take(9, 60.0)]
    path = write_recording(tmp_path / "t.take", recs[0])
    real = tuning.tune_model

    def missed(*args, **kw):
        return replace(real(*args, **kw), met=False)
    monkeypatch.setattr(tuning, "tune_model", missed)
    out = tmp_path / "tuned.npz"
    assert main(["tune", "--model", str(demo_model_file), str(path), "-o", str(out)]) == 3
    err = capsys.readouterr().err
    assert "budget missed" in err and not out.exists()
    # what can help a missed budget; a stricter one cannot
    assert "a longer tuning take" in err and "looser --max-false-per-hour" in err and "stricter" not in err
    assert main(["tune", "--model", str(demo_model_file), str(path), "-o", str(out), "--store-anyway"]) == 0
    assert out.exists()


def test_evaluate_and_tune_print_the_same_counts_for_the_same_take(demo_model_file, tmp_path, capsys):
    import json
    path = write_recording(tmp_path / "same.take", take(11, 120.0))
    assert main(["evaluate", "--model", str(demo_model_file), str(path), "--json"]) == 0
    ev = json.loads(capsys.readouterr().out)["events"]
    model = load_model(demo_model_file)
    before = tune_model(model, [take(11, 120.0)], thresholds=(0.5,), debounce=((3, 4),)).before
    keys = ("performed", "hit", "missed", "double", "wrong_name", "ordinary", "false")
    assert {k: ev[k] for k in keys} == {k: before[k] for k in keys}
    assert ev["performed"] > 10
    assert ev["by_name"] == before["by_name"] and sum(c["performed"] for c in ev["by_name"].values()) == ev["performed"]
    # the printed report names the cues that missed or fired falsely, as the counts say
    from bridge.evaluation.matching import names_to_check
    assert main(["evaluate", "--model", str(demo_model_file), str(path)]) == 0
    printed = [ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("  by name: ")]
    assert names_to_check(before)   # the demo model misses some cues of this short take
    assert printed == ["  by name: " + "; ".join(names_to_check(before))]
