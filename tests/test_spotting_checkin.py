"""The spotting protocol's check-in variant: a short take recorded in the scored session's
dressing, before its performance, that every fit of that wearer adds. It must sit as the
scored session sits, be a performance of its own, and never let the scored take into a fit."""

from dataclasses import asdict

import numpy as np
import pytest

from bridge.cli import main
from bridge.evaluation import spotting
from bridge.evaluation.spotting import ROLES, Protocol, protocol_takes
from bridge.garment import FULL_GESTURES, Jacket

TINY = Protocol(wearers=2, fit_reps=1, fit_null_s=10.0, tune_reps=1, tune_null_s=5.0, score_reps=1,
                score_null_s=10.0, checkin_reps=1, checkin_null_s=8.0)


def test_a_further_take_keeps_the_dressing_and_draws_its_own_performance():
    scored, checkin, other_day = Jacket(4, 1, 3), Jacket(4, 1, 3, take=1), Jacket(4, 1, 2)
    assert checkin.fits == scored.fits            # the cables sit as in the scored session
    assert other_day.fits != scored.fits          # another dressing sits otherwise
    script = [("raise_left", 2.0), ("standing", 3.0)]
    a, b = scored.perform(script), checkin.perform(script)
    assert a.freq_hz.shape == b.freq_hz.shape and not np.array_equal(a.freq_hz, b.freq_hz)
    assert (a.session, b.session) == ("session3", "session3-take1")
    # without a take key, the session's own performance is unchanged: the same as before the key existed
    again = Jacket(4, 1, 3).perform(script)
    assert np.array_equal(again.freq_hz, a.freq_hz)


def test_checkin_takes_are_named_apart_and_hold_every_gesture(tmp_path):
    takes = protocol_takes(TINY, tmp_path, roles=("score", "checkin"))
    for w in range(TINY.wearers):
        ci, sc = takes[(w, "checkin")], takes[(w, "score")]
        assert ci.session == f"session{ROLES['score']}-take1" and sc.session == f"session{ROLES['score']}"
        assert sorted(iv.label for iv in ci.intervals) == sorted(FULL_GESTURES)
        after_s = ci.freq_hz.shape[0] / ci.rate_hz - ci.intervals[-1].end_s
        assert 8.0 <= after_s < 16.0   # the last gesture's rest, then 8 s of ordinary movement
    names = sorted(p.name for p in tmp_path.glob("*.take"))
    assert names == sorted(f"wearer{w}-{r}.take" for w in range(2) for r in ("score", "checkin1x8s"))
    # a cache of the protocol without a check-in serves the variant (the check-in is named by its settings)
    plain = Protocol(**{**asdict(TINY), "checkin_reps": 0})
    protocol_takes(plain, tmp_path, roles=("score",))


def _recorded_fits(monkeypatch, p, tmp_path):
    """run_protocol with the fit, score and tune replaced: the takes each fit was given."""
    fits = []

    def fit(classifier, recs, **options):
        fits.append([(r.wearer, r.session) for r in recs])
        return object()

    counts = {"performed": 1, "hit": 1, "missed": 0, "double": 0, "wrong_name": 0, "ordinary": 0, "false": 0,
              "latency_s": [0.1], "take_s": 60.0, "ordinary_s": 30.0}
    monkeypatch.setattr(spotting, "fit_model", fit)
    kept = []

    def score(model, rec, settings=None, keep=None):
        kept.append(keep and keep.name)
        return dict(counts)
    monkeypatch.setattr(spotting, "score", score)

    class Tuned:
        settings = {}
    monkeypatch.setattr("bridge.evaluation.tuning.tune_model", lambda model, recs: Tuned())
    result = spotting.run_protocol(p, "minirocket", tmp_path, progress=None, use_prior=False)
    result["kept"] = kept
    return fits, result


def test_every_fit_adds_the_wearers_own_checkin_and_never_the_scored_take(monkeypatch, tmp_path):
    fits, result = _recorded_fits(monkeypatch, TINY, tmp_path)
    scored = f"session{ROLES['score']}"
    assert fits[0] == [("wearer0", "session0"), ("wearer0", "session1"), ("wearer0", scored + "-take1")]
    assert fits[1] == [("wearer1", "session0"), ("wearer1", "session1"), ("wearer1", scored + "-take1")]
    # leave-wearer-out: the others' fit sessions and the new wearer's check-in take only
    assert fits[2] == [("wearer0", "session0"), ("wearer0", "session1"), ("wearer1", scored + "-take1")]
    assert all((w, scored) not in f for f in fits for w in ("wearer0", "wearer1"))
    assert spotting.format_table(result)[-1].startswith("| new wearer, check-in take only | tuned |")
    # each default-gate scoring keeps its hops in the cache; the tuned rescoring does not
    assert result["kept"] == ["hops-checkin-wearer0.npz", None, "hops-checkin-wearer1.npz", None,
                              "hops-checkin-unseen1.npz", None]


def test_every_unseen_wearer_is_held_out_in_turn_and_pooled(monkeypatch, tmp_path):
    fits, result = _recorded_fits(monkeypatch, Protocol(**{**asdict(TINY), "unseen_wearers": 2}), tmp_path)
    scored = f"session{ROLES['score']}"
    # after the two known-wearer fits: wearer 0 held out (wearer 1's sessions and wearer 0's
    # check-in), then wearer 1 held out
    assert fits[2] == [("wearer1", "session0"), ("wearer1", "session1"), ("wearer0", scored + "-take1")]
    assert fits[3] == [("wearer0", "session0"), ("wearer0", "session1"), ("wearer1", scored + "-take1")]
    assert result["unseen_per_wearer"]["wearers"] == [0, 1]
    assert result["unseen_default"]["performed"] == 2        # one cue each in the stub counts, pooled
    assert "hops-checkin-unseen0.npz" in result["kept"] and "hops-checkin-unseen1.npz" in result["kept"]
    assert spotting.format_table(result)[-1].startswith("| new wearers, each held out in turn, check-in take only | tuned |")


def test_without_a_checkin_the_fits_are_the_two_fit_sessions(monkeypatch, tmp_path):
    fits, result = _recorded_fits(monkeypatch, Protocol(**{**asdict(TINY), "checkin_reps": 0}), tmp_path)
    assert fits[0] == [("wearer0", "session0"), ("wearer0", "session1")]
    assert fits[2] == [("wearer0", "session0"), ("wearer0", "session1")]
    assert spotting.format_table(result)[-1].startswith("| unseen wearer | tuned |")


def test_a_third_dressing_is_fitted_and_never_tuned_on(monkeypatch, tmp_path):
    p = Protocol(**{**asdict(TINY), "checkin_reps": 0, "three_dressings": True})
    fits, result = _recorded_fits(monkeypatch, p, tmp_path)
    tune = f"session{ROLES['tune']}"
    assert fits[0] == [("wearer0", "session0"), ("wearer0", "session1"), ("wearer0", tune)]
    # the unseen wearer's model: the other wearer's three sessions, none of its own
    assert fits[2] == [("wearer0", "session0"), ("wearer0", "session1"), ("wearer0", tune)]
    assert "known_tuned" not in result and "unseen_tuned" not in result
    table = spotting.format_table(result)
    assert not any("| tuned |" in line for line in table)
    assert table[2].startswith("| wearer0 | default gate |") and table[-1].startswith("| unseen wearer | default gate |")
    # no tuned rescoring (it would keep nothing: a None between these)
    assert result["kept"] == ["hops-three-dressings-wearer0.npz", "hops-three-dressings-wearer1.npz",
                              "hops-three-dressings-unseen1.npz"]
    # the takes do not depend on the workflow: a two-session cache serves it
    protocol_takes(Protocol(**{**asdict(p), "three_dressings": False}), tmp_path, roles=("score",))
    with pytest.raises(ValueError, match="choose one"):
        spotting.run_protocol(Protocol(**{**asdict(TINY), "three_dressings": True}), "minirocket", tmp_path,
                              progress=None, use_prior=False)


@pytest.mark.parametrize("args, message", [
    (["--spotting-checkin", "-1"], "0 or more"),
    (["--spotting-checkin-s", "-5"], "0 or more"),
    (["--spotting-checkin", "3", "--spotting-development"], "development sessions have none"),
    (["--spotting-unseen", "0"], "--spotting-unseen must be 1 to --spotting-wearers"),
    (["--spotting-three-dressings", "--spotting-checkin", "3"], "a workflow of its own"),
    (["--spotting-unseen", "7"], "--spotting-unseen must be 1 to --spotting-wearers"),
])
def test_bad_checkin_options_are_refused_before_any_take_is_rendered(args, message, tmp_path, capsys):
    rc = main(["bench", "--spotting", "--spotting-cache", str(tmp_path / "c"), *args])
    assert rc != 0 and message in capsys.readouterr().err
    assert not (tmp_path / "c").exists()


def test_score_keeps_the_hops_it_counted(demo_model, tmp_path):
    from bridge.decisions.gate import gate_settings_for
    from bridge.evaluation.matching import count_take
    from bridge.evaluation.tuning import _hop_s, gate_events
    from bridge.garment.jacket import random_script
    from bridge.sources import Recording
    take = Jacket(seed=1, wearer=0, session=4).perform(random_script(np.random.default_rng(3), 60.0))
    rec = Recording.from_take(take, dict(demo_model.kinds))
    counts = spotting.score(demo_model, rec, keep=tmp_path / "hops.npz")
    assert counts["performed"] > 3 and counts["hit"] > 0
    with np.load(tmp_path / "hops.npz", allow_pickle=False) as z:
        t, probs, classes = z["t_s"], z["probabilities"], tuple(z["classes"])
    assert classes == demo_model.classes and probs.shape == (len(t), len(classes)) and len(t) > 500
    # the stored hops, through the gate again, give the counts score returned
    gate = gate_settings_for(classes[1:], demo_model.decision, demo_model.kinds, hop_s=_hop_s(demo_model))
    again = count_take(gate_events(demo_model, t, probs, gate), rec.intervals, 60.0)
    assert {k: again[k] for k in ("hit", "double", "wrong_name", "ordinary")} == \
        {k: counts[k] for k in ("hit", "double", "wrong_name", "ordinary")}
    # recount reads the kept hops beside the take, as run_protocol leaves them in its cache
    from bridge.sources import write_recording
    (tmp_path / "hops.npz").rename(tmp_path / "hops-two-sessions-wearer0.npz")
    write_recording(tmp_path / "wearer0-score.take", rec)
    same = spotting.recount(tmp_path, "two-sessions")["pooled"]
    assert {k: same[k] for k in ("hit", "double", "wrong_name", "ordinary")} == \
        {k: counts[k] for k in ("hit", "double", "wrong_name", "ordinary")}
    # a gate no hop can pass fires nothing; a looser gesture threshold fires no less
    silent = spotting.recount(tmp_path, "two-sessions", {"agree_k": 99, "agree_n": 99}, {"agree_k": 99, "agree_n": 99})["pooled"]
    assert silent["hit"] == silent["false"] == 0
    loose = spotting.recount(tmp_path, "two-sessions", {"threshold": 0.4})["pooled"]
    assert loose["hit"] + loose["false"] >= counts["hit"] + counts["false"]
    with pytest.raises(ValueError, match="keeps no scored sessions of 'checkin'"):
        spotting.recount(tmp_path, "checkin")
    # the script prints the same counts; without kept sessions it says so and exits non-zero
    import subprocess
    import sys
    from pathlib import Path
    script = Path(__file__).resolve().parent.parent / "benchmarks" / "spotting_recount.py"
    run = subprocess.run([sys.executable, str(script), "--cache", str(tmp_path), "--gestures", "0.4", "4", "5"],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert f"wearer0: {loose['hit']}/{loose['performed']} hits, {loose['false']} false" in run.stdout
    votes_only = spotting.recount(tmp_path, "two-sessions", None, {"min_confidence": 0.0})["pooled"]
    run = subprocess.run([sys.executable, str(script), "--cache", str(tmp_path), "--posture-min-confidence", "0"],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert f"wearer0: {votes_only['hit']}/{votes_only['performed']} hits, {votes_only['false']} false" in run.stdout
    # two caches (the same troupe twice here) pool into one figure: every count doubled
    run = subprocess.run([sys.executable, str(script), "--cache", str(tmp_path), "--cache", str(tmp_path)],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "pooled over 2 caches, 2 scored sessions" in run.stdout
    assert f"{tmp_path} wearer0: {counts['hit']}/{counts['performed']} hits" in run.stdout
    assert f"firings: {2 * counts['hit']} hits of {2 * counts['performed']} performed" in run.stdout
    empty = subprocess.run([sys.executable, str(script), "--cache", str(tmp_path), "--workflow", "checkin"],
                           capture_output=True, text=True)
    assert empty.returncode != 0 and "keeps no scored sessions" in empty.stderr

