"""Recording reader: our files and other loggers' CSV, chunking, bad rows, torn lines, errors."""

from __future__ import annotations

import csv
import os

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from replay_helpers import CHAIN_TEXT, weigh_station, write_recording

from replay.reader import Gap, RecordingError, read_recording


def table_of(recording, start_s: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    blocks = list(recording.blocks(start_s))
    return (np.concatenate([b.t_host for b in blocks]),
            np.vstack([b.values for b in blocks]))


def test_reads_back_our_recording_with_header(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(1000)
    write_recording(path, values, gaps_at=(400,))
    rec = read_recording(path, chunk_rows=128)
    h = rec.header
    assert h.format_version == 1 and h.tool == "tunetrace 0.1.0"
    assert h.source == "/dev/ttyACM0 @ 115200"
    assert (h.rate_hz, h.rate_origin) == (250.0, "declared")
    assert h.chain_text == CHAIN_TEXT
    assert rec.schema.channels == ("load", "current", "vib")
    assert rec.schema.units == ("kg", "A", "g")
    assert rec.rate() == (250.0, "recording")
    events = list(rec.events())
    assert all(len(e) <= 128 for e in events if not isinstance(e, Gap))
    gaps = [e for e in events if isinstance(e, Gap)]
    assert gaps == [Gap("reconnected at row 400", 400)]
    t, got = table_of(rec)
    np.testing.assert_array_equal(got, values)
    assert (rec.rows, rec.bad_rows, rec.gaps, rec.torn_last_line) == (1000, 0, 1, False)


def test_standard_csv_module_and_numpy_give_the_same_table(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(300), gaps_at=(120,))
    with open(path, newline="") as f:
        rows = list(csv.reader(line for line in f if not line.startswith("#")))
    by_csv = np.array(rows[1:], dtype=np.float64)
    # numpy: skip the metadata lines, take the header row as field names; the gap
    # comment inside the data is skipped as a comment
    lines = path.read_text().splitlines()
    metadata = next(i for i, line in enumerate(lines) if not line.startswith("#"))
    named = np.genfromtxt(path, delimiter=",", comments="#", names=True,
                          skip_header=metadata)
    assert named.dtype.names == tuple(rows[0])
    by_numpy = np.column_stack([named[name] for name in named.dtype.names])
    np.testing.assert_array_equal(by_csv, by_numpy)
    rec = read_recording(path)
    t, values = table_of(rec)
    np.testing.assert_array_equal(np.column_stack([t, values]), by_numpy)


def test_chunk_size_does_not_change_the_result(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(700)
    write_recording(path, values, gaps_at=(13, 500))
    reference = table_of(read_recording(path))
    for chunk_bytes in (1, 7, 100, 4096):
        from replay.reader import Recording

        rec = Recording(path, chunk_rows=50, chunk_bytes=chunk_bytes)
        got = table_of(rec)
        np.testing.assert_array_equal(got[0], reference[0])
        np.testing.assert_array_equal(got[1], reference[1])
        assert rec.gaps == 2 and rec.rows == 700


def test_bad_rows_are_counted_and_skipped(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(50))
    lines = path.read_text().splitlines(keepends=True)
    header_rows = len(lines) - 50
    bad = ["0.5,abc,1,2\n", "0.6,1,2\n", "0.7,1,2,3,4\n", "0.8,,1,2\n", "\xff\xfe,1,2,3\n"]
    for i, line in enumerate(bad):
        lines.insert(header_rows + 5 * i + 3, line)
    path.write_text("".join(lines))
    rec = read_recording(path)
    _, values = table_of(rec)
    np.testing.assert_array_equal(values, weigh_station(50))
    assert rec.bad_rows == len(bad)
    assert rec.last_bad_row == bad[-1].strip()


def test_rows_without_a_finite_time_are_bad(tmp_path):
    path = tmp_path / "logger.csv"
    path.write_text("time,load\n0,1\nnan,2\n0.02,3\ninf,4\n0.04,5\n")
    rec = read_recording(path, chunk_rows=2)
    t, values = table_of(rec)
    assert t.tolist() == [0.0, 0.02, 0.04] and values[:, 0].tolist() == [1, 3, 5]
    assert rec.bad_rows == 2 and rec.last_bad_row == "inf,4"


def test_an_overlong_line_is_one_bad_row_and_memory_stays_bounded(tmp_path):
    from replay.reader import MAX_DATA_LINE, Recording

    path = tmp_path / "logger.csv"
    with open(path, "w") as f:
        f.write("time,load\n0,1\n")
        f.write("7" * (3 * MAX_DATA_LINE) + "\n")
        f.write("0.02,3\n")
    rec = Recording(path, chunk_bytes=4096)
    t, values = table_of(rec)
    assert t.tolist() == [0.0, 0.02] and rec.bad_rows == 1


def test_torn_last_line_of_our_recording_is_ignored_and_reported(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(20)
    write_recording(path, values)
    text = path.read_text()
    # a crash cut the last row inside its last number: it still parses, but is untrusted
    path.write_text(text[:-3])
    rec = read_recording(path)
    _, got = table_of(rec)
    np.testing.assert_array_equal(got, values[:19])
    assert rec.torn_last_line and rec.bad_rows == 0


def test_plain_csv_last_line_without_newline_is_kept_when_whole(tmp_path):
    path = tmp_path / "logger.csv"
    path.write_text("time,load\n0.0,1.5\n0.01,2.5\n0.02,3.5")
    rec = read_recording(path)
    t, values = table_of(rec)
    np.testing.assert_array_equal(values[:, 0], [1.5, 2.5, 3.5])
    assert not rec.torn_last_line
    path.write_text("time,load\n0.0,1.5\n0.01,2.5\n0.02,")
    rec = read_recording(path)
    assert len(table_of(rec)[1]) == 2 and rec.torn_last_line


def test_plain_csv_time_column_by_name_units_and_text_columns(tmp_path):
    path = tmp_path / "logger.csv"
    path.write_text("status;t_ms;load [kg];vib[g]\n"
                    "ok;0;1.0;0.1\nok;4;2.0;0.2\nlate;8;3.0;0.3\n")
    rec = read_recording(path)
    assert rec.schema.channels == ("load", "vib") and rec.schema.units == ("kg", "g")
    assert rec.header.ignored_columns == ("status",)
    assert rec.header.time_column == "t_ms"
    t, values = table_of(rec)
    np.testing.assert_allclose(t, [0.0, 0.004, 0.008])
    np.testing.assert_array_equal(values, [[1.0, 0.1], [2.0, 0.2], [3.0, 0.3]])
    assert rec.rate() == (pytest.approx(250.0), "estimated")


def test_plain_csv_time_column_option_and_rate(tmp_path):
    path = tmp_path / "logger.csv"
    path.write_text("stamp,load\n10.0,1\n10.5,2\n11.0,3\n")
    with pytest.raises(RecordingError, match="--time-column NAME or give the sample rate"):
        read_recording(path)
    rec = read_recording(path, time_column="stamp")
    assert table_of(rec)[0].tolist() == [10.0, 10.5, 11.0]
    assert rec.rate() == (pytest.approx(2.0), "estimated")
    rec = read_recording(path, rate_hz=100.0)
    assert rec.schema.channels == ("stamp", "load")
    assert table_of(rec)[0].tolist() == [0.0, 0.01, 0.02]
    assert rec.rate() == (100.0, "declared")
    with pytest.raises(RecordingError, match="'nope' is not a column"):
        read_recording(path, time_column="nope")


def test_start_seconds_skips_rows(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(1000)
    write_recording(path, values, gaps_at=(100, 900))
    rec = read_recording(path, chunk_rows=64)
    t_all, _ = table_of(rec)
    t, got = table_of(rec, start_s=2.0)
    first = int(np.searchsorted(t_all, t_all[0] + 2.0))
    np.testing.assert_array_equal(got, values[first:])
    gaps = [e for e in rec.events(2.0) if isinstance(e, Gap)]
    assert [g.reason for g in gaps] == ["reconnected at row 900"]


def test_start_after_a_full_pass_uses_the_chunk_index(tmp_path):
    from replay.reader import Recording

    path = tmp_path / "rec.csv"
    values = weigh_station(3000)
    write_recording(path, values, gaps_at=(2000,))
    rec = Recording(path, chunk_rows=100, chunk_bytes=2000)
    t_all, _ = table_of(rec)                       # the first pass builds the index
    assert len(rec._index) > 50
    for start_s in (0.5, 7.9, 11.0):
        first = int(np.searchsorted(t_all, t_all[0] + start_s))
        np.testing.assert_array_equal(table_of(rec, start_s)[1], values[first:])
    assert rec.gaps == 1 and rec.rows == 3000 and rec.bad_rows == 0   # counted once


@pytest.mark.parametrize("content, message", [
    ("", "has no header row"),
    ("# only a comment\n", "has no header row"),
    ("name,status\nabc,ok\n", "no column under the header row holds numbers"),
    ("time,load\n", "no data rows"),
    ("# tunetrace recording 1\nt_host,load\n", "no data rows"),
    ("# tunetrace recording 1\nt_host,load\nx,y\n", r"no data rows \(1 bad rows\)"),
    ("# tunetrace recording 7\nt_host,load\n", "format '7'"),
    ("# tunetrace recording 1\ntime,load\n0,1\n", "without a t_host column"),
    ("time,load,load\n0,1,2\n", "names a column twice"),
    ("time\n0\n1\n", "only a time column"),
])
def test_unusable_files_give_one_sentence(tmp_path, content, message):
    path = tmp_path / "bad.csv"
    path.write_text(content)
    with pytest.raises(RecordingError, match=message) as info:
        read_recording(path)
    text = str(info.value)
    assert text.endswith(".") and "\n" not in text


def test_missing_directory_and_unreadable_files(tmp_path):
    with pytest.raises(RecordingError, match="does not exist"):
        read_recording(tmp_path / "nope.csv")
    with pytest.raises(RecordingError, match="is a directory"):
        read_recording(tmp_path)
    # reading /proc/self/mem at offset 0 fails with EIO for anyone, root included
    with pytest.raises(RecordingError, match="cannot be read"):
        read_recording("/proc/self/mem")
    if os.geteuid() != 0:           # root reads any file whatever its mode
        locked = tmp_path / "locked.csv"
        locked.write_text("time,load\n0,1\n")
        locked.chmod(0)
        with pytest.raises(RecordingError, match="permission denied"):
            read_recording(locked)


# -- fuzzing -------------------------------------------------------------------------

NUMBER = st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr)
JUNK = st.sampled_from(["", "abc", "1.2.3", "--1", "0x", "1e", "#", '"', "1 2", "\t"])
ROW_KIND = st.sampled_from(["good", "good", "good", "short", "long", "junk", "gap", "blank"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(kinds=st.lists(st.tuples(ROW_KIND, st.lists(NUMBER, min_size=4, max_size=4), JUNK),
                      max_size=60),
       torn=st.integers(0, 12), ours=st.booleans(), chunk_bytes=st.integers(1, 300),
       header=st.sampled_from(["t_host,load,current,vib", "time,a,b,c", "t;a;b;c", "x"]))
def test_fuzzed_files_give_counted_rows_or_a_clear_error(tmp_path_factory, kinds, torn,
                                                         ours, chunk_bytes, header):
    from replay.reader import Recording

    sep = ";" if ";" in header else ","
    lines, expected = [], []
    for kind, numbers, junk in kinds:
        if kind == "good":
            lines.append(sep.join(numbers))
            expected.append([float(x) for x in numbers])
        elif kind == "short":
            lines.append(sep.join(numbers[:2]))
        elif kind == "long":
            lines.append(sep.join(numbers + numbers[:1]))
        elif kind == "junk":
            lines.append(sep.join(numbers[:2] + [junk or "x", numbers[3]]))
        elif kind == "gap":
            lines.append("# gap: fuzz")
        else:
            lines.append("")
    text = "\n".join([*(["# tunetrace recording 1"] if ours else []), header, *lines]) + "\n"
    if torn and lines:
        text = text[:-torn] if torn < len(text) else text
    path = tmp_path_factory.mktemp("fuzz") / "f.csv"
    path.write_text(text)
    try:
        rec = Recording(path, chunk_bytes=chunk_bytes)
    except RecordingError as exc:
        assert str(exc).endswith(".") and "\n" not in str(exc)
        return
    got = list(rec.blocks())
    table = np.vstack([np.column_stack([b.t_host, b.values]) for b in got])
    rows = table.tolist()
    if rec.header.ignored_columns:
        return      # a junk field in the first row made that column text: no oracle here
    # every row read is one of the good rows, in order (the last may be the torn one
    # of a plain CSV, which is kept only if it still parses)
    assert rows == expected[: len(rows)] or (rows[:-1] == expected[: len(rows) - 1])
    assert rec.rows == len(rows)
    assert rec.bad_rows + len(rows) + int(rec.torn_last_line) <= len(lines)
