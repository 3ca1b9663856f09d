"""The take file format: round trip, incremental writing, a crash mid-line."""

import numpy as np
import pytest

from bridge.sources import Label, Recording, RecordingError, RecordingWriter, read_recording, write_recording


def sample_recording():
    t = np.arange(300) / 100.0
    f = 200e3 + np.arange(600, dtype=float).reshape(300, 2)
    return Recording(100.0, ("left", "right"), t, f, (Label(0.5, 1.25, "wave"),), "w1", "s2", "plain",
                     {"wave": "gesture"})


def test_round_trip(tmp_path):
    rec = sample_recording()
    back = read_recording(write_recording(tmp_path / "a.take", rec))
    assert back.channel_names == rec.channel_names and back.rate_hz == 100.0
    assert back.intervals == rec.intervals and back.kinds == rec.kinds and back.wearer == "w1"
    np.testing.assert_allclose(back.freq_hz, rec.freq_hz, atol=0.005)
    np.testing.assert_allclose(back.t_s, rec.t_s, atol=5e-5)


def test_truncated_last_line_is_dropped(tmp_path):
    path = write_recording(tmp_path / "a.take", sample_recording())
    text = path.read_text()
    path.write_text(text[: text.rindex("2.99") + 9])  # cut inside the last sample row
    back = read_recording(path)
    assert back.freq_hz.shape == (299, 2)
    # and said: labels come last in a simulated take, so a cut file can look like ordinary movement alone
    from bridge.sources import describe_incomplete
    assert read_recording(write_recording(tmp_path / "b.take", sample_recording())).cut_short is None
    assert describe_incomplete(back, path).startswith(f"{path} ends mid-line: the file was cut off")


def test_writer_flushes_while_open(tmp_path):
    w = RecordingWriter(tmp_path / "live.take", 100.0, ("a",), flush_s=0.0)
    w.samples(np.arange(5) / 100, np.full((5, 1), 1e5))
    w.label(0.0, 0.03, "wave")
    assert read_recording(tmp_path / "live.take").freq_hz.shape == (5, 1)  # readable before close
    w.close()


def test_not_a_take(tmp_path):
    (tmp_path / "x.csv").write_text("a,b\n1,2\n")
    with pytest.raises(RecordingError, match=":1: not a drape take file"):
        read_recording(tmp_path / "x.csv")


def test_a_take_cut_short_says_so_and_stays_plain_csv(tmp_path):
    import dataclasses
    import io

    from bridge.sources import CutShort, describe_incomplete, warn_incomplete

    cut = CutShort("SIGINT", "the countdown to prompt 6 of 45 (bow)", (("bow", 5), ("wave", 4)), 180.0, 180.0)
    whole = write_recording(tmp_path / "whole.take", sample_recording())
    short = write_recording(tmp_path / "short.take", dataclasses.replace(sample_recording(), cut_short=cut))
    assert read_recording(whole).cut_short is None and describe_incomplete(read_recording(whole), whole) == ""
    back = read_recording(short)
    assert back.cut_short == cut and back.intervals == sample_recording().intervals
    note = describe_incomplete(back, short)
    assert note.startswith(f"{short} is an incomplete take") and "SIGINT" in note and "prompt 6 of 45" in note
    assert "5 × bow, 4 × wave" in note and "all 180 s of ordinary movement (none recorded)" in note
    err = io.StringIO()
    assert warn_incomplete([whole, short], [read_recording(whole), back], err) == 1
    assert err.getvalue() == f"drape: {note}\n"
    # the mark is a '#' line: the samples still read as CSV with '#' as the comment character
    rows = np.loadtxt(short, delimiter=",", comments="#", skiprows=3)
    assert rows.shape == (300, 3)
    # a mark cut by a crash still marks the take
    short.write_text(short.read_text()[:-20])
    assert read_recording(short).cut_short.reason == "unknown"
