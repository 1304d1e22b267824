"""TextFramer: every line-ending, partial-line, overlong and blank-line rule."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from monitor.framing import TextFramer


def feed_all(framer: TextFramer, chunks) -> list[bytes]:
    out = []
    for chunk in chunks:
        out += framer.feed(chunk)
    return out


@pytest.mark.parametrize("end", [b"\n", b"\r\n", b"\r"])
def test_each_line_ending(end):
    framer = TextFramer()
    data = b"junk" + end + b"1,2" + end + b"3,4" + end + b"5,"
    assert framer.feed(data) == [b"1,2", b"3,4"]
    assert framer.feed(b"6" + end) == [b"5,6"]


def test_crlf_split_across_chunks_gives_no_extra_frame():
    framer = TextFramer(drop_partial_first=False)
    assert feed_all(framer, [b"1,2\r", b"\n3,4\r", b"\n", b"5,6\r\n"]) == [
        b"1,2", b"3,4", b"5,6"]
    assert framer.bad.count == 0


def test_lone_cr_then_lf_later_is_not_swallowed_twice():
    framer = TextFramer(drop_partial_first=False)
    # CR ends "1"; the next chunk starts with data, so its LF ends "2" normally.
    assert feed_all(framer, [b"1\r", b"2\n", b"\n3\n"]) == [b"1", b"2", b"3"]


def test_partial_first_line_dropped_by_default_and_kept_on_request():
    assert TextFramer().feed(b"3.5,1\n4,2\n") == [b"4,2"]
    assert TextFramer(drop_partial_first=False).feed(b"3.5,1\n4,2\n") == [b"3.5,1", b"4,2"]


def test_partial_first_line_spread_over_chunks_is_dropped():
    framer = TextFramer()
    assert feed_all(framer, [b"12", b"34", b",5\n6,7\n"]) == [b"6,7"]


def test_blank_and_whitespace_lines_ignored():
    framer = TextFramer(drop_partial_first=False)
    assert framer.feed(b"1\n\n  \t\n\r\n2\n") == [b"1", b"2"]
    assert framer.bad.count == 0


def test_overlong_line_discarded_with_its_tail_and_counted():
    framer = TextFramer(max_line=16)
    out = feed_all(framer, [b"\n1,2\n", b"x" * 10, b"y" * 10, b"z" * 30, b"tail\n3,4\n"])
    assert out == [b"1,2", b"3,4"]
    assert framer.overlong == 1 and framer.bad.count == 1
    assert "longer than 16 bytes" in framer.bad.last_reason
    assert framer.bad.last.startswith(b"xxxxxxxxxxyyyyyy")


def test_overlong_complete_line_in_one_chunk_counted():
    framer = TextFramer(max_line=8)
    assert framer.feed(b"\n1\n" + b"9" * 20 + b"\n2\n") == [b"1", b"2"]
    assert framer.overlong == 1


def test_default_limit_is_4_kib():
    framer = TextFramer()
    assert framer.feed(b"\n" + b"1" * 4096 + b"\n" + b"2" * 4097 + b"\n") == [b"1" * 4096]
    assert framer.overlong == 1


def test_overlong_partial_first_line_is_not_counted_as_bad():
    framer = TextFramer(max_line=8)
    assert feed_all(framer, [b"a" * 50, b"b" * 50, b"\n1\n"]) == [b"1"]
    assert framer.bad.count == 0


def test_flush_returns_unterminated_last_line():
    framer = TextFramer(drop_partial_first=False)
    assert framer.feed(b"1\n2") == [b"1"]
    assert framer.flush() == [b"2"]
    assert framer.flush() == []


def test_bad_max_line_names_the_parameter():
    with pytest.raises(ValueError, match="max_line"):
        TextFramer(max_line=0)


line_bytes = st.lists(st.binary(min_size=1, max_size=12).filter(
    lambda b: b"\r" not in b and b"\n" not in b and not b.isspace()), min_size=1, max_size=30)


@given(lines=line_bytes, ends=st.lists(st.sampled_from([b"\n", b"\r\n", b"\r"]), min_size=1),
       cuts=st.lists(st.integers(min_value=0, max_value=400), max_size=10))
def test_any_chunking_gives_the_same_lines(lines, ends, cuts):
    data = b"".join(line + ends[i % len(ends)] for i, line in enumerate(lines))
    bounds = sorted({c for c in cuts if c < len(data)} | {0, len(data)})
    chunks = [data[a:b] for a, b in zip(bounds, bounds[1:], strict=False)]
    framer = TextFramer(drop_partial_first=False)
    assert feed_all(framer, chunks) == lines


def test_whitespace_line_split_across_chunks_ignored():
    framer = TextFramer(drop_partial_first=False)
    assert feed_all(framer, [b"1\n  ", b" \n2\n", b"\t", b"\r\n3\r"]) == [b"1", b"2", b"3"]
