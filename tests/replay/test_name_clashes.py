"""Stream column names that clash with a recording's own: renamed on write, said in the
header and on stderr, and the file reads back whole (every channel, every value, exact)."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from replay_helpers import tunetrace_cmd

from monitor.block import Block, Schema
from monitor.cli import main
from replay.column_names import recording_columns
from replay.reader import read_recording
from replay.writer import RecordingWriter


def write_and_read(tmp_path, schema: Schema, with_filtered: bool, rows: int = 20,
                   name: str = "rec.csv"):
    """Write `rows` rows of `schema` (device time and counter when it names them) and read
    them back; returns (writer, recording, raw values, filtered values)."""
    rng = np.random.default_rng(7)
    k = len(schema.channels)
    values = 2.0 + rng.normal(size=(rows, k))
    filtered = values * 0.5
    path = tmp_path / name
    writer = RecordingWriter(path, schema, "test board", 250.0, "declared", None,
                             with_filtered=with_filtered)
    block = Block(100.0 + np.arange(rows) / 250.0, values,
                  t_dev=np.arange(rows) * 0.004 if schema.time_column else None,
                  counter=np.arange(rows) + 40 if schema.counter_column else None)
    writer.write_block(block, filtered if with_filtered else None)
    writer.close()
    return writer, read_recording(path), values, filtered


def table(recording):
    return np.vstack([b.values for b in recording.blocks()])


def test_a_channel_named_t_host_is_renamed_and_read_back(tmp_path):
    schema = Schema(("t_host", "load"), ("s", "kg"))
    writer, rec, values, _ = write_and_read(tmp_path, schema, False)
    assert rec.schema.channels == ("t_host_2", "load")
    assert rec.schema.units == ("s", "kg")
    np.testing.assert_array_equal(table(rec), values)
    text = (tmp_path / "rec.csv").read_text()
    assert ('# renamed: "t_host" -> "t_host_2" (t_host is the recording\'s own host-time '
            'column)\n') in text
    assert [r.written for r in writer.renames] == ["t_host_2"]


@pytest.mark.parametrize("with_filtered", [False, True])
def test_x_and_x_filtered_stay_two_channels(tmp_path, with_filtered):
    # without the rename the reader took x_filtered for x's filtered output (and lost
    # the channel); with filtered output the header named x_filtered twice
    schema = Schema(("x", "x_filtered"))
    _, rec, values, filtered = write_and_read(tmp_path, schema, with_filtered)
    assert rec.schema.channels == ("x", "x_filtered_2")
    np.testing.assert_array_equal(table(rec), values)
    header_row = [line for line in (tmp_path / "rec.csv").read_text().splitlines()
                  if line.startswith("t_host")][0]
    if with_filtered:
        assert header_row == "t_host,x,x_filtered_2,x_filtered,x_filtered_2_filtered"
        assert rec.header.filtered_columns == ("x_filtered", "x_filtered_2_filtered")
    else:
        assert header_row == "t_host,x,x_filtered_2"
        assert rec.header.filtered_columns == ()


def test_device_time_and_counter_named_like_ours(tmp_path):
    # a board's own clock column called t_host, and a channel named after the counter
    schema = Schema(("load", "seq_filtered"), ("kg", ""), time_column="t_host",
                    counter_column="seq")
    _, rec, values, _ = write_and_read(tmp_path, schema, False)
    assert rec.schema.time_column == "t_host_2" and rec.schema.counter_column == "seq"
    assert rec.schema.channels == ("load", "seq_filtered_2")
    np.testing.assert_array_equal(table(rec), values)
    block = next(rec.blocks())
    np.testing.assert_array_equal(block.t_dev, np.arange(20) * 0.004)
    np.testing.assert_array_equal(block.counter, np.arange(20) + 40)


def test_empty_repeated_and_unprintable_names(tmp_path):
    schema = Schema(("", "load", "load", " vib ", "a,b", "x\ry", "\ufeffamps"))
    writer, rec, values, _ = write_and_read(tmp_path, schema, True)
    assert rec.schema.channels == ("ch0", "load", "load_2", "vib", "a_b", "x_y", "_amps")
    np.testing.assert_array_equal(table(rec), values)
    reasons = {r.original: r.reason for r in writer.renames}
    assert reasons[""] == "the stream gave no name"
    assert reasons["load"] == "an earlier column of the recording has that name"
    assert reasons[" vib "] == "spaces around a name are not kept"
    assert reasons["a,b"] == "a column name cannot hold commas or control characters"
    text = (tmp_path / "rec.csv").read_text()
    assert '# renamed: "x\\ry" -> "x_y" (' in text          # the CR shown escaped
    assert "\r" not in text and "\ufeff" not in text


def test_a_suffix_never_takes_a_name_the_stream_has():
    names = recording_columns(None, None, ("t_host", "t_host_2", "t_host_3_filtered"), True)
    assert names.channels == ("t_host_4", "t_host_2", "t_host_3_filtered")
    assert names.columns == ("t_host", "t_host_4", "t_host_2", "t_host_3_filtered",
                             "t_host_4_filtered", "t_host_2_filtered",
                             "t_host_3_filtered_filtered")
    assert recording_columns(None, None, ("load", "vib"), True).renames == ()


HOSTILE_NAMES = st.one_of(
    st.sampled_from(["t_host", "t_host_2", "x", "x_filtered", "x_filtered_filtered", "seq",
                     "seq_filtered", "t", "time", "", " ", "a,b", "a\rb", "\ufeffload",
                     "load", "load_2", "vib [g]", "#x", '"q"', "t_host_filtered"]),
    st.text(max_size=6))


@settings(max_examples=60, deadline=None, derandomize=True)
@given(channels=st.lists(HOSTILE_NAMES, min_size=1, max_size=6),
       time_column=st.one_of(st.none(), HOSTILE_NAMES),
       counter_column=st.one_of(st.none(), HOSTILE_NAMES),
       with_filtered=st.booleans())
def test_any_stream_names_give_a_file_that_reads_back_whole(tmp_path_factory, channels,
                                                            time_column, counter_column,
                                                            with_filtered):
    tmp_path = tmp_path_factory.mktemp("names")
    schema = Schema(tuple(channels), time_column=time_column, counter_column=counter_column)
    writer, rec, values, filtered = write_and_read(tmp_path, schema, with_filtered, rows=5)
    # an empty device-time or counter name means no such column (as the writer's rows)
    expected = recording_columns(counter_column or None, time_column or None,
                                 tuple(channels), with_filtered)
    assert len(set(expected.columns)) == len(expected.columns)
    assert rec.schema.channels == expected.channels and len(expected.channels) == len(channels)
    assert rec.schema.time_column == expected.time_column
    assert rec.schema.counter_column == expected.counter_column
    np.testing.assert_array_equal(table(rec), values)
    assert len(rec.header.filtered_columns) == (len(channels) if with_filtered else 0)
    changed = {r.original for r in writer.renames}
    for original in [*channels, time_column or None, counter_column or None]:
        if original is not None and original not in changed:
            assert original in expected.columns            # kept as the stream named it


def test_record_renames_and_says_so(tmp_path):
    chain = tmp_path / "gain.toml"
    chain.write_text('[[stage]]\nkind = "gain"\nscale = 2.0\n')
    out = tmp_path / "rec.csv"
    stream = "x,x_filtered,t_host\n" + "".join(f"{i * 0.5!r},{i!r},{i * 0.004!r}\n"
                                               for i in range(50))
    result = subprocess.run(tunetrace_cmd("record", "-", "-o", str(out), "--rate", "250",
                                          "--chain", str(chain), "--with-filtered"),
                            input=stream, capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert ('tunetrace record: the stream\'s column "x_filtered" is recorded as x_filtered_2 '
            '(it would read as the filtered output of x).') in result.stderr
    assert ('tunetrace record: the stream\'s column "t_host" is recorded as t_host_2 '
            "(t_host is the recording's own host-time column).") in result.stderr
    rec = read_recording(out)
    assert rec.schema.channels == ("x", "x_filtered_2")
    assert rec.schema.time_column == "t_host_2"          # the board's clock, by its name
    got = np.vstack([b.values for b in rec.blocks()])
    np.testing.assert_array_equal(got, [[i * 0.5, float(i)] for i in range(50)])
    # and every verb takes the file: apply writes its own filtered columns beside
    applied = tmp_path / "applied.csv"
    assert main(["apply", str(out), "--chain", str(chain), "-o", str(applied)]) == 0
    header_row = [line for line in applied.read_text().splitlines()
                  if line.startswith("t_host")][0]
    assert header_row == "t_host,t_host_2,x,x_filtered_2,x_filtered,x_filtered_2_filtered"


def test_live_record_says_so_on_stderr(tmp_path, capsys):
    out = tmp_path / "rec.csv"
    stream = tmp_path / "stream.txt"
    stream.write_text("t_host,load\n" + "".join(f"{i * 0.004!r},{2.0 + i!r}\n"
                                                for i in range(30)))
    result = subprocess.run(tunetrace_cmd("live", "-", "--plain", "--rate", "250",
                                          "--record", str(out)),
                            stdin=stream.open(), capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert ('tunetrace: the stream\'s column "t_host" is recorded as t_host_2 (t_host is '
            "the recording's own host-time column).") in result.stderr
    rec = read_recording(out)
    np.testing.assert_array_equal(np.vstack([b.values for b in rec.blocks()])[:, 0],
                                  2.0 + np.arange(30))
