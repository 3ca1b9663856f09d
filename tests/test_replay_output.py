"""`drape replay` reads as a person needs: rounded values, what was performed beside each
decision (hits, misses, false triggers from the take's labels), and that nothing is sent."""

import re

import numpy as np
import pytest

from bridge.cli import main, replay_events
from bridge.evaluation.matching import match_events
from bridge.garment import GESTURES, Jacket, random_script
from bridge.sources import Recording, write_recording
from tests.conftest import ROOT


@pytest.fixture(scope="module")
def take_file(tmp_path_factory):
    rec = Recording.from_take(Jacket(seed=1, wearer=0, session=4).perform(
        random_script(np.random.default_rng(77), 150.0)), GESTURES)
    return rec, write_recording(tmp_path_factory.mktemp("replay") / "other.take", rec)


def test_replay_lists_what_was_performed_beside_each_decision(take_file, demo_model, demo_model_file, capsys):
    rec, path = take_file
    assert main(["replay", str(path), "--model", str(demo_model_file), "--mapping",
                 str(ROOT / "mappings" / "demo.toml")]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert "nothing is sent" in lines[0]
    assert not re.search(r"\d\.\d{5,}", out), "unrounded numbers"
    m = match_events(replay_events(rec, demo_model), rec.intervals)
    assert sum(": hit, " in l for l in lines) == len(m.hits)
    assert sum(": MISSED" in l for l in lines) == len(m.missed)
    assert sum("FALSE TRIGGER" in l for l in lines) == len(m.false)
    assert lines[-1] == (f"{len(rec.intervals)} gestures performed, {len(m.hits)} recognised, {len(m.missed)} missed, "
                         f"{len(m.false)} false trigger{'' if len(m.false) == 1 else 's'}")
    assert any(l.lstrip().startswith("→ show: /drape/") for l in lines)  # the messages a live run would send


def test_replay_without_a_mapping_says_nothing_is_sent(take_file, demo_model_file, capsys):
    _, path = take_file
    assert main(["replay", str(path), "--model", str(demo_model_file)]) == 0
    out = capsys.readouterr().out
    assert "nothing is sent (no mapping given)" in out and "→" not in out


def test_evaluate_into_a_reader_that_stops_early_ends_without_a_traceback(take_file, demo_model_file):
    # `drape evaluate ... | head`: the reader is gone before the figures are printed.
    import subprocess
    from tests.conftest import drape_cmd
    _, path = take_file
    proc = subprocess.Popen(drape_cmd("evaluate", "--model", str(demo_model_file), str(path)),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=120) == 0, err
    assert "Traceback" not in err and "BrokenPipe" not in err


def test_a_bench_whose_reader_stops_early_ends_without_a_traceback(tmp_path):
    # `drape bench --spotting ... | head -1`: the reader is gone after the first line.
    import subprocess

    from tests.conftest import drape_cmd
    proc = subprocess.Popen(drape_cmd("bench", "--spotting", "--spotting-wearers", "2", "--spotting-score-min", "0.1",
                                      "--spotting-cache", str(tmp_path / "c")),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=300) == 141, err
    assert "Traceback" not in err and "standard output was closed" in err
