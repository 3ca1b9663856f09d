"""A take meets a model by its channel names, not only their count: a model reads channels by
position, so a take with other names, or the same names in another order, is refused."""

import numpy as np
import pytest

from bridge.cli import main
from bridge.sources import Recording, read_recording, write_recording
from tests.conftest import linear_on_a_take


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """(a take, the linear model fitted on it, a second take of the same jacket)."""
    return linear_on_a_take(tmp_path_factory.mktemp("names"))


def _rewritten(src, dst, order=None, names=None):
    """A copy of take ``src`` with its columns in ``order`` (data and header together, so the
    names still describe the data) and/or other ``names``."""
    r = read_recording(src)
    order = list(range(len(r.channel_names))) if order is None else order
    new_names = tuple(names) if names is not None else tuple(r.channel_names[i] for i in order)
    write_recording(dst, Recording(r.rate_hz, new_names, r.t_s, r.freq_hz[:, order], r.intervals,
                                   r.wearer, r.session, r.layout, r.kinds))
    return dst


def _verb(verb, model, take, tmp_path):
    args = {"evaluate": ["evaluate", "--model", str(model), str(take)],
            "tune": ["tune", "--model", str(model), str(take), "-o", str(tmp_path / "tuned.npz")],
            "replay": ["replay", str(take), "--model", str(model)]}[verb]
    return main(args)


@pytest.mark.parametrize("verb", ["evaluate", "tune", "replay"])
def test_a_take_with_the_channels_in_another_order_is_refused(fitted, tmp_path, capsys, verb):
    take, model, other = fitted
    names = read_recording(other).channel_names
    swapped = _rewritten(other, tmp_path / "swapped.take", order=[1, 0, *range(2, len(names))])
    capsys.readouterr()
    assert _verb(verb, model, swapped, tmp_path) == 2
    err = capsys.readouterr().err
    assert f"trained on channels {', '.join(names)}" in err
    assert f"has {', '.join([names[1], names[0], *names[2:]])}" in err
    assert "the same names in another order" in err
    assert err.count("trained on channels") == 1 and f"but {swapped} has" in err   # said once, naming the file
    assert not (tmp_path / "tuned.npz").exists()


@pytest.mark.parametrize("verb", ["evaluate", "tune", "replay"])
def test_a_take_with_a_channel_renamed_is_refused(fitted, tmp_path, capsys, verb):
    take, model, other = fitted
    names = list(read_recording(other).channel_names)
    renamed = _rewritten(other, tmp_path / "renamed.take", names=["hood", *names[1:]])
    capsys.readouterr()
    assert _verb(verb, model, renamed, tmp_path) == 2
    err = capsys.readouterr().err
    assert f"trained on channels {', '.join(names)}" in err and "has hood, " in err
    assert "another order" not in err


@pytest.mark.parametrize("score", ["evaluate_takes", "tune_model"])
def test_the_library_refuses_takes_whose_channels_differ(fitted, tmp_path, score):
    """Any caller of the scoring functions, not only the command line, is told: the same
    words as `drape evaluate` and `drape tune`, both lists named."""
    from bridge.evaluation.heldout import evaluate_takes
    from bridge.evaluation.tuning import tune_model
    from bridge.recognition import load_model
    run = {"evaluate_takes": evaluate_takes, "tune_model": tune_model}[score]
    take, model_path, other = fitted
    model = load_model(model_path)
    names = read_recording(other).channel_names
    swapped = read_recording(_rewritten(other, tmp_path / "swapped.take", order=[1, 0, *range(2, len(names))]))
    renamed = read_recording(_rewritten(other, tmp_path / "renamed.take", names=["hood", *names[1:]]))
    with pytest.raises(ValueError) as got:
        run(model, [read_recording(other), swapped])
    msg = str(got.value)
    assert f"trained on channels {', '.join(names)} but take 2 of 2" in msg
    assert f"has {', '.join([names[1], names[0], *names[2:]])}" in msg and "the same names in another order" in msg
    with pytest.raises(ValueError, match=f"but {tmp_path / 'renamed.take'} has hood, "):
        run(model, [renamed], names=[tmp_path / "renamed.take"])


@pytest.mark.parametrize("score", ["evaluate_takes", "tune_model"])
def test_the_library_checks_numbered_channel_names_by_count_only(fitted, tmp_path, score):
    from bridge.evaluation.heldout import evaluate_takes
    from bridge.evaluation.tuning import tune_model
    from bridge.recognition import load_model
    run = {"evaluate_takes": evaluate_takes, "tune_model": tune_model}[score]
    take, model_path, other = fitted
    model = load_model(model_path)
    n = len(read_recording(other).channel_names)
    numbered = read_recording(_rewritten(other, tmp_path / "numbered.take", names=[f"ch{i + 1}" for i in range(n)]))
    run(model, [numbered])   # scored, not refused
    fewer = read_recording(_rewritten(other, tmp_path / "fewer.take", order=list(range(n - 1)),
                                      names=[f"ch{i + 1}" for i in range(n - 1)]))
    with pytest.raises(ValueError, match=f"trained on {n} channels"):
        run(model, [fewer])


def test_a_take_with_numbered_channel_names_is_checked_by_count_only(fitted, tmp_path, capsys):
    """A garment that sends no header line records ch1, ch2, ...: no names to compare."""
    take, model, other = fitted
    n = len(read_recording(other).channel_names)
    numbered = _rewritten(other, tmp_path / "numbered.take", names=[f"ch{i + 1}" for i in range(n)])
    assert main(["evaluate", "--model", str(model), str(numbered)]) == 0
    assert "trained on channels" not in capsys.readouterr().err


def test_fit_refuses_takes_whose_channels_differ(fitted, tmp_path, capsys):
    take, model, other = fitted
    names = read_recording(other).channel_names
    swapped = _rewritten(other, tmp_path / "swapped.take", order=[1, 0, *range(2, len(names))])
    assert main(["fit", str(take), str(swapped), "-o", str(tmp_path / "m2.npz"), "--classifier", "linear"]) == 2
    assert "all recordings must share channels" in capsys.readouterr().err
    assert not (tmp_path / "m2.npz").exists()


def test_model_names_from_a_ts_fit_are_not_compared(tmp_path):
    """A .ts fit names its channels c0, c1, ...: they stand for no cable, so a take of the same
    count meets it whatever its names, while a named model refuses a stranger's names."""
    from pathlib import Path

    from bridge.recognition import ModelError, load_model
    data = Path(__file__).parent / "data"
    path = tmp_path / "ts.npz"
    assert main(["fit", "--ts", str(data / "GunPoint_TRAIN.ts"), "--classifier", "dtw", "-o", str(path)]) == 0
    ts_model = load_model(path)
    assert ts_model.channel_names == ("c0",)
    ts_model.check_channel_names(("left_sleeve",), "a take")
    ts_model.check_channel_names(("c0",), "a take")
    named = load_model(path)
    named.channel_names = ("back",)
    with pytest.raises(ModelError, match="trained on channels back but a take has left_sleeve"):
        named.check_channel_names(("left_sleeve",), "a take")


def _serial_lines(header: bytes, n=50):
    from bridge.sources.textline import format_line
    return header + b"".join(format_line([181000.0 + i, 252000.0]) for i in range(n))


def _read_loop(src, data, n, timeout_s=10.0):
    import time
    got, end = 0, time.monotonic() + timeout_s
    while got < n and time.monotonic() < end:
        if data:
            src.serial.write(data[:1024])
            data = data[1024:]
        got += len(src.read())
    return got


@pytest.mark.parametrize("header,order", [(b"hem_right,hem_left\n", True), (b"hood,hem_right\n", False)])
def test_a_garment_whose_header_names_other_channels_is_refused_live(header, order):
    from bridge.sources.serialport import ChannelMismatch, SerialSource
    src = SerialSource("loop://", rate_hz=100.0, timeout_s=0.01, channel_names=("hem_left", "hem_right"),
                       protocol="text", timestamp=False)
    try:
        with pytest.raises(ChannelMismatch) as got:
            _read_loop(src, _serial_lines(header), 50)
    finally:
        src.close()
    msg = str(got.value)
    assert f"names its channels {header.decode().strip().replace(',', ', ')}" in msg
    assert "the model's are hem_left, hem_right" in msg
    assert ("another order" in msg) == order


@pytest.mark.parametrize("header", [b"hem_left,hem_right\n", b"", b"ch1,ch2\n"])
def test_a_garment_with_the_model_s_names_or_none_is_read_live(header):
    from bridge.sources.serialport import SerialSource
    src = SerialSource("loop://", rate_hz=100.0, timeout_s=0.01, channel_names=("hem_left", "hem_right"),
                       protocol="text", timestamp=False)
    try:
        assert _read_loop(src, _serial_lines(header), 50) == 50
    finally:
        src.close()
