"""What a careless command line must not do: write over a take, lose a finished fit to a
bad output path, take impossible numbers, pass an empty mapping as good, stop in silence."""

import socket

import pytest

import bridge.cli.parser as parser
from bridge.cli import main
from bridge.cli.live import _close_outputs


@pytest.fixture(scope="module")
def small_take(tmp_path_factory):
    path = tmp_path_factory.mktemp("guards") / "a.take"
    assert main(["simulate", "--repetitions", "1", "--out", str(path)]) == 0
    return path


def test_fit_never_writes_over_a_take_it_reads(small_take, capsys):
    before = small_take.read_bytes()
    assert main(["fit", str(small_take), "-o", str(small_take), "--classifier", "linear"]) == 2
    assert "one of the files read" in capsys.readouterr().err
    assert small_take.read_bytes() == before


def test_a_new_model_must_be_named_npz(small_take, tmp_path, capsys):
    assert main(["fit", str(small_take), "-o", str(tmp_path / "me.txt"), "--classifier", "linear"]) == 2
    assert "name it me.npz, not me.txt" in capsys.readouterr().err
    assert not (tmp_path / "me.txt").exists()


def test_fit_never_writes_over_a_file_that_is_not_a_model(small_take, tmp_path, capsys):
    other = tmp_path / "b.take"
    other.write_bytes(small_take.read_bytes())
    assert main(["fit", str(small_take), "-o", str(other), "--classifier", "linear"]) == 2
    assert "is not a model file" in capsys.readouterr().err
    assert other.read_bytes() == small_take.read_bytes()


@pytest.mark.parametrize("where", ["missing/dir/m.npz", "."])
def test_fit_refuses_an_output_it_could_not_write_before_fitting(small_take, tmp_path, monkeypatch, capsys, where):
    import bridge.recognition as recognition
    monkeypatch.setattr(recognition, "fit_recordings", lambda *a, **k: pytest.fail("fitted before the check"))
    monkeypatch.chdir(tmp_path)
    assert main(["fit", str(small_take), "-o", where, "--classifier", "linear"]) == 2
    err = capsys.readouterr().err
    assert ("does not exist" in err) if "missing" in where else ("is a folder" in err)


def test_fit_keeps_an_existing_model_unless_told(small_take, tmp_path, monkeypatch, capsys):
    import bridge.recognition as recognition
    from bridge.recognition import load_model
    model = tmp_path / "me.npz"
    assert main(["fit", str(small_take), "-o", str(model), "--classifier", "linear", "--hop-s", "0.2"]) == 0
    before = model.read_bytes()
    real = recognition.fit_recordings
    monkeypatch.setattr(recognition, "fit_recordings", lambda *a, **k: pytest.fail("fitted before the check"))
    capsys.readouterr()
    assert main(["fit", str(small_take), "-o", str(model), "--classifier", "linear"]) == 2
    err = capsys.readouterr().err
    assert f"{model} exists" in err and "--overwrite" in err
    assert model.read_bytes() == before
    monkeypatch.setattr(recognition, "fit_recordings", real)
    assert main(["fit", str(small_take), "-o", str(model), "--classifier", "linear", "--overwrite"]) == 0
    assert load_model(model).windows.hop_s == 0.1   # the new fit, not the 0.2 s one


def test_tune_keeps_another_existing_model_unless_told(small_take, tmp_path, capsys):
    from bridge.recognition import load_model
    model, other = tmp_path / "me.npz", tmp_path / "other.npz"
    assert main(["fit", str(small_take), "-o", str(model), "--classifier", "linear"]) == 0
    assert main(["fit", str(small_take), "-o", str(other), "--classifier", "linear"]) == 0
    kept = other.read_bytes()
    held = tmp_path / "held.take"   # tune refuses a take the model was fitted on
    assert main(["simulate", "--repetitions", "1", "--session", "1", "--out", str(held)]) == 0
    capsys.readouterr()
    tune = ["tune", "--model", str(model), str(held), "--store-anyway"]
    assert main([*tune, "-o", str(other)]) == 2
    err = capsys.readouterr().err
    assert f"{other} exists" in err and "--overwrite" in err
    assert other.read_bytes() == kept
    # storing into the model being tuned, with or without -o naming it, needs no flag
    assert main(tune) == 0 and "decision settings stored" in capsys.readouterr().out
    assert main([*tune, "-o", str(model)]) == 0
    assert main([*tune, "-o", str(other), "--overwrite"]) == 0
    assert set(load_model(other).decision) == set(load_model(model).classes[1:])


def test_tune_never_writes_over_a_take_it_reads(small_take, demo_model_file, capsys):
    before = small_take.read_bytes()
    assert main(["tune", "--model", str(demo_model_file), str(small_take), "-o", str(small_take)]) == 2
    assert "one of the files read" in capsys.readouterr().err
    assert small_take.read_bytes() == before


def test_simulate_keeps_an_existing_take_unless_told(small_take, tmp_path, capsys):
    out = tmp_path / "c.take"
    out.write_bytes(b"someone's capture")
    assert main(["simulate", "--repetitions", "1", "--out", str(out)]) == 2
    assert "--overwrite" in capsys.readouterr().err and out.read_bytes() == b"someone's capture"
    assert main(["simulate", "--repetitions", "1", "--out", str(out), "--overwrite"]) == 0
    assert out.read_bytes() != b"someone's capture"


@pytest.mark.parametrize("argv, says", [
    (["fit", "x.take", "-o", "m.npz", "--hop-s", "0"], "--hop-s: must be a number above 0"),
    (["fit", "x.take", "-o", "m.npz", "--hop-s", "-0.1"], "--hop-s: must be a number above 0"),
    (["fit", "x.take", "-o", "m.npz", "--window-s", "-1"], "--window-s: must be a number above 0"),
    (["demo", "--for", "-5"], "--for: must be a number above 0"),
    (["demo", "--for", "0"], "--for: must be a number above 0"),
    (["demo", "--wearer", "-1"], "--wearer: must be a whole number, 0 or more"),
    (["send", "panic", "--port", "0"], "--port: must be a UDP port, 1 to 65535"),
    (["watch", "--port", "70000", "--once"], "--port: must be a UDP port, 1 to 65535"),
    (["tune", "--model", "m.npz", "x.take", "--max-false-per-hour", "-1"], "--max-false-per-hour: must be a number, 0 or more"),
    (["simulate", "--null-s", "-10", "--out", "s.take"], "--null-s: must be a number, 0 or more"),
    (["capture", "--rate-hz", "0"], "--rate-hz: must be a number above 0"),
    (["capture", "--ordinary-s", "-5"], "--ordinary-s: must be a number, 0 or more"),
    (["bench", "--hops", "-5"], "--hops: must be a whole number, 1 or more"),
    (["bench", "--fuzz", "-1"], "--fuzz: must be a whole number, 1 or more"),
    (["simulate", "--serve", "--for", "-1"], "--for: must be a number above 0"),
    (["fit", "x.take", "-o", "m.npz", "--hop-s", "nan"], "--hop-s: must be a number above 0"),
])
def test_impossible_numbers_are_refused_by_name(argv, says, capsys):
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2 and says in capsys.readouterr().err


def test_check_refuses_a_mapping_that_sends_nothing(tmp_path, capsys):
    empty = tmp_path / "empty.toml"
    empty.write_text("")
    assert main(["check", str(empty)]) == 2
    assert "no destinations and no rules" in capsys.readouterr().err


def test_a_replay_with_an_empty_mapping_says_nothing_is_sent(small_take, demo_model_file, tmp_path, capsys):
    empty = tmp_path / "empty.toml"
    empty.write_text("# nothing yet\n")
    assert main(["replay", str(small_take), "--model", str(demo_model_file), "--mapping", str(empty)]) == 0
    assert "no destinations and no rules; nothing is sent" in capsys.readouterr().err


def test_watch_once_says_why_when_nothing_arrives(capsys):
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    assert main(["watch", "--once", "--port", str(port), "--wait-s", "0.3"]) == 1
    assert f"nothing arrived on 127.0.0.1:{port}" in capsys.readouterr().err


def test_ctrl_c_in_a_fit_ends_with_one_line_and_exit_130(monkeypatch, capsys):
    def interrupted(_a):
        raise KeyboardInterrupt
    monkeypatch.setattr(parser, "cmd_fit", interrupted)
    assert main(["fit", "x.take", "-o", "m.npz"]) == 130
    err = capsys.readouterr().err
    assert "interrupted; fit stopped before it finished" in err and "Traceback" not in err


def test_stopping_a_lighting_output_says_the_lights_went_to_their_safe_look(capsys):
    from bridge.mapping.messages import Destination, LightLevels
    from bridge.outputs import open_output
    sink = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sink.bind(("127.0.0.1", 0))
    out = open_output(Destination("rig", "sacn", host="127.0.0.1", port=sink.getsockname()[1], universe=7))
    out.send(LightLevels(7, {1: 255}))
    _close_outputs({"rig": out})
    sink.close()
    err = capsys.readouterr().err
    assert "output rig: sent" in err and "on stop: universe 7 set to the safe look, then the stream terminated" in err


def test_stopping_a_key_output_says_how_many_keys_it_let_go():
    from bridge.mapping.messages import KeyAction
    from bridge.outputs.keys import KeyOutput
    from tests.test_keys import Recorder
    out = KeyOutput("keys", Recorder())
    out.send(KeyAction(("shift",), "down"))
    out.close()
    assert out.stats.on_close == "1 held key released"


@pytest.mark.parametrize("argv, says", [
    (["replay", "{model}", "--model", "{model}"], "not a drape take file (binary"),
    (["check", "{model}"], "not a mapping file (binary"),
    (["start", "--config", "{model}"], "not a config file (binary"),
])
def test_a_model_given_where_text_belongs_is_named_for_what_it_is(argv, says, demo_model_file, capsys):
    assert main([a.format(model=demo_model_file) for a in argv]) == 2
    err = capsys.readouterr().err
    assert says in err and "codec" not in err


def test_a_fit_on_one_gesture_says_it_can_fire_nothing_else(tmp_path, capsys):
    from bridge.garment import Jacket
    from bridge.sources import Recording, write_recording
    take = Jacket(seed=3).perform([("standing", 3.0), ("wave_right", None), ("standing", 4.0), ("wave_right", None),
                                  ("walking", 4.0), ("wave_right", None), ("standing", 4.0)])
    path = tmp_path / "cut.take"
    write_recording(path, Recording.from_take(take, {"wave_right": "gesture"}))
    assert main(["fit", str(path), "-o", str(tmp_path / "m.npz"), "--classifier", "linear"]) == 0
    out = capsys.readouterr().out
    assert "only one gesture in these takes (wave_right)" in out and "1 class from" in out
    # a switch's carer learns that look-alike postures are taken for it, and what to record
    assert "may be taken for wave_right" in out and "record those too and leave them unmapped" in out


def test_evaluate_with_a_model_refuses_fitting_options_and_names_cues_it_cannot_know(
        demo_model_file, tmp_path, capsys):
    from bridge.garment import Jacket
    from bridge.sources import Recording, write_recording
    take = Jacket(seed=4).perform([("standing", 3.0), ("bow", None), ("standing", 3.0), ("wave_right", None),
                                  ("standing", 3.0)])
    path = tmp_path / "t.take"
    write_recording(path, Recording.from_take(take, {"bow": "gesture", "wave_right": "gesture"}))
    assert main(["evaluate", "--model", str(demo_model_file), str(path), "--scheme", "leave-wearer-out"]) == 2
    assert "leave them out" in capsys.readouterr().err
    assert main(["evaluate", "--model", str(demo_model_file), str(path)]) == 0
    err = capsys.readouterr().err   # the demo model knows bow, not wave_right
    assert "1 labelled performance of wave_right, which the model does not know, count as missed" in err
    assert "bow" not in err


def test_a_take_the_model_was_fitted_on_is_named_as_in_sample(small_take, tmp_path, capsys):
    model = tmp_path / "m.npz"
    assert main(["fit", str(small_take), "-o", str(model), "--classifier", "linear"]) == 0
    other = tmp_path / "other.take"
    assert main(["simulate", "--repetitions", "1", "--seed", "5", "--out", str(other)]) == 0
    capsys.readouterr()
    assert main(["evaluate", "--model", str(model), str(small_take), str(other)]) == 0
    err = capsys.readouterr().err
    assert f"{small_take} is one of the takes {model} was fitted on" in err and str(other) not in err
    assert main(["tune", "--model", str(model), str(small_take), "-o", str(tmp_path / "t.npz"), "--store-anyway"]) == 2
    assert f"{small_take} is one of the takes {model} was fitted on" in capsys.readouterr().err
    assert not (tmp_path / "t.npz").exists()


def test_fit_evaluate_and_tune_name_a_take_whose_capture_was_cut_short(small_take, demo_model_file, tmp_path, capsys):
    """A take a capture left unfinished (its #cut line) is named in a warning by every verb
    that learns from or scores takes; a complete one is not."""
    import dataclasses

    from bridge.cli import main
    from bridge.sources import CutShort, read_recording, write_recording
    cut = CutShort("SIGINT", "the countdown to prompt 6 of 45 (bow)", (("bow", 5),), 180.0, 180.0)
    short = write_recording(tmp_path / "short.take", dataclasses.replace(read_recording(small_take), cut_short=cut))
    for argv in (["fit", str(short), "--classifier", "linear", "-o", str(tmp_path / "m.npz")],
                 ["evaluate", "--model", str(demo_model_file), str(short)],
                 ["tune", "--model", str(demo_model_file), str(short), "-o", str(tmp_path / "t.npz")]):
        main(argv)
        err = capsys.readouterr().err
        assert f"{short} is an incomplete take" in err and "SIGINT" in err, (argv, err)
    main(["evaluate", "--model", str(demo_model_file), str(small_take)])
    assert "incomplete" not in capsys.readouterr().err


def test_fit_says_its_held_out_figure_also_chose_the_penalty(small_take, tmp_path, capsys):
    """The ridge penalty is picked on the same grouped folds that give the printed accuracy:
    the line says so instead of passing the figure off as untouched."""
    from bridge.cli import main
    assert main(["fit", str(small_take), "--classifier", "linear", "-o", str(tmp_path / "m.npz")]) == 0
    line = next(l for l in capsys.readouterr().out.splitlines() if l.startswith(str(tmp_path / "m.npz")))
    assert "accuracy" in line and "(its ridge penalty chosen on the same folds: a little optimistic)" in line, line


def test_a_take_given_as_a_model_or_with_ts_is_named_for_what_it_is(small_take, tmp_path, capsys):
    """The two mix-ups of a take: where a model belongs, and read as a .ts case file."""
    from bridge.cli import main
    assert main(["evaluate", "--model", str(small_take), str(small_take)]) == 2
    assert "a take, not a model: give the .npz that drape fit wrote" in capsys.readouterr().err
    assert main(["fit", "--ts", str(small_take), "-o", str(tmp_path / "m.npz")]) == 2
    assert "a drape take, not a UCR/UEA .ts case file: leave out --ts" in capsys.readouterr().err


def test_replay_shows_each_message_in_the_words_of_the_trade():
    from bridge.cli.data import _show
    from bridge.mapping.messages import (Arm, KeyAction, LightLevels, MidiControl, MidiNote, MidiProgram, OscMessage,
                                         Release)
    assert _show(KeyAction(("ctrl", "s"))) == "keys ctrl+s (tap)"
    assert _show(MidiNote(1, 60, 90)) == "note on 60 velocity 90, channel 1"
    assert _show(MidiControl(2, 7, 100)) == "CC 7 value 100, channel 2"
    assert _show(MidiProgram(1, 5)) == "program 5, channel 1"
    assert _show(LightLevels(1, {5: 255, 6: 0}, 1.5)) == "universe 1 slots {5: 255, 6: 0} over 1.5 s"
    assert _show(OscMessage("/go", (1, 0.123456))) == "/go 1 0.1235"
    assert _show(Release()) == "let go of everything held" and _show(Arm()) == "keys armed"


def test_the_fit_bar_reaches_its_end_only_when_the_fit_is_done(small_take, tmp_path, monkeypatch):
    """Cutting takes into windows is quick and the fit after it slow: the bar keeps a step
    for the fit, so it never stands at 100 % while the longest part runs."""
    from bridge.cli import main, models
    calls, fitted = [], []
    import bridge.recognition as recognition
    real = recognition.fit_recordings

    def watched(*args, **kwargs):
        out = real(*args, **kwargs)
        fitted.append(len(calls))   # how many bar updates had been drawn when the fit returned
        return out
    monkeypatch.setattr(recognition, "fit_recordings", watched)
    monkeypatch.setattr(models, "_progress", lambda desc: (lambda done, total: calls.append((done, total)), lambda: None))
    assert main(["fit", str(small_take), "--classifier", "linear", "-o", str(tmp_path / "m.npz")]) == 0
    before = calls[:fitted[0]]
    assert before and all(done < total for done, total in before), before
    assert calls[-1][0] == calls[-1][1], calls


def test_a_class_with_no_windows_is_not_scored_zero(capsys):
    from bridge.cli.models import _print_result
    from bridge.evaluation.heldout import classification_scores
    result = classification_scores([0, 0, 1, 1], [0, 2, 1, 1], ("null", "bow", "clap"))
    _print_result(result)
    out = capsys.readouterr().out
    assert "clap             no windows of it in these takes (taken for it once)" in out, out
    assert "bow              precision 1.000  recall 1.000" in out, out


class _Reached(Exception):
    """Raised by a stand-in for a verb's long work: the verb got past its output check."""


def _stand_in(*_a, **_k):
    raise _Reached


def test_bench_spotting_keeps_an_existing_json_unless_told(tmp_path, monkeypatch, capsys):
    import bridge.evaluation.spotting as spotting
    monkeypatch.setattr(spotting, "run_protocol", _stand_in)   # the protocol runs for tens of minutes
    kept = tmp_path / "last.json"
    kept.write_text('{"last": "run"}', encoding="utf-8")
    bench = ["bench", "--spotting", "--spotting-cache", str(tmp_path / "cache"), "--spotting-json", str(kept)]
    assert main(bench) == 2   # refused before the protocol starts, not after it
    err = capsys.readouterr().err
    assert f"{kept} exists" in err and "--spotting-json" in err and "--overwrite" in err
    assert kept.read_text(encoding="utf-8") == '{"last": "run"}'
    with pytest.raises(_Reached):
        main([*bench, "--overwrite"])


def test_bench_soak_keeps_an_earlier_runs_files_unless_told(tmp_path, monkeypatch, capsys):
    import bridge.evaluation.soak as soak
    monkeypatch.setattr(soak, "soak", _stand_in)
    out = tmp_path / "soak"
    out.mkdir()
    (out / "soak-take.csv").write_text("an earlier soak's take", encoding="utf-8")
    bench = ["bench", "--soak", "0.01", "--soak-out", str(out)]
    assert main(bench) == 2
    err = capsys.readouterr().err
    assert "soak-take.csv" in err and "--soak-out" in err and "--overwrite" in err
    assert (out / "soak-take.csv").read_text(encoding="utf-8") == "an earlier soak's take"
    with pytest.raises(_Reached):
        main([*bench, "--overwrite"])
    with pytest.raises(_Reached):   # a folder not made yet is still made and written
        main(["bench", "--soak", "0.01", "--soak-out", str(tmp_path / "new")])


def test_bench_fuzz_keeps_an_earlier_runs_crash_files_unless_told(tmp_path, monkeypatch, capsys):
    import bridge.evaluation.fuzz as fuzz
    monkeypatch.setattr(fuzz, "fuzz", _stand_in)
    crashes = tmp_path / "crashes"
    crashes.mkdir()
    (crashes / "text-ValueError.bin").write_bytes(b"an earlier run's input")
    bench = ["bench", "--fuzz", "10", "--fuzz-crashes", str(crashes)]
    assert main([*bench, "--fuzz-target", "text"]) == 2
    err = capsys.readouterr().err
    assert "text-ValueError.bin" in err and "--fuzz-crashes" in err and "--overwrite" in err
    assert (crashes / "text-ValueError.bin").read_bytes() == b"an earlier run's input"
    with pytest.raises(_Reached):   # another target's run writes no file of the text parser's
        main([*bench, "--fuzz-target", "osc"])
    with pytest.raises(_Reached):
        main([*bench, "--fuzz-target", "text", "--overwrite"])


def test_start_keeps_an_existing_timings_file_unless_told(tmp_path, monkeypatch, capsys):
    import bridge.service.config as config
    monkeypatch.setattr(config, "load_service", _stand_in)   # nothing opens before the check
    cfg = tmp_path / "show.toml"
    cfg.write_text('[[garment]]\nname = "jacket"\n', encoding="utf-8")
    kept = tmp_path / "t.npz"
    kept.write_bytes(b"last night's timings")
    start = ["start", "--config", str(cfg), "--timings", str(kept)]
    assert main(start) == 2
    err = capsys.readouterr().err
    assert f"{kept} exists" in err and "--timings" in err and "--overwrite" in err
    assert kept.read_bytes() == b"last night's timings"
    with pytest.raises(_Reached):
        main([*start, "--overwrite"])


def test_timings_are_written_to_the_file_named(tmp_path):
    from bridge.service.daemon import DeliveryTimes
    named = tmp_path / "timings"   # no .npz: the checked name is the written one
    DeliveryTimes().save(named)
    assert named.is_file() and not (tmp_path / "timings.npz").exists()


def test_evaluate_keeps_an_earlier_report_unless_told(small_take, demo_model_file, tmp_path, monkeypatch, capsys):
    import bridge.evaluation.heldout as heldout
    monkeypatch.setattr(heldout, "evaluate_takes", _stand_in)     # scoring can take minutes
    monkeypatch.setattr(heldout, "cross_validate", _stand_in)
    rep = tmp_path / "rep"
    rep.mkdir()
    (rep / "index.html").write_text("last week's report", encoding="utf-8")
    for argv in (["evaluate", "--model", str(demo_model_file), str(small_take)],
                 ["evaluate", "--scheme", "leave-session-out", str(small_take)]):
        assert main([*argv, "--report", str(rep)]) == 2            # refused before any scoring
        err = capsys.readouterr().err
        assert "index.html" in err and "--report" in err and "--overwrite" in err
        assert (rep / "index.html").read_text(encoding="utf-8") == "last week's report"
    with pytest.raises(_Reached):
        main(["evaluate", "--model", str(demo_model_file), str(small_take), "--report", str(rep), "--overwrite"])
    with pytest.raises(_Reached):   # a folder not made yet is no obstacle
        main(["evaluate", "--model", str(demo_model_file), str(small_take), "--report", str(tmp_path / "new")])


def test_demo_mapping_default_is_the_installed_one_away_from_a_checkout(tmp_path, monkeypatch, capsys):
    """Found by a docs walkthrough: `drape demo --help` said the default was mappings/demo.toml,
    but run from a folder without one the demo uses the mapping installed with drape."""
    from bridge.cli.live import _default_mapping
    from bridge.examples_data import example_path
    monkeypatch.chdir(tmp_path)
    assert _default_mapping() == example_path("demo.toml")
    (tmp_path / "mappings").mkdir()
    (tmp_path / "mappings" / "demo.toml").write_text("# the user's own copy\n")
    assert _default_mapping() == tmp_path / "mappings" / "demo.toml"
    with pytest.raises(SystemExit):
        main(["demo", "--help"])
    helped = " ".join(capsys.readouterr().out.split())
    assert "mappings/demo.toml in the current folder, else the demo mapping installed with drape" in helped


@pytest.mark.parametrize("verb", ["demo", "start"])
def test_listen_help_names_every_command_the_single_loop_answers(verb, capsys):
    """Found by a docs walkthrough: --listen's help named arm, disarm, panic and layer only,
    but the single-garment loop also answers reload, rebaseline and status (docs/service.md)."""
    from bridge.service.control import INBOX_COMMANDS   # what the --listen inbox takes
    with pytest.raises(SystemExit):
        main([verb, "--help"])
    helped = " ".join(capsys.readouterr().out.split())
    options = helped[helped.index("options:"):]
    listen = options[options.index("--listen HOST:PORT"):].split("--pid-file")[0]
    assert set(INBOX_COMMANDS.values()) == {"arm", "disarm", "panic", "layer", "reload", "status", "rebaseline"}
    for command in INBOX_COMMANDS.values():
        assert command in listen, command


@pytest.mark.parametrize("argv, says", [
    (["--listen", "0.0.0.0:9100"], "--listen: --listen 0.0.0.0:9100 would take commands from the network"),
    (["--listen", "127.0.0.1:http"], "--listen: write HOST:PORT"),
    (["--mapping", "absent.toml"], "absent.toml: no such mapping file"),
])
def test_demo_refuses_bad_input_before_training(argv, says, tmp_path, monkeypatch, capsys):
    """Found by a docs walkthrough: `drape demo --listen 0.0.0.0:9100` (or a missing mapping)
    was refused only after the simulated wearer's model had been trained."""
    import bridge.evaluation.simulated as simulated

    def no_training(*_a, **_k):
        raise AssertionError("the demo trained a model before refusing its input")
    monkeypatch.setattr(simulated, "train_simulated", no_training)
    monkeypatch.chdir(tmp_path)
    assert main(["demo", "--for", "1", "--fast", *argv]) == 2
    captured = capsys.readouterr()
    assert says in captured.err and "training" not in captured.out


def test_a_missing_mapping_named_like_a_shipped_example_says_where_the_shipped_one_is(tmp_path, capsys):
    """A pip install has no mappings/ folder: a carer told to check single-switch.toml must
    learn where drape keeps it (with its cautions), not only that the file is missing."""
    from pathlib import Path
    from bridge.cli import main
    from bridge.examples_data import example_text
    assert main(["check", str(tmp_path / "single-switch.toml")]) == 2
    err = capsys.readouterr().err
    assert "no such mapping file" in err and "drape ships an example of that name" in err
    shipped = Path(err.split("with its cautions: ")[1].splitlines()[0])
    assert shipped.read_text(encoding="utf-8") == example_text("single-switch.toml")
    assert not (tmp_path / "single-switch.toml").exists()      # nothing copied unasked
    assert main(["check", str(tmp_path / "mine.toml")]) == 2
    assert "ships" not in capsys.readouterr().err               # no hint for a name drape does not ship
