"""A replay that reached its last row: seek plays on, speed changes stick, positions hold.

Real pipeline, real recording files written by RecordingWriter, chain outputs checked
against scipy.signal on the samples the pipeline was given.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
from replay_helpers import SCHEMA, wait_until, weigh_station
from scipy import signal

from filters.chainfile import parse_chain
from monitor.block import Block
from monitor.pipeline import Pause, Pipeline, Resume, Seek, SetSpeed
from replay.player import ReplaySource
from replay.reader import Gap, read_recording
from replay.writer import RecordingWriter

RATE = 250.0
ROWS = 750                       # 3 s at 250 Hz: rows at exactly 0, 0.004, ... 2.996 s
DURATION = (ROWS - 1) / RATE
LOWPASS = """\
[[stage]]
kind = "butterworth"
band = "lowpass"
order = 4
cutoff_hz = 10.0
"""


def exact_recording(path, values: np.ndarray) -> None:
    """Rows at t = k / 250 s from 0, so a seek to 1 s lands on row 250 exactly."""
    writer = RecordingWriter(path, SCHEMA, "/dev/ttyACM0 @ 115200", RATE, "declared", None)
    t = np.arange(len(values)) / RATE
    for start in range(0, len(values), 50):
        writer.write_block(Block(t[start:start + 50], values[start:start + 50]))
    writer.close()


def ended(pipeline: Pipeline) -> bool:
    status = pipeline.status()
    return not status.running and status.source_state == "ended"


@pytest.fixture
def recording(tmp_path):
    values = weigh_station(ROWS, seed=3)
    path = tmp_path / "weigh.csv"
    exact_recording(path, values)
    return path, values


def test_seek_after_the_end_plays_on_through_chain_ring_and_recorder(recording, tmp_path):
    path, values = recording
    out = tmp_path / "again.csv"
    sink = RecordingWriter(out, SCHEMA, "replay", RATE, "declared", None)
    source = ReplaySource(path, speed=None)
    pipeline = Pipeline(source, chain_spec=parse_chain(LOWPASS), ring_capacity=4000, sink=sink)
    pipeline.start()
    try:
        assert wait_until(lambda: ended(pipeline) and pipeline.status().frames == ROWS)
        assert source.position_s == pytest.approx(DURATION, abs=1e-9)    # at the end
        assert pipeline.status().recording == str(out)                  # still recording
        assert pipeline.submit(Seek(1.0))
        assert wait_until(lambda: pipeline.status().frames == 2 * ROWS - 250)
        assert wait_until(lambda: ended(pipeline))                      # ran to the end again
        status = pipeline.status()
        assert status.error is None and status.notice is None
        assert status.last_gap == "replay jumped to 1 s" and status.gaps == 1
        snap = pipeline.ring.latest(4000)
    finally:
        pipeline.stop()
    fed = np.vstack([values, values[250:]])          # the rows at 1 s and after, again
    np.testing.assert_array_equal(snap.raw, fed)
    # emitted time goes on one sample after the last row, at the file's spacing
    np.testing.assert_allclose(np.diff(snap.t_host), 1 / RATE, atol=1e-9)
    # scipy.signal.butter with fs designs the same 4th-order low-pass as tustin-prewarp
    # (scipy docs: digital design through the prewarped bilinear transform); the chain
    # starts in steady state at the first sample, i.e. sosfilt_zi scaled by that sample,
    # and carries its state across the jump
    sos = signal.butter(4, 10.0, fs=RATE, output="sos")
    expected = np.column_stack([
        signal.sosfilt(sos, fed[:, k], zi=signal.sosfilt_zi(sos) * fed[0, k])[0]
        for k in range(fed.shape[1])])
    np.testing.assert_allclose(snap.filtered, expected, rtol=1e-9, atol=1e-9)
    # the recorder kept every row, with the jump between the end and the rows from 1 s
    rec = read_recording(out)
    events = list(rec.events())
    np.testing.assert_array_equal(
        np.vstack([e.values for e in events if isinstance(e, Block)]), fed)
    assert [(e.reason, e.row) for e in events if isinstance(e, Gap)] == [
        ("replay jumped to 1 s", ROWS)]
    assert pipeline.status().recording is None                          # closed by stop()


def test_set_speed_takes_effect_ended_paused_and_playing(recording):
    path, _ = recording
    source = ReplaySource(path, speed=None)
    pipeline = Pipeline(source, ring_capacity=4000)
    pipeline.start()
    try:
        assert wait_until(lambda: ended(pipeline))
        pipeline.submit(SetSpeed(0.5))
        assert wait_until(lambda: source.speed == 0.5)
        assert wait_until(lambda: ended(pipeline))                      # nothing replayed
        assert pipeline.status().frames == ROWS
        assert source.position_s == pytest.approx(DURATION, abs=1e-9)
        pipeline.submit(Pause())
        pipeline.submit(Seek(2.0))
        pipeline.submit(SetSpeed(4.0))
        assert wait_until(lambda: source.speed == 4.0 and pipeline.status().paused
                          and pipeline.status().source_state == "connected")
        assert source.paused and pipeline.status().running
        assert source.position_s == pytest.approx(2.0, abs=1e-9)        # where it goes on
        assert pipeline.status().frames == ROWS                         # paused: no rows yet
        pipeline.submit(SetSpeed(0.5))
        began = time.monotonic()
        pipeline.submit(Resume())
        assert wait_until(lambda: source.position_s >= 2.2)
        # 0.2 s of recording at half speed takes at least 0.4 s (sleeps only make it later)
        assert time.monotonic() - began >= 0.4 - 0.01
        assert source.speed == 0.5
        pipeline.submit(SetSpeed(None))
        assert wait_until(lambda: ended(pipeline))
        assert pipeline.status().frames == ROWS + 250                   # rows 500..749
        assert source.position_s == pytest.approx(DURATION, abs=1e-9)
    finally:
        pipeline.stop()


def test_a_seek_past_the_end_is_one_sentence_and_changes_nothing(recording):
    path, values = recording
    source = ReplaySource(path, speed=None)
    pipeline = Pipeline(source, ring_capacity=4000)
    pipeline.start()
    try:
        assert wait_until(lambda: ended(pipeline))
        pipeline.submit(Seek(99.0))
        assert wait_until(lambda: pipeline.status().notice is not None)
        assert pipeline.status().notice == (
            f"99 s is past the end of {path}, which lasts 2.996 s; give a time from 0 to "
            "2.996 s (playback stays where it was).")
        assert wait_until(lambda: ended(pipeline))
        status = pipeline.status()
        assert status.error is None and status.gaps == 0 and status.frames == ROWS
        assert source.position_s == pytest.approx(DURATION, abs=1e-9)
        pipeline.submit(Seek(DURATION))                 # the last row itself is a time
        assert wait_until(lambda: pipeline.status().frames == ROWS + 1)
        np.testing.assert_array_equal(pipeline.ring.latest(1).raw, values[-1:])
    finally:
        pipeline.stop()

    playing = ReplaySource(path, speed=1.0)
    first = playing.read_block(0.05)
    with pytest.raises(ValueError, match="past the end"):
        playing.seek(3.5)
    with pytest.raises(ValueError, match="cannot seek to nan"):
        playing.seek(float("nan"))
    rest = playing.read_block(0.2)                      # goes on where it was
    np.testing.assert_array_equal(np.vstack([first.values, rest.values]),
                                  values[:len(first) + len(rest)])
    assert playing.take_gaps() == []


def test_a_file_without_time_says_past_the_last_row_then_its_length(tmp_path):
    path = tmp_path / "plain.csv"
    values = weigh_station(100, seed=4)
    path.write_text("load,current,vib\n" + "".join(
        ",".join(repr(v) for v in row) + "\n" for row in values.tolist()))
    source = ReplaySource(path, speed=None, rate_hz=RATE)
    assert source.duration_s is None
    with pytest.raises(ValueError, match=r"^9 s is past the last row of .*plain\.csv; give an"):
        source.seek(9.0)
    while source.state != "ended":
        source.read_block(0.05)
    assert source.position_s == pytest.approx(99 / RATE)
    with pytest.raises(ValueError, match=r"which lasts 0\.396 s; give a time from 0 to 0\.396"):
        source.seek(9.0)
    source.seek(0.2)                                        # row 50 (t = 50 / 250 s)
    assert source.state == "connected"
    np.testing.assert_array_equal(source.read_block(0.05).values, values[50:])


def test_loop_goes_on_after_a_seek(recording):
    path, values = recording
    source = ReplaySource(path, speed=None, loop=True, start_s=2.0)
    got = [source.read_block(0.05).values]                  # rows 500.. (one block)
    source.seek(1.0)
    with pytest.raises(ValueError, match="past the end"):
        source.seek(4.0)
    while source.loops < 2:
        block = source.read_block(0.05)
        if block is not None:
            got.append(block.values)
    # rows from 2 s, then from 1 s, then each loop from start_s = 2 s again
    np.testing.assert_array_equal(
        np.vstack(got), np.vstack([values[500:], values[250:], values[500:], values[500:]]))
    assert source.state == "connected"
    assert source.take_gaps() == ["replay jumped to 1 s",
                                  "replay started again from the beginning (loop)",
                                  "replay started again from the beginning (loop)"]


def test_no_command_is_lost_while_the_end_comes_and_goes(tmp_path):
    path = tmp_path / "short.csv"
    values = weigh_station(10, seed=6)
    exact_recording(path, values)
    source = ReplaySource(path, speed=None)
    pipeline = Pipeline(source, ring_capacity=100_000)
    pipeline.start()
    sent = 0
    stop = threading.Event()

    def busy():                 # a second busy thread, as the UI's, to shake the timing
        while not stop.is_set():
            sum(range(1000))

    shaker = threading.Thread(target=busy, daemon=True)
    shaker.start()
    try:
        for i in range(300):
            if pipeline.submit(Seek(0.0)):
                sent += 1
            if i % 3 == 0:
                time.sleep(0.0005 * (i % 7))       # land on playing, ending and resting
        # every seek was applied (one gap each), and after the last one the recording
        # played whole again; seeks applied together play once, hence no frame count
        assert wait_until(lambda: ended(pipeline) and pipeline.status().gaps == sent)
        status = pipeline.status()
        assert status.error is None and status.frames % 10 == 0 and status.frames >= 20
        np.testing.assert_array_equal(pipeline.ring.latest(10).raw, values)
    finally:
        stop.set()
        shaker.join()
        pipeline.stop()
    assert not pipeline.is_alive() and source.state == "ended"


class SeekAtTheLastRead(ReplaySource):
    """A replay whose read that ends the file also submits a Seek, as a UI key arriving
    between the end and the reader thread's rest would (the narrowest moment)."""

    pipeline: Pipeline | None = None
    sent = False

    def read_block(self, timeout: float) -> Block | None:
        block = super().read_block(timeout)
        if self.state == "ended" and not self.sent:
            self.sent = True
            assert self.pipeline.submit(Seek(0.0))
        return block


def test_a_seek_that_arrives_as_the_file_ends_is_applied(tmp_path):
    path = tmp_path / "short.csv"
    values = weigh_station(10, seed=7)
    exact_recording(path, values)
    source = SeekAtTheLastRead(path, speed=None)
    pipeline = source.pipeline = Pipeline(source, ring_capacity=100)
    pipeline.start()
    try:
        assert wait_until(lambda: ended(pipeline) and pipeline.status().gaps == 1)
        assert pipeline.status().frames == 20
        np.testing.assert_array_equal(pipeline.ring.latest(20).raw, np.vstack([values, values]))
    finally:
        pipeline.stop()
