"""The band-pass follows the source's sample rate, can be set, and is stored in the model."""

import pytest

from bridge.cli import main
from bridge.recognition import TrainingSettings, load_model
from bridge.recognition.training import band_edges


def test_default_band_stays_below_nyquist():
    assert band_edges(100.0) == (1.0, 10.0)
    assert band_edges(10.0) == (1.0, 4.0)        # 0.4 × rate: 80 % of the Nyquist frequency
    assert band_edges(10.0, 0.5, 3.0) == (0.5, 3.0)
    with pytest.raises(ValueError, match="--band-hz"):
        band_edges(2.0)                           # no band above 1 Hz below 0.8 Hz
    with pytest.raises(ValueError, match="does not fit"):
        band_edges(10.0, 1.0, 6.0)                # above the 5 Hz Nyquist frequency
    assert TrainingSettings().band(10.0).high_hz == 4.0


def test_a_10_hz_source_trains_and_the_band_is_stored(tmp_path, capsys, monkeypatch):
    # What is checked is the band, the window and what the fit says, not the model's
    # quality: fewer convolution features than the default keep the fits short.
    from bridge.recognition import classifiers
    monkeypatch.setitem(classifiers.RECORDING_DEFAULTS, "minirocket",
                        {**classifiers.RECORDING_DEFAULTS["minirocket"], "n_features": 840})
    take = tmp_path / "slow.take"
    assert main(["simulate", "--rate-hz", "10", "--repetitions", "2", "--null-s", "30", "--seed", "3",
                 "--out", str(take)]) == 0
    model = tmp_path / "slow.npz"
    capsys.readouterr()
    assert main(["fit", str(take), "-o", str(model)]) == 0
    m = load_model(model)
    assert (m.conditioning.rate_hz, m.conditioning.low_hz, m.conditioning.high_hz) == (10.0, 1.0, 4.0)
    out = capsys.readouterr().out
    # The fit says which window it chose, and that it added the built-in jacket's simulated
    # people (rendered at the take's 10 Hz) since no ordinary movement of others was given.
    assert f"window {m.windows.window_s:g} s (room for the labelled gestures)" in out
    assert "adding the ordinary movement of 6 simulated people" in out and m.summary["ordinary_takes"] == 6
    # the three classes with the lowest held-out window recall, as stored in the model
    figs = sorted((v["recall"], c) for c, v in m.summary["held_out_by_class"].items())
    assert set(m.summary["held_out_by_class"]) == set(m.classes[1:])
    assert "held-out window recall, lowest first: " + ", ".join(f"{c} {r:.2f}" for r, c in figs[:3]) in out
    assert main(["fit", str(take), "-o", str(model), "--overwrite", "--band-hz", "0.5", "3", "--no-simulated-others"]) == 0
    m = load_model(model)
    assert (m.conditioning.low_hz, m.conditioning.high_hz) == (0.5, 3.0)
    assert "ordinary_takes" not in m.summary
    out = capsys.readouterr().out
    assert "no --ordinary takes" in out and "--ordinary-people" in out
    capsys.readouterr()
    assert main(["fit", str(take), "-o", str(model), "--overwrite", "--band-hz", "1", "7"]) != 0
    assert "does not fit a 10 Hz source" in capsys.readouterr().err
