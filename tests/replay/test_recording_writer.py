"""RecordingWriter: exact values, header, gaps, never-overwrite, limits, flushing, disk errors."""

from __future__ import annotations

import csv
import errno
import os
import subprocess
import sys
import textwrap
import threading
import time

import numpy as np
import pytest
from replay_helpers import (
    CHAIN_TEXT,
    SCHEMA,
    data_lines,
    weigh_station,
    write_recording,
)

from monitor.block import Block, Schema
from replay.writer import FLUSH_INTERVAL_S, RecordingFull, RecordingWriter


def test_values_round_trip_exactly_with_header(tmp_path):
    path = tmp_path / "rec.csv"
    rng = np.random.default_rng(3)
    values = rng.normal(size=(500, 3)) * 10.0 ** rng.integers(-300, 300, size=(500, 3))
    values[0] = [0.1, -0.0, 12.031]
    values[1] = [np.finfo(float).max, np.finfo(float).tiny, 5e-324]
    write_recording(path, values)
    lines = path.read_text().splitlines()
    assert lines[0] == "# tunetrace recording 1"
    assert lines[1] == "# tool: tunetrace 0.1.0"
    assert lines[2].startswith("# started: ") and lines[2].endswith("Z")
    assert lines[3] == "# source: /dev/ttyACM0 @ 115200"
    assert lines[4] == "# rate_hz: 250.0 (declared)"
    assert lines[5] == "# channels: load [kg], current [A], vib [g]"
    chain = [line[len("# chain: "):] if line != "# chain:" else ""
             for line in lines if line.startswith("# chain:")]
    assert "\n".join(chain) + "\n" == CHAIN_TEXT
    rows = data_lines(path)
    assert rows[0] == "t_host,load,current,vib"
    assert rows[1].split(",")[1:] == ["0.1", "-0.0", "12.031"]        # shortest repr
    table = np.array([[float(x) for x in row.split(",")] for row in rows[1:]])
    np.testing.assert_array_equal(table[:, 1:], values)               # bit-exact floats
    t = table[:, 0]
    assert t[0] >= 0 and np.all(np.diff(t) > 0)
    assert all(len(row.split(",")[0].split(".")[1]) == 6 for row in rows[1:])


def test_gap_lines_sit_where_the_gap_happened(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(300), gaps_at=(100, 250))
    lines = [line for line in path.read_text().splitlines() if not line.startswith("# ")
             or line.startswith("# gap:")]
    assert lines[101] == "# gap: reconnected at row 100"
    assert lines[252] == "# gap: reconnected at row 250"
    assert len(lines) == 1 + 300 + 2


def test_device_time_counter_and_filtered_columns(tmp_path):
    path = tmp_path / "rec.csv"
    schema = Schema(("load",), ("kg",), time_column="t_ms", counter_column="seq")
    writer = RecordingWriter(path, schema, "sim://", 250.0, "device", None, with_filtered=True)
    block = Block(np.array([10.0, 10.004]), np.array([[1.5], [2.5]]),
                  t_dev=np.array([0.001, 0.005]), counter=np.array([7, 8]))
    writer.write_block(block, np.array([[1.25], [2.0]]))
    with pytest.raises(ValueError, match="filtered values are required"):
        writer.write_block(block, None)
    with pytest.raises(ValueError, match="lacks the device time or counter"):
        writer.write_block(Block(block.t_host, block.values), block.values)
    writer.close()
    rows = data_lines(path)
    assert rows[0] == "t_host,seq,t_ms,load,load_filtered"
    assert rows[1:] == ["0.000000,7,0.001,1.5,1.25", "0.004000,8,0.005,2.5,2"]  # filtered: %.17g
    text = path.read_text()
    assert "# time_column: t_ms\n" in text and "# counter_column: seq\n" in text


def test_never_overwrites_without_force(tmp_path):
    path = tmp_path / "rec.csv"
    path.write_text("precious\n")
    with pytest.raises(FileExistsError):
        RecordingWriter(path, SCHEMA, "sim://", None, None, None)
    assert path.read_text() == "precious\n"
    RecordingWriter(path, SCHEMA, "sim://", None, None, None, force=True).close()
    assert path.read_text().startswith("# tunetrace recording 1\n")
    assert "# rate_hz: unknown\n" in path.read_text()


def test_size_limit_stops_cleanly_inside_the_limit(tmp_path):
    path = tmp_path / "rec.csv"
    writer = RecordingWriter(path, SCHEMA, "sim://", 250.0, "declared", None, limit_bytes=4000)
    values = weigh_station(400)
    t = np.arange(400) / 250.0
    with pytest.raises(RecordingFull, match="size limit of 4000 bytes"):
        for start in range(0, 400, 10):
            writer.write_block(Block(t[start:start + 10], values[start:start + 10]))
    assert writer.full
    writer.write_block(Block(t[:1], values[:1]))     # after the stop: ignored, no error
    writer.close()
    text = path.read_text()
    body = text[: text.index("# stopped:")]
    assert len(body.encode()) <= 4000
    assert text.endswith("# stopped: reached the size limit of 4000 bytes\n")
    rows = [r for r in data_lines(path)[1:]]
    table = np.array([[float(x) for x in r.split(",")] for r in rows])
    np.testing.assert_array_equal(table[:, 1:], values[: len(rows)])


def test_duration_limit_keeps_rows_inside_it(tmp_path):
    path = tmp_path / "rec.csv"
    writer = RecordingWriter(path, SCHEMA, "sim://", 250.0, "declared", None, limit_seconds=1.0)
    values = weigh_station(500)
    t = 100.0 + np.arange(500) / 250.0
    with pytest.raises(RecordingFull, match="duration limit of 1 s"):
        for start in range(0, 500, 64):
            writer.write_block(Block(t[start:start + 64], values[start:start + 64]))
    rows = data_lines(path)[1:]
    assert len(rows) == 251                       # t_host 0.000 .. 1.000 s inclusive
    assert float(rows[-1].split(",")[0]) <= 1.0


class FlusherTimer(threading.Condition):
    """The writer's condition variable, noting each timed wait asked of it: the deadline
    (monotonic s) the background flusher set itself for writing pending rows."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.deadlines: list[float] = []

    def wait(self, timeout: float | None = None) -> bool:
        if timeout is not None:
            self.deadlines.append(time.monotonic() + timeout)
        return super().wait(timeout)


def test_rows_reach_the_file_within_100_ms_without_more_blocks(tmp_path, monkeypatch):
    """The promise (DESIGN.md, replay/writer.py): rows reach the OS at most 100 ms after
    write_block returned, with no further call. Checked two ways in one trial: the flush
    loop's own timer must aim at most 100 ms after the write (exact, whatever the load),
    and the rows must be in the file when looked at 150 ms after it. A busy CI machine may
    stall the flusher thread past 150 ms now and then, so up to three trials are made;
    one that holds both is the proof (a 0.4 s flusher delay can hold neither)."""
    import replay.writer as writer_module

    trials = []
    for trial in range(3):
        path = tmp_path / f"rec{trial}.csv"
        with monkeypatch.context() as patch:
            patch.setattr(writer_module.threading, "Condition", FlusherTimer)
            writer = RecordingWriter(path, SCHEMA, "sim://", 250.0, "declared", None)
        try:
            timer = writer._cond
            assert isinstance(timer, FlusherTimer)
            writer.write_block(Block(np.arange(3) / 250.0, weigh_station(3)))
            returned = time.monotonic()
            time.sleep(max(0.0, returned + 0.150 - time.monotonic()))
            present = len(data_lines(path)) == 4       # header row + 3 rows
            aims = [d - returned for d in timer.deadlines]
        finally:
            writer.close()
        trials.append((present, aims))
        # the flusher set itself a deadline for these rows, and none later than 100 ms
        if present and aims and max(aims) <= FLUSH_INTERVAL_S:
            return
    pytest.fail(f"rows not in the file 150 ms after the write, or the flusher aimed past "
                f"{FLUSH_INTERVAL_S} s: (present, deadlines after the write in s) per trial "
                f"{trials}")


def test_disk_full_raises_oserror(tmp_path):
    # /dev/full answers every write with ENOSPC (Linux null devices, man 4 full).
    with pytest.raises(OSError) as info:
        RecordingWriter("/dev/full", SCHEMA, "sim://", 250.0, "declared", None, force=True)
    assert info.value.errno == errno.ENOSPC


def test_write_error_mid_recording_propagates_from_write_block(tmp_path):
    # A real write failure after the header: RLIMIT_FSIZE makes the kernel refuse to
    # grow the file (EFBIG; Python ignores SIGXFSZ), as a full disk would.
    script = textwrap.dedent(f"""
        import resource, sys, time
        import numpy as np
        sys.path.insert(0, {os.path.dirname(__file__)!r})
        from replay_helpers import SCHEMA, weigh_station
        from monitor.block import Block
        from replay.writer import RecordingWriter
        resource.setrlimit(resource.RLIMIT_FSIZE, (3000, 3000))
        w = RecordingWriter({str(tmp_path / "rec.csv")!r}, SCHEMA, "sim://", 250.0,
                            "declared", None)
        v = weigh_station(2000)
        try:
            for i in range(0, 2000, 100):
                w.write_block(Block(np.arange(i, i + 100) / 250.0, v[i:i + 100]))
                time.sleep(0.12)
        except OSError as exc:
            print("errno", exc.errno)
            w.close()          # after a reported error: closes quietly
            print("closed")
    """)
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                            timeout=60)
    assert result.stdout.split() == ["errno", str(errno.EFBIG), "closed"], result.stderr
    rows = data_lines(tmp_path / "rec.csv")
    assert rows[0] == "t_host,load,current,vib"
    for row in rows[1:-1]:
        assert len(row.split(",")) == 4


def test_standard_csv_module_reads_a_recording(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(200)
    write_recording(path, values, gaps_at=(50,))
    with open(path, newline="") as f:
        rows = list(csv.reader(line for line in f if not line.startswith("#")))
    assert rows[0] == ["t_host", "load", "current", "vib"]
    np.testing.assert_array_equal(np.array(rows[1:], dtype=float)[:, 1:], values)
    assert all(" " not in field for row in rows for field in row)


def test_bad_limits_and_empty_schema_are_refused(tmp_path):
    with pytest.raises(ValueError, match="limit_bytes"):
        RecordingWriter(tmp_path / "a.csv", SCHEMA, "sim://", None, None, None, limit_bytes=0)
    with pytest.raises(ValueError, match="limit_seconds"):
        RecordingWriter(tmp_path / "a.csv", SCHEMA, "sim://", None, None, None,
                        limit_seconds=-1.0)
    with pytest.raises(ValueError, match="no channels"):
        RecordingWriter(tmp_path / "a.csv", Schema(()), "sim://", None, None, None)
    assert not (tmp_path / "a.csv").exists()


def test_t_host_starts_near_zero_for_any_clock(tmp_path):
    path = tmp_path / "rec.csv"
    writer = RecordingWriter(path, SCHEMA, "sim://", 250.0, "declared", None)
    later = time.monotonic() + 5.0
    writer.write_block(Block(np.array([later, later + 0.004]), np.ones((2, 3))))
    writer.close()
    t = [float(r.split(",")[0]) for r in data_lines(path)[1:]]
    assert 4.9 < t[0] < 6.0 and t[1] - t[0] == pytest.approx(0.004, abs=2e-6)
