"""ReplaySource: pacing, max speed, seek, loop, pause, and feeding the real Pipeline."""

from __future__ import annotations

import time

import numpy as np
import pytest
from replay_helpers import CHAIN_TEXT, RATE_HZ, SCHEMA, wait_until, weigh_station, write_recording

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.pipeline import Pause, Pipeline, Resume, Seek, SetSpeed
from replay.player import ReplaySource
from replay.reader import RecordingError


def drain(source: ReplaySource, limit_s: float = 20.0) -> tuple[np.ndarray, np.ndarray, list]:
    """Read until the source ends: (t_host, values, gaps in order of arrival)."""
    ts, values, gaps = [], [], []
    end = time.monotonic() + limit_s
    while source.state != "ended" and time.monotonic() < end:
        block = source.read_block(0.05)
        gaps += source.take_gaps()
        if block is not None:
            ts.append(block.t_host)
            values.append(block.values)
    return np.concatenate(ts), np.vstack(values), gaps


def test_max_speed_hands_out_every_row_in_order(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(20000)
    write_recording(path, values, gaps_at=(5000,))
    source = ReplaySource(path, speed=None)
    assert source.schema == SCHEMA
    assert source.rate_hint() == (RATE_HZ, "recording")
    t, got, gaps = drain(source)
    np.testing.assert_array_equal(got, values)
    assert gaps == ["reconnected at row 5000"]
    np.testing.assert_allclose(np.diff(t), 1 / RATE_HZ, atol=2e-6)   # the file's 6 decimals
    assert abs(t[0] - time.monotonic()) < 30      # on this host's monotonic clock


def test_real_time_pacing_follows_t_host(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(100))      # 0.396 s at 250 Hz
    source = ReplaySource(path, speed=1.0)
    began = time.monotonic()
    first = source.read_block(0.05)
    assert first is not None and len(first) < 100   # not everything at once
    _, got, _ = drain(source)
    elapsed = time.monotonic() - began
    assert len(first) + len(got) == 100
    assert elapsed >= 0.3                           # sleeping only ever makes it later


def test_speed_factor_and_set_speed(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(500))      # 2 s at 250 Hz
    source = ReplaySource(path, speed=4.0)
    began = time.monotonic()
    drain(source)
    assert time.monotonic() - began >= 0.4          # 2 s at 4x: at least 0.5 s, give slack
    source = ReplaySource(path, speed=0.01)
    source.read_block(0.01)
    source.set_speed(None)
    _, got, _ = drain(source, limit_s=5.0)
    assert source.state == "ended"
    with pytest.raises(ValueError, match="speed"):
        source.set_speed(0.0)
    with pytest.raises(ValueError, match="speed"):
        ReplaySource(path, speed=float("nan"))


def test_start_seek_and_position(tmp_path):
    # positions fall between rows (t_host has 6 decimals), so each picks one row exactly
    path = tmp_path / "rec.csv"
    values = weigh_station(1000)
    write_recording(path, values)
    source = ReplaySource(path, speed=None, start_s=1.998)
    block = source.read_block(0.05)
    np.testing.assert_array_equal(block.values[0], values[500])
    source.seek(0.998)
    block = source.read_block(0.05)
    np.testing.assert_array_equal(block.values[0], values[250])
    assert source.take_gaps() == ["replay jumped to 0.998 s"]
    assert block.t_host[0] > 0      # emitted time keeps increasing across the backward seek
    source.seek(3.898)
    _, rest, _ = drain(source)
    np.testing.assert_array_equal(rest, values[975:])
    assert source.position_s == pytest.approx(999 / RATE_HZ, abs=1e-5)


def test_loop_restarts_and_time_keeps_increasing(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(300)
    write_recording(path, values)
    source = ReplaySource(path, speed=None, loop=True, start_s=0.398)
    ts, got, gaps = [], [], []
    while source.loops < 3:
        block = source.read_block(0.05)
        gaps += source.take_gaps()
        if block is not None:
            ts.append(block.t_host)
            got.append(block.values)
    t = np.concatenate(ts)
    assert np.all(np.diff(t) > 0)
    np.testing.assert_array_equal(np.vstack(got)[:200], values[100:])
    np.testing.assert_array_equal(np.vstack(got)[200:400], values[100:])
    assert gaps.count("replay started again from the beginning (loop)") == 3
    assert source.state == "connected"


def test_pause_holds_rows_back(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(100))
    source = ReplaySource(path, speed=None)
    source.pause()
    assert source.read_block(0.01) is None and source.paused
    source.resume()
    assert len(source.read_block(0.01)) == 100


def test_duration_and_a_start_past_the_end(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(1000), gaps_at=(999,))     # a gap line near the end
    source = ReplaySource(path, speed=None)
    assert source.duration_s == pytest.approx(999 / RATE_HZ, abs=2e-6)
    with pytest.raises(RecordingError, match=r"--start 5 s is past the end of .* 3.996 s"):
        ReplaySource(path, start_s=5.0)
    plain = tmp_path / "plain.csv"
    plain.write_text("load\n1\n2\n")
    assert ReplaySource(plain, rate_hz=10.0).duration_s is None


def test_bad_files_and_arguments(tmp_path):
    with pytest.raises(RecordingError, match="does not exist"):
        ReplaySource(tmp_path / "nope.csv")
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(10))
    with pytest.raises(ValueError, match="start_s"):
        ReplaySource(path, start_s=-1.0)


def test_pipeline_replays_into_the_ring_with_the_chain(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(5000)
    write_recording(path, values, gaps_at=(2500,))
    spec = parse_chain(CHAIN_TEXT)
    pipeline = Pipeline(ReplaySource(path, speed=None), chain_spec=spec, ring_capacity=10000)
    pipeline.start()
    assert wait_until(lambda: not pipeline.status().running, timeout=30)
    status = pipeline.status()
    assert status.error is None and status.chain_error is None
    assert (status.frames, status.gaps, status.bad) == (5000, 1, 0)
    assert (status.rate_hz, status.rate_origin) == (RATE_HZ, "recording")
    snap = pipeline.ring.latest(5000)
    np.testing.assert_array_equal(snap.raw, values)
    # the same ChainSet over the original samples in one block: equal to float rounding
    expected = ChainSet(spec, SCHEMA.channels, RATE_HZ).process(values)
    np.testing.assert_allclose(snap.filtered, expected, rtol=1e-12, atol=1e-12)


def test_pipeline_commands_pause_seek_and_speed(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(2500)                    # 10 s at 250 Hz
    write_recording(path, values)
    pipeline = Pipeline(ReplaySource(path, speed=1.0), ring_capacity=10000)
    pipeline.start()
    try:
        assert wait_until(lambda: pipeline.status().frames > 0)
        pipeline.submit(Pause())
        assert wait_until(lambda: pipeline.status().paused)
        time.sleep(0.15)
        held = pipeline.status().frames
        time.sleep(0.3)
        assert pipeline.status().frames == held
        pipeline.submit(Seek(8.998))   # between rows 2249 and 2250
        pipeline.submit(SetSpeed(None))
        pipeline.submit(Resume())
        assert wait_until(lambda: not pipeline.status().running, timeout=20)
        snap = pipeline.ring.latest(10000)
        np.testing.assert_array_equal(snap.raw[-250:], values[-250:])
        assert pipeline.status().frames == held + 250
    finally:
        pipeline.stop()


def test_a_failing_recording_stops_with_a_visible_error_and_the_stream_goes_on(tmp_path):
    from monitor.commands.common import start_recording

    path = tmp_path / "rec.csv"
    values = weigh_station(3000)
    write_recording(path, values)
    pipeline = Pipeline(ReplaySource(path, speed=None), ring_capacity=5000)
    # /dev/full refuses every write with ENOSPC (Linux, man 4 full)
    pipeline.submit(start_recording(pipeline, "/dev/full", force=True))
    pipeline.start()
    assert wait_until(lambda: not pipeline.status().running, timeout=20)
    status = pipeline.status()
    assert "No space left on device" in status.recording_error
    assert status.recording is None
    assert status.frames == 3000
    np.testing.assert_array_equal(pipeline.ring.latest(5000).raw, values)
