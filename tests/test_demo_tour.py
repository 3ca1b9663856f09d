"""The demo says what the simulated wearer performed beside each decision, marks misses and
false triggers, sums them up at the stop, and refuses a model of another garment cleanly."""

import numpy as np

from bridge.cli import main
from bridge.decisions.gate import Event
from bridge.evaluation.narration import Narrator
from bridge.garment import GESTURES, Interval, tour_script


def test_tour_performs_each_demo_gesture_once_within_a_minute():
    script = tour_script(np.random.default_rng(3), list(GESTURES))
    performed = [label for label, _ in script if label in GESTURES]
    assert sorted(performed) == sorted(GESTURES)
    # Rough length budget: postures are held 4 s, gestures take about 1.4-1.8 s (their drawn lengths).
    rough_s = sum(d if d is not None else 1.8 for _, d in script)
    assert 40 <= rough_s <= 60


def run_narration(intervals, events, until_s, step_s=0.1):
    """Feed reads every step_s and the events at their times, as the demo's loop does."""
    lines, shown = [], []
    n = Narrator(shown, say=lines.append)
    pending = sorted(events, key=lambda e: e.t_s)
    t = 0.0
    while t < until_s:
        t = round(t + step_s, 6)
        shown[:] = [iv for iv in intervals if iv.start_s <= t + 5]  # rendered ahead, like the source
        n.on_read(t)
        while pending and pending[0].t_s <= t:
            n.on_event(pending.pop(0))
    return n, lines


def test_hits_misses_and_false_triggers_are_marked_and_summed():
    intervals = [Interval(2.0, 3.5, "raise_right"), Interval(6.0, 10.0, "arms_crossed"),
                 Interval(12.0, 13.5, "bow")]
    events = [Event(3.68, "raise_right", "gesture", 0.94),      # 180 ms after the end: a hit
              Event(5.0, "sweep_across", "gesture", 0.7),       # nothing like it performed
              Event(6.8, "arms_crossed", "entered", 0.9),       # posture: 0.8 s after it began
              Event(10.2, "arms_crossed", "left", 0.9, duration_s=3.4)]
    # bow is never decided: missed once its 2.5 s slack has passed.
    n, lines = run_narration(intervals, events, until_s=20.0)
    text = "\n".join(lines)
    assert "2.00 s  performing raise_right" in text
    assert "→ raise_right 0.94, 180 ms after it ended" in text
    assert "→ sweep_across 0.70  FALSE TRIGGER" in text
    assert "→ arms_crossed entered 0.90, 800 ms after it began" in text
    assert "16.00 s    MISSED bow" in text
    assert sum("MISSED" in l for l in lines) == 1
    assert n.summary(20.0) == {"performed": 3, "recognised": 2, "missed": 1, "false_triggers": 1, "open": 0,
                               "doubles": 0, "wrong_name": 1, "ordinary": 0}   # during the raise_right's reach


def test_a_gesture_still_within_its_slack_at_the_stop_is_not_called_missed():
    n, lines = run_narration([Interval(2.0, 3.0, "bow")], [], until_s=4.0)
    assert not any("MISSED" in l for l in lines)
    assert n.summary(4.0) == {"performed": 0, "recognised": 0, "missed": 0, "false_triggers": 0, "open": 1,
                              "doubles": 0, "wrong_name": 0, "ordinary": 0}


def test_demo_with_a_model_of_other_channels_says_so_without_a_traceback(tmp_path, capsys):
    from bridge.recognition import fit_cases
    from bridge.recognition.windows import WindowSpec
    from bridge.signal import BandPass
    rng = np.random.default_rng(0)
    spec = WindowSpec(100.0, 0.5, 0.1)
    X = rng.normal(size=(12, 8, spec.length))
    y = np.array(["a"] * 6 + ["null"] * 6)
    model = fit_cases("linear", X, y, ["a"], rate_hz=100.0, windows=spec, conditioning=BandPass(100.0),
                      channel_names=tuple(f"c{i}" for i in range(8)), stream="level")
    path = model.save(tmp_path / "coat.npz")
    assert main(["demo", "--model", str(path), "--for", "1", "--fast"]) == 2
    err = capsys.readouterr().err
    assert "trained on 8 channels" in err and "Traceback" not in err


def test_a_decision_while_disarmed_says_nothing_was_sent():
    lines = []
    n = Narrator([Interval(2.0, 3.5, "raise_right")], say=lines.append)
    n.on_read(3.0)
    n.on_event(Event(9.0, "bow", "gesture", 0.8), disarmed=True)       # nothing performed: a false trigger
    assert "FALSE TRIGGER" in lines[-1] and lines[-1].endswith("(disarmed: not sent)")
    n.on_event(Event(9.5, "bow", "gesture", 0.8))
    assert "not sent" not in lines[-1]
