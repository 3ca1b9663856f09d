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
