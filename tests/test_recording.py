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
