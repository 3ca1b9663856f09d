"""Guided capture against the simulated jacket: prompted intervals saved, keys, interruption."""

import signal
import subprocess
import time

import numpy as np
import pytest

from bridge.cli import main
from bridge.garment import GESTURES
from bridge.recognition.training import label_windows
from bridge.service.capture import CaptureSession, CaptureSettings, capture_plan, run_capture
from bridge.sources import RecordingWriter, describe_incomplete, read_recording

UNSAID = "it ended without saying so: killed, power lost or disk full"   # the reason of a take short of its plan
from bridge.sources.simulated import PromptedSimulatedSource

from conftest import drape_cmd

FAST = CaptureSettings(repetitions=2, countdown_s=1.0, window_s=3.0, hold_s=5.0, rest_s=(1.0, 2.0), lead_s=2.0,
                       ordinary_s=5.0)


def test_plan_is_balanced_and_never_repeats_back_to_back():
    plan = capture_plan(np.random.default_rng(3), ["a", "b", "c"], 6)
    assert sorted(plan) == sorted(["a", "b", "c"] * 6)
    assert all(x != y for x, y in zip(plan, plan[1:]))


def test_saved_take_holds_the_prompted_intervals(tmp_path):
    src = PromptedSimulatedSource(seed=2, realtime=False)
    gestures = ["raise_right", "bow", "arms_crossed"]
    rng = np.random.default_rng(0)
    plan = capture_plan(rng, gestures, 2)
    with RecordingWriter(tmp_path / "c.take", src.rate_hz, src.channel_names, "w", "s", "sim", GESTURES) as w:
        sess = CaptureSession(list(plan), GESTURES, FAST, w, rng, src.prompt)
        n = run_capture(src, sess, w)
    rec = read_recording(tmp_path / "c.take")
    assert rec.freq_hz.shape[0] == n and [iv.label for iv in rec.intervals] == plan
    assert [iv.label for iv in src.truth] == plan
    located = 0
    for iv, truth in zip(rec.intervals, src.truth):
        # The label covers most of the performed movement...
        overlap = min(iv.end_s, truth.end_s) - max(iv.start_s, truth.start_s)
        assert overlap >= 0.7 * (truth.end_s - truth.start_s), (iv, truth)
        whole = FAST.hold_s if GESTURES[iv.label] == "posture" else FAST.window_s
        if abs(iv.end_s - iv.start_s - whole) > 1e-3:
            # ...and where the movement was found in the window, the label starts near it.
            located += 1
            assert abs(iv.start_s - truth.start_s) < 0.6
            assert iv.end_s - iv.start_s <= (FAST.hold_s if GESTURES[iv.label] == "posture" else 2.2)
    assert located >= len(plan) - 1  # a faint movement may keep the whole window as its label
    # Null stretches between prompts are recorded too.
    assert rec.t_s[-1] > sum(iv.end_s - iv.start_s for iv in rec.intervals) + 6 * FAST.countdown_s


class Keyed:
    """Presses keys at chosen stream times."""

    def __init__(self, session, presses):
        self.session, self.presses = session, sorted(presses)

    def __call__(self):
        out = []
        while self.presses and self.session_now() >= self.presses[0][0]:
            out.append(self.presses.pop(0)[1])
        return out


def test_redo_withdraws_the_label_and_asks_again_skip_drops_one(tmp_path):
    src = PromptedSimulatedSource(seed=4, realtime=False)
    rng = np.random.default_rng(1)
    plan = ["raise_right", "bow", "raise_left"]
    path = tmp_path / "k.take"
    with RecordingWriter(path, src.rate_hz, src.channel_names, kinds=GESTURES) as w:
        sess = CaptureSession(list(plan), GESTURES, FAST, w, rng, src.prompt)
        seen = []
        keys_at = {}

        def keys():
            # r during the rest after the first prompt; s at the countdown of the (re-asked) third
            out = []
            if sess.phase == "rest" and len(sess.done) == 1 and "r" not in keys_at:
                keys_at["r"] = True
                out.append("r")
            if sess.phase == "countdown" and sess.current == "raise_left" and "s" not in keys_at:
                keys_at["s"] = True
                out.append("s")
            return out

        run_capture(src, sess, w, on_text=seen.append, keys=keys)
    rec = read_recording(path)
    assert [iv.label for iv in rec.intervals] == ["raise_right", "bow"]
    assert sess.redone == 1 and sess.skipped == ["raise_left"]
    assert any(l.startswith("again: raise_right") for l in seen) and "skipped: raise_left" in seen
    assert "#void" in path.read_text()
    # The withdrawn take's interval is not in the file's labels: the redone one is later.
    assert rec.intervals[0].start_s > [iv for iv in src.truth if iv.label == "raise_right"][0].end_s


def test_capture_command_gives_a_take_that_fits(tmp_path, capsys):
    out = tmp_path / "dancer.take"
    code = main(["capture", "--simulated", "--yes", "--fast", "--no-keys", "--reps", "3", "--gestures",
                 "raise_right,arms_crossed,tap_left_sleeve", "--wearer", "dancer", "--session", "s1",
                 "--countdown-s", "1", "--rest-s", "1", "--ordinary-s", "30", "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0 and "saved" in printed and "9 labelled" in printed
    assert "30 s of ordinary movement" in printed   # under a minute in seconds, never 0.0833 min
    rec = read_recording(out)
    # the ordinary movement after the last prompt is in the take, unlabelled
    assert rec.t_s[-1] >= max(iv.end_s for iv in rec.intervals) + 30.0
    assert rec.wearer == "dancer" and rec.session == "s1" and len(rec.intervals) == 9
    assert rec.kinds["arms_crossed"] == "posture"
    # What `drape fit` needs of a take (the fit itself is left to the end-to-end tests, being
    # slow): each labelled gesture yields training windows at the default 2 s window, 0.1 s hop.
    ends = np.arange(200, rec.freq_hz.shape[0] + 1, 10)
    classes = ("null", "raise_right", "arms_crossed", "tap_left_sleeve")
    y = label_windows(ends, 200, rec.rate_hz, rec.intervals, classes, rec.kinds)
    assert all((y == k).sum() >= 3 for k in range(1, 4)), np.bincount(y[y >= 0])
    assert main(["capture", "--simulated", "--yes", "--out", str(out)]) == 2  # never overwrites unasked


def test_interrupted_capture_leaves_a_readable_take(tmp_path):
    # Both captures run side by side (they wait on the simulated jacket's real time), with
    # a 1 s window for the first prompt rather than the 3 s (or 5 s hold) of the defaults.
    sigs = (signal.SIGINT, signal.SIGKILL)
    procs = [subprocess.Popen(drape_cmd("capture", "--simulated", "--yes", "--no-keys", "--lead-s", "1",
                                        "--countdown-s", "0.5", "--window-s", "1", "--hold-s", "1",
                                        "--out", str(tmp_path / f"cut-{sig.name}.take")),
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for sig in sigs]
    try:
        for proc in procs:
            for line in proc.stdout:
                if line.startswith("done:"):  # one labelled prompt, then pull the plug
                    break
        time.sleep(1.2)  # past the writer's once-a-second flush
        for sig, proc in zip(sigs, procs):
            proc.send_signal(sig)
        outputs = [proc.communicate(timeout=20) for proc in procs]
    finally:
        for proc in procs:
            proc.kill()
    for sig, proc, (stdout, stderr) in zip(sigs, procs, outputs):
        rec = read_recording(tmp_path / f"cut-{sig.name}.take")
        assert len(rec.intervals) >= 1 and rec.freq_hz.shape[0] > 100 and "Traceback" not in stderr
        if sig == signal.SIGINT:
            assert proc.returncode == 0 and "saved" in stdout and "SIGINT" in stdout
            # the take and the message both say it was cut short, where, and what is missing
            cut = rec.cut_short
            assert cut.reason == "SIGINT" and "prompt" in cut.step and cut.prompts_left
            assert cut.ordinary_left_s == cut.ordinary_planned_s == 180.0
            assert "the take is incomplete" in stdout and "all 180 s of ordinary movement (none recorded)" in stdout
        else:   # killed outright: no #cut line, but the plan in its header names what is missing
            cut = rec.cut_short
            assert cut is not None and cut.reason == UNSAID and cut.prompts_left, cut
            assert cut.ordinary_left_s == cut.ordinary_planned_s == 180.0
            assert "is an incomplete take" in describe_incomplete(rec, "cut-SIGKILL.take")


def test_capture_from_a_port_detects_the_layout_and_records(tmp_path, capsys):
    # A garment on a pty sending 30 s of the simulated jacket as text lines with a header and
    # device time; capture finds the channels and the time column itself.
    import os
    import threading
    from bridge.garment import Jacket, random_script
    from bridge.sources import format_line

    take = Jacket(seed=5).perform(random_script(np.random.default_rng(5), 30.0))
    data = ("t_s," + ",".join(take.channel_names) + "\n").encode() + b"".join(
        format_line(f, t) for t, f in zip(take.t_s, take.freq_hz))
    master, slave = os.openpty()
    out = tmp_path / "port.take"
    argv = ["capture", "--port", os.ttyname(slave), "--yes", "--no-keys", "--reps", "1", "--gestures",
            "raise_right,bow", "--lead-s", "1", "--countdown-s", "1", "--rest-s", "1", "--ordinary-s", "3",
            "--out", str(out)]
    def garment():
        time.sleep(1.0)  # capture has the port open (raw mode) by then
        try:
            for i in range(0, len(data), 4096):
                os.write(master, data[i:i + 4096])
        except OSError:  # capture finished and the pty was closed: the rest is not needed
            pass

    threading.Thread(target=garment, daemon=True).start()
    try:
        code = main(argv)
    finally:
        os.close(master)
        os.close(slave)
    assert code == 0, capsys.readouterr()
    rec = read_recording(out)
    assert rec.channel_names == take.channel_names and len(rec.intervals) == 2
    assert sorted(iv.label for iv in rec.intervals) == ["bow", "raise_right"]
    np.testing.assert_allclose(rec.freq_hz[:100], take.freq_hz[:100], atol=0.06)


class Burst:
    """A source that hands over a whole recorded stretch in one block, then ends (a sender
    faster than real time, or the backlog after a stall)."""

    def __init__(self, rate_hz, names, freq_hz):
        from bridge.sources.base import Block
        self.rate_hz, self.channel_names = rate_hz, tuple(names)
        self.block = Block(np.arange(len(freq_hz)) / rate_hz, freq_hz, 0.0)
        self.ended = False

    def read(self):
        from bridge.sources.base import empty_block
        if self.ended:
            return empty_block(len(self.channel_names), 0.0)
        self.ended = True
        return self.block


def test_a_long_block_steps_through_every_prompt_and_keeps_one_time_grid(tmp_path):
    from bridge.garment import Jacket, random_script
    take = Jacket(seed=5).perform(random_script(np.random.default_rng(5), 40.0))
    half = int(3 * take.rate_hz)   # 3 s read first, the other 37 s in one block
    src = Burst(take.rate_hz, take.channel_names, take.freq_hz[half:])
    first = Burst(take.rate_hz, take.channel_names, take.freq_hz[:half]).read()   # read to learn the channels
    rng = np.random.default_rng(0)
    plan = capture_plan(rng, ["raise_right", "bow"], 1)
    with RecordingWriter(tmp_path / "b.take", src.rate_hz, src.channel_names, "w", "s", "", GESTURES) as w:
        sess = CaptureSession(list(plan), GESTURES, FAST, w, rng)
        n = run_capture(src, sess, w, first=first)
    rec = read_recording(tmp_path / "b.take")
    # Every prompt of the plan was given and labelled, though all 40 s came in two blocks.
    assert sorted(iv.label for iv in rec.intervals) == sorted(plan)
    # The first block is the stream's start: one grid, no time written twice.
    assert n == len(take.t_s) == rec.freq_hz.shape[0]
    np.testing.assert_allclose(np.diff(rec.t_s), 1.0 / take.rate_hz, atol=1e-6)


def test_a_check_in_take_is_short_named_apart_and_sits_as_the_dressing_does(tmp_path, capsys, monkeypatch):
    """`drape capture --check-in`: each gesture 3 times and 3 min of ordinary movement unless told
    otherwise, saved beside the training takes under its own name; simulated, the jacket sits as
    in --sim-session (the same cable placement) while the performance is a new one."""
    from bridge.sources.simulated import PromptedSimulatedSource
    made = []
    real = PromptedSimulatedSource.__init__

    def spy(self, *args, **kw):
        real(self, *args, **kw)
        made.append(self.jacket)
    monkeypatch.setattr(PromptedSimulatedSource, "__init__", spy)
    monkeypatch.chdir(tmp_path)
    code = main(["capture", "--simulated", "--yes", "--fast", "--no-keys", "--check-in", "--gestures",
                 "raise_right,tap_left_sleeve", "--wearer", "dancer", "--session", "show", "--sim-session", "3",
                 "--countdown-s", "1", "--rest-s", "1"])
    printed = capsys.readouterr().out
    assert code == 0 and "6 labelled" in printed and "drape fit" in printed
    rec = read_recording(tmp_path / "dancer-show-checkin.take")
    assert len(rec.intervals) == 6                                     # 2 gestures x 3
    assert 180.0 <= rec.t_s[-1] - max(iv.end_s for iv in rec.intervals) < 186.0
    from bridge.garment import Jacket
    assert made[0].fits == Jacket(0, 0, 3).fits and made[0].take_id == 1
    # a plain capture keeps its defaults and its name
    code = main(["capture", "--simulated", "--yes", "--fast", "--no-keys", "--gestures", "raise_right",
                 "--wearer", "dancer", "--session", "day1", "--countdown-s", "1", "--rest-s", "1", "--ordinary-s", "5"])
    assert code == 0 and "5 labelled" in capsys.readouterr().out
    assert made[1].take_id is None and (tmp_path / "dancer-day1.take").exists()
    # the header says which take is the check-in (the fit's dressing advice is then not given)
    assert rec.check_in and not read_recording(tmp_path / "dancer-day1.take").check_in
    assert '"check_in": true' in (tmp_path / "dancer-show-checkin.take").read_text().splitlines()[1]
    assert "check_in" not in (tmp_path / "dancer-day1.take").read_text().splitlines()[1]


def test_finishing_early_marks_the_take_with_where_and_what_is_missing(tmp_path):
    src = PromptedSimulatedSource(seed=5, realtime=False)
    plan = ["raise_right", "bow", "raise_right", "bow"]
    path = tmp_path / "q.take"
    with RecordingWriter(path, src.rate_hz, src.channel_names, kinds=GESTURES) as w:
        sess = CaptureSession(list(plan), GESTURES, FAST, w, np.random.default_rng(2), src.prompt)
        # q at the countdown of the third prompt
        run_capture(src, sess, w, keys=lambda: ["q"] if sess.phase == "countdown" and len(sess.done) == 2 else [])
    assert sess.finished_early
    step, left, ordinary_s = sess.shortfall()
    assert step == "the countdown to prompt 3 of 4 (raise_right)"
    assert left == (("raise_right", 1), ("bow", 1)) and ordinary_s == FAST.ordinary_s
    # a session run to its end has nothing missing
    src = PromptedSimulatedSource(seed=5, realtime=False)
    with RecordingWriter(tmp_path / "all.take", src.rate_hz, src.channel_names, kinds=GESTURES) as w:
        whole = CaptureSession(["bow"], GESTURES, FAST, w, np.random.default_rng(2), src.prompt)
        run_capture(src, whole, w)
    assert whole.shortfall() is None
    # stopped during the ordinary movement: the part not recorded
    src = PromptedSimulatedSource(seed=5, realtime=False)
    with RecordingWriter(tmp_path / "o.take", src.rate_hz, src.channel_names, kinds=GESTURES) as w:
        late = CaptureSession(["bow"], GESTURES, FAST, w, np.random.default_rng(2), src.prompt)
        end = {}

        def keys():
            if late.phase == "ordinary":
                end.setdefault("q_s", late.phase_end_s - 2.0)
                return ["q"] if late.now_s >= end["q_s"] else []
            return []
        run_capture(src, late, w, keys=keys)
    step, left, ordinary_s = late.shortfall()
    assert step.startswith("the ordinary movement after the prompts") and left == ()
    assert ordinary_s == pytest.approx(2.0, abs=0.1)


class _Killed:
    """A stop that comes without the capture's own ending: the writer is closed with no #cut
    line, as a capture killed outright (SIGKILL, power loss) leaves its take."""

    def __init__(self, when):
        self.when = when

    @property
    def stopped(self):
        return self.when()


def _planned_capture(path, plan, settings, killed=None, keys=None, seed=5):
    src = PromptedSimulatedSource(seed=seed, realtime=False)
    with RecordingWriter(path, src.rate_hz, src.channel_names, kinds=GESTURES,
                         plan=CaptureSession.take_plan(plan, settings)) as w:
        sess = CaptureSession(list(plan), GESTURES, settings, w, np.random.default_rng(2), src.prompt)
        run_capture(src, sess, w, stop=_Killed(lambda: killed(sess)) if killed else None,
                    keys=(lambda: keys(sess)) if keys else None)
    return sess, read_recording(path)


def test_a_take_killed_during_the_prompts_is_named_short_of_its_plan(tmp_path):
    plan = ["raise_right", "bow", "raise_right", "bow"]
    sess, rec = _planned_capture(tmp_path / "k.take", plan, FAST, killed=lambda s: len(s.done) == 2)
    assert "#cut" not in (tmp_path / "k.take").read_text()
    cut = rec.cut_short
    assert cut is not None and cut.reason == UNSAID
    assert dict(cut.prompts_left) == {"raise_right": 1, "bow": 1}
    assert cut.ordinary_left_s == cut.ordinary_planned_s == FAST.ordinary_s
    said = describe_incomplete(rec, "k.take")
    assert said.startswith("k.take is an incomplete take: its capture was cut short (it ended without saying so")
    assert "the prompts (2 of 4 recorded)" in said and "1 × raise_right, 1 × bow" in said


def test_a_take_killed_during_its_ordinary_movement_says_at_most_what_is_missing(tmp_path):
    """After the last label the capture rested (1 to 2 s here) before the ordinary movement:
    the reader counts from the label, so it may say less is missing, never more."""
    from dataclasses import replace
    settings = replace(FAST, ordinary_s=20.0)
    sess, rec = _planned_capture(tmp_path / "o.take", ["bow"], settings,
                                 killed=lambda s: s.phase == "ordinary" and s.phase_end_s - s.now_s <= 10.0)
    cut = rec.cut_short
    assert cut is not None and cut.reason == UNSAID and cut.prompts_left == ()
    assert 10.0 - 2.0 - settings.window_s <= cut.ordinary_left_s <= 10.0 + 0.05, cut
    assert cut.step.startswith("the ordinary movement after the prompts") and cut.ordinary_planned_s == 20.0


def test_a_planned_take_run_to_its_end_or_with_a_prompt_skipped_is_complete(tmp_path):
    plan = ["raise_right", "bow", "raise_left"]
    sess, rec = _planned_capture(tmp_path / "all.take", plan, FAST)
    assert rec.cut_short is None and len(rec.intervals) == 3
    assert '"plan": {"prompts": {"raise_right": 1, "bow": 1, "raise_left": 1}, "ordinary_s": 5.0}' in \
        (tmp_path / "all.take").read_text().splitlines()[1]
    # s at the countdown of bow: skipped on purpose, written as such, not missing
    sess, rec = _planned_capture(tmp_path / "s.take", plan, FAST,
                                 keys=lambda s: ["s"] if s.phase == "countdown" and s.current == "bow" else [])
    assert sess.skipped == ["bow"] and '#skip {"label": "bow"}' in (tmp_path / "s.take").read_text()
    assert rec.cut_short is None and [iv.label for iv in rec.intervals] == ["raise_right", "raise_left"]
    # the same take killed after its first prompt: the skip is not counted as missing
    sess, rec = _planned_capture(tmp_path / "sk.take", ["raise_right", "bow", "raise_left", "bow"], FAST,
                                 keys=lambda s: ["s"] if s.phase == "countdown" and s.current == "bow" else [],
                                 killed=lambda s: len(s.done) == 1 and s.phase == "rest" and len(s.skipped) == 1)
    assert dict(rec.cut_short.prompts_left) == {"bow": 1, "raise_left": 1}, rec.cut_short   # not the skipped bow
    assert rec.cut_short.step == "the prompts (1 of 3 recorded)"


def test_a_take_without_a_plan_reads_as_before(tmp_path):
    """Takes written before plans (and those of drape simulate) state none: however few labels
    they hold, they read as complete, and a header with no plan is unchanged."""
    path = tmp_path / "old.take"
    path.write_text('#drape-take 1\n#meta {"rate_hz": 10.0, "channels": ["a", "b"], "wearer": "w", "session": "s", '
                    '"layout": "", "kinds": {"bow": "gesture"}}\nt_s,a,b\n0.0000,1.00,2.00\n0.1000,1.00,2.00\n'
                    '#label {"start_s": 0.0, "end_s": 0.1, "label": "bow"}\n', encoding="utf-8")
    rec = read_recording(path)
    assert rec.cut_short is None and len(rec.intervals) == 1 and rec.freq_hz.shape == (2, 2)
    with RecordingWriter(tmp_path / "new.take", 10.0, ("a", "b")) as w:
        w.samples(np.array([0.0]), np.array([[1.0, 2.0]]))
    assert "plan" not in (tmp_path / "new.take").read_text().splitlines()[1]
    assert read_recording(tmp_path / "new.take").cut_short is None
