"""The .ts reader: archive files, unequal lengths, missing values and malformed input."""

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bridge.sources.ts_format import TsFormatError, read_ts, stack_cases

DATA = Path(__file__).parent / "data"

HEADER = "@problemName t\n@timeStamps false\n@missing {missing}\n@univariate {uni}\n{dims}@equalLength {eq}\n@classLabel true a b\n@data\n"


def write(tmp_path, body, missing="false", uni="true", dims="", eq="true"):
    p = tmp_path / "x.ts"
    p.write_text(HEADER.format(missing=missing, uni=uni, dims=dims, eq=eq) + body)
    return p


def test_gunpoint_shape_matches_the_archive():
    # UCR archive 2018 DataSummary (Dau et al. 2019): GunPoint has 50 train and 150 test
    # cases of length 150, 2 classes.
    X, y, meta = read_ts(DATA / "GunPoint_TRAIN.ts")
    assert len(X) == 50 and all(c.shape == (1, 150) for c in X)
    assert set(y) == {"1", "2"} and meta["class_labels"] == ["1", "2"]
    Xt, yt, _ = read_ts(DATA / "GunPoint_TEST.ts")
    assert len(Xt) == 150 and stack_cases(Xt).shape == (150, 1, 150)


def test_basicmotions_shape_matches_the_archive():
    # UEA archive (Bagnall et al. 2018, Table of datasets): BasicMotions has 40 train and
    # 40 test cases, 6 dimensions, length 100, 4 classes.
    for part in ("TRAIN", "TEST"):
        X, y, meta = read_ts(DATA / f"BasicMotions_{part}.ts")
        assert stack_cases(X).shape == (40, 6, 100)
        assert set(y) == {"Standing", "Running", "Walking", "Badminton"}
        assert meta["univariate"] is False and meta["dimensions"] == 6


def test_values_and_multivariate_split(tmp_path):
    p = write(tmp_path, "1,2,3:4,5,6:a\n7,8,9:1e-3,-2,0.5:b\n", uni="false", dims="@dimensions 2\n")
    X, y, _ = read_ts(p)
    np.testing.assert_array_equal(X[1], [[7, 8, 9], [1e-3, -2, 0.5]])
    assert list(y) == ["a", "b"]


def test_unequal_lengths(tmp_path):
    p = write(tmp_path, "1,2,3:a\n1,2,3,4,5:b\n", eq="false")
    X, _, _ = read_ts(p)
    assert [c.shape for c in X] == [(1, 3), (1, 5)]
    S = stack_cases(X)
    assert S.shape == (2, 1, 5)
    np.testing.assert_allclose(S[0, 0], [1, 1.5, 2, 2.5, 3])


def test_missing_values_refused_or_filled(tmp_path):
    p = write(tmp_path, "1,?,3,?:a\n", missing="true")
    with pytest.raises(TsFormatError, match=r"x\.ts:8: missing value"):
        read_ts(p)
    X, _, _ = read_ts(p, missing="interpolate")
    np.testing.assert_array_equal(X[0], [[1, 2, 3, 3]])
    assert np.isnan(read_ts(p, missing="keep")[0][0][0, 1])


@pytest.mark.parametrize("body, message", [
    ("1,2,x:a\n", r":8: dimension 1 position 3: 'x' is not a number"),
    ("1,2,3:c\n", r":8: label 'c' is not one of those declared"),
    ("1,2,3\n", r":8: case has no class label"),
    ("1,2,3:a\n1,2:3,4:a\n", r":9: case has 2 dimensions in a univariate file"),
    ("1,2,3:a\n1,2:a\n", r"@equalLength true but cases differ"),
    ("", r"no cases after @data"),
])
def test_malformed_input_names_file_and_line(tmp_path, body, message):
    with pytest.raises(TsFormatError, match=message):
        read_ts(write(tmp_path, body))


def test_header_errors(tmp_path):
    p = tmp_path / "h.ts"
    p.write_text("@problemName t\n@timeStamps true\n@data\n")
    with pytest.raises(TsFormatError, match=r"h\.ts:2: time-stamped"):
        read_ts(p)
    p.write_text("1,2,3\n")
    with pytest.raises(TsFormatError, match=r"h\.ts:1: expected a @key header"):
        read_ts(p)
    p.write_text("@classLabel true a\n")
    with pytest.raises(TsFormatError, match="no @data line"):
        read_ts(p)


@settings(max_examples=60, deadline=None)
@given(st.text(alphabet="0123456789,.:?-e@ab\n#", max_size=200))
def test_arbitrary_text_reads_or_raises_the_format_error(tmp_path_factory, body):
    p = tmp_path_factory.mktemp("fuzz") / "f.ts"
    p.write_text("@classLabel true a b\n@data\n" + body)
    try:
        X, y, _ = read_ts(p)
    except TsFormatError:
        return
    assert len(X) == len(y) and all(c.ndim == 2 and np.isfinite(c).all() for c in X)
