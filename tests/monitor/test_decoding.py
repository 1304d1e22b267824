"""TextDecoder: delimiters, headers and units, number forms, bad frames, time/counter columns."""

from __future__ import annotations

import numpy as np
import pytest

from monitor.decoding import ArrivalRate, TextDecoder, parse_header_field


def lines(text: bytes) -> list[bytes]:
    return [line for line in text.split(b"\n") if line]


@pytest.mark.parametrize("delim", [b",", b";", b"\t", b" ", b"   "])
def test_delimiters_detected_and_kept(delim):
    dec = TextDecoder()
    frames = [delim.join([b"1", b"2.5", b"-3"]), delim.join([b"4", b"5", b"6e1"])]
    block = dec.decode(frames, 10.0)
    np.testing.assert_array_equal(block.values, [[1, 2.5, -3], [4, 5, 60]])
    assert dec.schema.channels == ("ch0", "ch1", "ch2")
    np.testing.assert_array_equal(block.t_host, [10.0, 10.0])


def test_header_with_units_both_spellings():
    dec = TextDecoder()
    block = dec.decode(lines(b"load[kg],current [A],vib\n1,2,3\n"), 0.0)
    assert dec.schema.channels == ("load", "current", "vib")
    assert dec.schema.units == ("kg", "A", "")
    assert block.values.tolist() == [[1.0, 2.0, 3.0]]


def test_space_separated_header_keeps_name_and_unit_together():
    dec = TextDecoder()
    block = dec.decode([b"load [kg]  current [A]", b"1.5   2"], 0.0)
    assert dec.schema.channels == ("load", "current")
    assert dec.schema.units == ("kg", "A")
    assert block.values.tolist() == [[1.5, 2.0]]


def test_header_field_parsing():
    assert parse_header_field(' "vib [g]" ', 0) == ("vib", "g")
    assert parse_header_field("", 3) == ("col3", "")


@pytest.mark.parametrize("text,value", [
    (b"42", 42.0), (b"-7", -7.0), (b"+3.25", 3.25), (b".5", 0.5), (b"1e-3", 1e-3),
    (b"-2.5E+4", -25000.0), (b" 12 ", 12.0),
])
def test_number_forms(text, value):
    dec = TextDecoder()
    block = dec.decode([b"1," + text, b"2,3"], 0.0)
    assert block.values[0, 1] == value


def test_channels_option_names_a_headerless_stream():
    dec = TextDecoder(channels=("load", "current"))
    dec.decode([b"1,2,3", b"4,5,6"], 0.0)
    assert dec.schema.channels == ("load", "current", "ch2")


@pytest.mark.parametrize("frame,reason", [
    (b"1,2", "2 fields, expected 3"),
    (b"1,2,3,4", "4 fields, expected 3"),
    (b"1,x,3", "field 2 'x' is not a number"),
    (b"1,,3", "field 2 '' is not a number"),
    (b"1,2\xff,3", "not UTF-8 text"),
    (b"1,1_0,3", "field 2 '1_0' is not a number"),
    (b"x,y,z", "a header line naming other columns (x, y, z)"),
])
def test_bad_frames_counted_with_reason_and_stream_goes_on(frame, reason):
    dec = TextDecoder()
    dec.decode([b"a[kg],b,c"], 0.0)
    block = dec.decode([b"1,2,3", frame, b"4,5,6"], np.array([1.0, 2.0, 3.0]))
    assert block.values.tolist() == [[1, 2, 3], [4, 5, 6]]
    assert block.t_host.tolist() == [1.0, 3.0]       # times follow their good lines
    assert dec.bad.count == 1
    assert dec.bad.last == frame
    assert dec.bad.last_reason == reason


def test_repeated_identical_header_is_ignored():
    dec = TextDecoder()
    block = dec.decode(lines(b"load,vib\n1,2\nload,vib\n3,4\n"), 0.0)
    assert block.values.tolist() == [[1, 2], [3, 4]]
    assert dec.bad.count == 0


def test_first_line_not_utf8_is_bad_and_next_line_sets_schema():
    dec = TextDecoder()
    block = dec.decode([b"\xfe\xff", b"load,vib", b"1,2"], 0.0)
    assert dec.bad.count == 1 and dec.schema.channels == ("load", "vib")
    assert block.values.tolist() == [[1, 2]]


def test_nothing_good_gives_none():
    dec = TextDecoder()
    assert dec.decode([], 0.0) is None
    assert dec.decode([b"load,vib"], 0.0) is None
    assert dec.decode([b"oops"], 0.0) is None
    assert dec.bad.count == 0 and dec.schema is None     # both wait for the first row
    assert dec.decode([b"1,2"], 0.0).values.tolist() == [[1, 2]]
    assert dec.schema.channels == ("load", "vib")
    assert dec.bad.count == 1 and dec.bad.last == b"oops"


def test_time_and_counter_columns_leave_the_channels():
    dec = TextDecoder(time_column="t_s", counter_column="seq")
    text = b"seq,t_s,load[kg],vib[g]\n" + b"".join(
        b"%d,%.3f,%d,%d\n" % (n, n * 0.004, n, -n) for n in (0, 1, 2, 5, 6, 7, 8, 9, 10, 11))
    block = dec.decode(lines(text), 0.0)
    assert dec.schema.channels == ("load", "vib")
    assert dec.schema.units == ("kg", "g")
    assert dec.schema.time_column == "t_s" and dec.schema.counter_column == "seq"
    assert block.counter.dtype == np.int64
    assert block.counter.tolist() == [0, 1, 2, 5, 6, 7, 8, 9, 10, 11]
    np.testing.assert_allclose(block.t_dev[:3], [0.0, 0.004, 0.008])
    assert dec.dropped == 2                      # 3 and 4 never arrived
    assert dec.device_rate() == pytest.approx(250.0)
    # across blocks too, and a counter restart is not a drop
    dec.decode([b"13,0.052,1,1", b"0,0,1,1"], 0.0)
    assert dec.dropped == 3


def test_missing_time_column_is_a_warning_not_a_crash():
    dec = TextDecoder(time_column="t")
    block = dec.decode([b"load,vib", b"1,2"], 0.0)
    assert block.t_dev is None and "--time-column 't' is not in the stream" in dec.warning


def test_same_column_for_time_and_counter_refused():
    with pytest.raises(ValueError, match="time_column"):
        TextDecoder(time_column="n", counter_column="n")


def test_fast_and_checked_paths_agree():
    rng = np.random.default_rng(3)
    table = rng.normal(size=(500, 8)) * 1000
    frames = [b",".join(b"%.6g" % v for v in row) for row in table]
    clean = TextDecoder().decode(frames, 0.0)
    dirty_frames = frames[:250] + [b"garbage"] + frames[250:]
    dirty = TextDecoder().decode(dirty_frames, 0.0)
    np.testing.assert_array_equal(clean.values, dirty.values)
    np.testing.assert_allclose(clean.values, table, rtol=1e-5)


def test_arrival_rate_settles_after_two_seconds():
    est = ArrivalRate()
    for i in range(0, 101):                      # a read every 10 ms, 1 sample each
        est.add(i * 0.01, 1)
    assert est.estimate() == pytest.approx(100.0)
    assert not est.settled()
    for i in range(101, 301):
        est.add(i * 0.01, 1)
    assert est.settled() and est.estimate() == pytest.approx(100.0)
    est.restart()
    est.add(100.0, 1)                            # after a gap, the outage does not count
    est.add(100.5, 50)
    assert est.estimate() == pytest.approx(100.0) and est.settled()


def test_duplicate_header_names_made_unique():
    dec = TextDecoder()
    dec.decode([b"v[g],v[g],v", b"1,2,3"], 0.0)
    assert dec.schema.channels == ("v", "v_2", "v_3") and dec.schema.units == ("g", "g", "")
