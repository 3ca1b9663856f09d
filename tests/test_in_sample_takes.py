"""A figure on a take the model learnt from (fitted on, or its decision settings tuned on)
is in-sample: tune refuses fitted takes, and evaluate, --json and replay say which are which."""

import json

import pytest

from bridge.cli import main
from bridge.recognition import ModelError, load_model
from bridge.sources import read_recording


@pytest.fixture(scope="module")
def takes(tmp_path_factory):
    """(fit take, held take, model fitted on the first, the same tuned on the held take)."""
    d = tmp_path_factory.mktemp("insample")
    fit, held, model, tuned = d / "fit.take", d / "held.take", d / "m.npz", d / "tuned.npz"
    assert main(["simulate", "--repetitions", "1", "--out", str(fit)]) == 0
    assert main(["simulate", "--repetitions", "1", "--seed", "5", "--out", str(held)]) == 0
    assert main(["fit", str(fit), "-o", str(model), "--classifier", "linear"]) == 0
    assert main(["tune", "--model", str(model), str(held), "-o", str(tuned), "--store-anyway"]) == 0
    return fit, held, model, tuned


def test_tune_refuses_a_take_the_model_was_fitted_on_and_stores_nothing(takes, tmp_path, capsys):
    fit, held, model, _ = takes
    before = model.read_bytes()
    out = tmp_path / "t.npz"
    assert main(["tune", "--model", str(model), str(held), str(fit), "-o", str(out), "--store-anyway"]) == 2
    err = capsys.readouterr().err
    assert f"{fit} is one of the takes {model} was fitted on" in err and str(held) not in err
    assert "Nothing stored" in err
    assert not out.exists()
    assert main(["tune", "--model", str(model), str(fit)]) == 2   # no -o: the model itself is not changed
    assert model.read_bytes() == before


def test_tune_records_the_takes_it_chose_settings_on(takes):
    fit, held, model, tuned = takes
    s = load_model(tuned).summary
    assert s["tuned_on"] == [read_recording(held).fingerprint()]
    assert s["fitted_on"] == [read_recording(fit).fingerprint()]
    assert "tuned_on" not in load_model(model).summary


def test_evaluate_names_a_take_the_settings_were_tuned_on_as_in_sample(takes, capsys):
    fit, held, model, tuned = takes
    capsys.readouterr()
    assert main(["evaluate", "--model", str(tuned), str(held)]) == 0
    err = capsys.readouterr().err
    assert f"{held} is one of the takes {tuned} was tuned on (its decision settings were chosen on it)" in err
    assert "figures on it are in-sample" in err
    assert main(["evaluate", "--model", str(model), str(held)]) == 0   # the untuned model never saw it
    assert "in-sample" not in capsys.readouterr().err


def test_evaluate_json_says_which_takes_were_in_sample_and_how(takes, capsys):
    fit, held, model, tuned = takes
    capsys.readouterr()
    assert main(["evaluate", "--model", str(tuned), str(fit), str(held), "--json"]) == 0
    got = json.loads(capsys.readouterr().out)
    assert got["in_sample"] == {str(fit): ["fitted_on"], str(held): ["tuned_on"]}
    assert main(["evaluate", "--model", str(model), str(held), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["in_sample"] == {}


def test_replay_names_a_take_the_model_learnt_from(takes, capsys):
    fit, held, model, tuned = takes
    capsys.readouterr()
    assert main(["replay", str(held), "--model", str(tuned)]) == 0
    assert f"{held} is one of the takes {tuned} was tuned on" in capsys.readouterr().err
    assert main(["replay", str(fit), "--model", str(tuned)]) == 0
    assert f"{fit} is one of the takes {tuned} was fitted on" in capsys.readouterr().err
    assert main(["replay", str(held), "--model", str(model)]) == 0
    assert "in-sample" not in capsys.readouterr().err


def test_ordinary_takes_are_recorded_as_fitted_on(takes, tmp_path, capsys):
    fit, held, _, _ = takes
    assert main(["simulate", "--ordinary-people", "1", "--ordinary-s", "20", "--out", str(tmp_path / "people")]) == 0
    ordinary = tmp_path / "people" / "ordinary-person0.take"
    model = tmp_path / "o.npz"
    assert main(["fit", str(fit), "--ordinary", str(ordinary), "--classifier", "dtw", "-o", str(model)]) == 0
    assert read_recording(ordinary).fingerprint() in load_model(model).summary["fitted_on"]
    capsys.readouterr()
    assert main(["evaluate", "--model", str(model), str(ordinary), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["in_sample"] == {str(ordinary): ["fitted_on"]}


def test_a_model_without_the_lists_loads_and_names_no_take(takes, tmp_path, capsys):
    fit, held, _, tuned = takes
    m = load_model(tuned)
    m.summary.pop("fitted_on"), m.summary.pop("tuned_on")
    old = m.save(tmp_path / "old.npz")
    capsys.readouterr()
    assert main(["evaluate", "--model", str(old), str(held), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["in_sample"] == {}
    assert main(["tune", "--model", str(old), str(fit), "-o", str(tmp_path / "t.npz"), "--store-anyway"]) == 0


def test_a_model_whose_lists_are_not_fingerprints_is_refused(takes, tmp_path):
    m = load_model(takes[3])
    m.summary["tuned_on"] = {"a": 1}
    bad = m.save(tmp_path / "bad.npz")
    with pytest.raises(ModelError, match="summary tuned_on must be a list of take fingerprints"):
        load_model(bad)
