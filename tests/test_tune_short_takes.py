"""Tune on takes too short to show the false-firing budget: no class is given settings looser
than those it started from (a lower threshold, fewer or a smaller share of agreeing hops, a
quicker re-arm), and the verb says which classes the search alone would have loosened."""

import pytest

from bridge.cli import main
from bridge.decisions import gate_settings_for
from bridge.evaluation.matching import hours_to_show
from bridge.evaluation.tuning import no_looser, tune_model
from bridge.recognition import load_model
from bridge.sources import read_recording
from tests.conftest import linear_on_a_take


def _settings(model, decision=None):
    return gate_settings_for(model.classes[1:], model.decision if decision is None else decision, model.kinds,
                             hop_s=model.windows.hop_s)


@pytest.fixture(scope="module")
def short(tmp_path_factory):
    """(model fitted on one take, a held take of about 2 minutes of another session)."""
    _, model, held = linear_on_a_take(tmp_path_factory.mktemp("short"), repetitions=2)
    return model, held


def test_the_search_on_a_short_take_would_loosen_some_class(short):
    """The premise of the next tests: left free, the search loosens on this take."""
    model, held = short
    m = load_model(model)
    start = _settings(m)
    free = tune_model(m, [read_recording(held)], loosen=True)
    assert any(not no_looser(s, start[g]) for g, s in _settings(m, free.settings).items())
    kept = tune_model(m, [read_recording(held)], loosen=False)
    assert all(no_looser(s, start[g]) for g, s in _settings(m, kept.settings).items())
    assert kept.held_back == tuple(g for g, s in _settings(m, free.settings).items() if not no_looser(s, start[g]))


def test_tune_on_a_short_take_stores_nothing_looser_and_says_so(short, tmp_path, capsys):
    model, held = short
    hours = read_recording(held).freq_hz.shape[0] / read_recording(held).rate_hz / 3600
    assert hours < hours_to_show(1.0)
    out = tmp_path / "tuned.npz"
    # --store-anyway: stored even when the held-out budget is missed, so the stored settings can be read
    assert main(["tune", "--model", str(model), str(held), "-o", str(out), "--store-anyway"]) == 0
    text = capsys.readouterr().out
    start, tuned = _settings(load_model(model)), load_model(out)
    stored = _settings(tuned)
    assert all(no_looser(stored[g], start[g]) for g in start), {g: stored[g] for g in start}
    assert "cannot show at most 1 false firing per hour (that needs ≥ 3.7 h)" in text
    assert "no class was given settings looser than the model's" in text
    assert "on these takes alone the search would have loosened " in text


def test_a_take_long_enough_for_the_budget_may_loosen(short, tmp_path, monkeypatch, capsys):
    """At a budget of 200 per hour, 1.1 minutes can show it: the whole grid is searched."""
    import bridge.evaluation.tuning as tuning
    model, held = short
    asked = []
    real = tuning.tune_model

    def spy(*args, **kw):
        asked.append(kw.get("loosen"))
        return real(*args, **kw)
    monkeypatch.setattr(tuning, "tune_model", spy)
    hours = read_recording(held).freq_hz.shape[0] / read_recording(held).rate_hz / 3600
    assert hours >= hours_to_show(200.0)
    main(["tune", "--model", str(model), str(held), "-o", str(tmp_path / "t.npz"), "--max-false-per-hour", "200"])
    assert asked == [True]
    assert "no class was given settings looser" not in capsys.readouterr().out


def test_no_looser_compares_every_way_a_gate_fires_more_readily():
    from dataclasses import replace

    from bridge.decisions import GateSettings
    start = GateSettings(threshold=0.65, agree_k=4, agree_n=5, rearm_below=0.3, rearm_hops=3)
    assert no_looser(start, start)
    assert no_looser(replace(start, threshold=0.8, agree_k=8, agree_n=10, rearm_below=0.1, rearm_hops=8), start)
    for looser in (replace(start, threshold=0.5), replace(start, agree_k=1, agree_n=1),
                   replace(start, agree_n=8), replace(start, rearm_below=0.5), replace(start, rearm_hops=1)):
        assert not no_looser(looser, start), looser
