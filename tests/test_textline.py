"""The text-line protocol parser: good lines, and every kind of bad line counted and skipped."""

from bridge.sources import TextLineParser, format_line


def test_plain_and_timestamped_lines():
    p = TextLineParser(3)
    out = p.feed(b"100.5,200,300\n1.25 100\t200 300\n")
    assert out == [(None, [100.5, 200.0, 300.0]), (1.25, [100.0, 200.0, 300.0])]
    assert p.stats.good == 2 and p.stats.bad == 0


def test_partial_lines_are_joined_across_reads():
    p = TextLineParser(2)
    assert p.feed(b"10,2") == []
    assert p.feed(b"0\n") == [(None, [10.0, 20.0])]


def test_header_and_comments():
    p = TextLineParser(2)
    assert p.feed(b"# firmware 1.0\nleft,right\n5,6\n") == [(None, [5.0, 6.0])]
    assert p.channel_names == ("left", "right") and p.stats.comments == 1


def test_bad_lines_are_counted_and_skipped():
    p = TextLineParser(2)
    data = b"1,2\nabc,def,ghi\n1,2,3,4\nnan,5\ninf,5\n-3,5\n0,5\n\xff\xfe,1\n3,4\n"
    out = p.feed(data)
    assert out == [(None, [1.0, 2.0]), (None, [3.0, 4.0])]
    assert p.stats.malformed == 2
    assert p.stats.wrong_count == 1
    assert p.stats.out_of_range == 4


def test_endless_line_is_dropped():
    p = TextLineParser(2)
    p.feed(b"1" * 5000)
    assert p.pending == b"" and p.stats.malformed == 1
    assert p.feed(b"\n7,8\n") == [(None, [7.0, 8.0])]


def test_format_line_round_trips():
    p = TextLineParser(2)
    assert p.feed(format_line([1000.0, 2000.0], 0.5)) == [(0.5, [1000.0, 2000.0])]


# Layout detection when the channel count is not stated.

import pytest
from hypothesis import given, settings, strategies as st

from bridge.sources.textline import ProtocolUndecided


def test_header_with_a_time_column_decides_at_once():
    p = TextLineParser()
    out = p.feed(b"# jacket v2\nt_s,left,right\n0.00,100,200\n0.01,101,201\n")
    assert p.n_channels == 2 and p.timestamp is True and p.channel_names == ("left", "right")
    assert out == [(0.0, [100.0, 200.0]), (0.01, [101.0, 201.0])]


def test_header_names_channels_and_lines_carry_one_more():
    p = TextLineParser()
    assert p.feed(b"a b c\n0.5 1 2 3\n") == [(0.5, [1.0, 2.0, 3.0])]
    assert p.n_channels == 3 and p.channel_names == ("a", "b", "c")


def test_no_header_first_column_time_or_not():
    lines = b"".join(f"{i / 100:.2f},{180000 + 100 * (i % 3)},{250000 - 100 * (i % 2)}\n".encode() for i in range(8))
    p = TextLineParser()
    out = p.feed(lines)
    assert p.timestamp is True and p.n_channels == 2 and len(out) == 8  # the held lines are not lost
    wobbly = b"".join(f"{180000 + 100 * (i % 3)},{250000 + 100 * i}\n".encode() for i in range(8))
    q = TextLineParser()
    assert len(q.feed(wobbly)) == 8 and q.timestamp is False and q.n_channels == 2


def test_ambiguous_layout_is_refused_with_what_to_state():
    # A first column rising by 10 per line: milliseconds, or a channel warming up? Do not guess.
    lines = b"".join(f"{10 * i + 10},{180000},{250000}\n".encode() for i in range(8))
    with pytest.raises(ProtocolUndecided, match="timestamp = true or false"):
        TextLineParser().feed(lines)
    p = TextLineParser(timestamp=False)
    assert len(p.feed(lines)) == 8 and p.n_channels == 3
    with pytest.raises(ProtocolUndecided, match="header names 3 columns but lines carry 5"):
        TextLineParser().feed(b"a,b,c\n1,2,3,4,5\n")


def test_stated_timestamp_is_strict():
    p = TextLineParser(2, timestamp=True)
    assert p.feed(b"0.1,5,6\n5,6\n") == [(0.1, [5.0, 6.0])] and p.stats.wrong_count == 1


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=3000), st.integers(1, 64))
def test_random_bytes_are_counted_never_raised(data, chunk):
    p = TextLineParser(4)
    got = []
    for i in range(0, len(data), chunk):
        got += p.feed(data[i:i + chunk])
    lines = data.count(b"\n")
    assert len(got) == p.stats.good and p.stats.good + p.stats.bad <= lines + 1 + len(data) // 4096
