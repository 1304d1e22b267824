"""Pipeline end to end over real pseudo-terminals opened by pyserial, and on sim://.

A writer thread plays the board on the pty master; the pipeline opens the slave
through monitor.sources.open_byte_source exactly as `tunetrace live` does.
"""

from __future__ import annotations

import os
import re
import time
import tracemalloc

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.block import Block, Schema
from monitor.framed_source import BATCH_BYTES
from monitor.pipeline import (
    RATE_WAIT_NOTE,
    FramedSource,
    Pause,
    Pipeline,
    ReplaceChain,
    ResetChain,
    Resume,
    Seek,
    StartRecording,
    StopRecording,
    text_source,
)
from monitor.ring import ring_bytes
from monitor.sources import READ_CHUNK, open_byte_source


def open_pty_pipeline(path: str, **kwargs) -> Pipeline:
    rate = kwargs.pop("rate_hz", 1000.0)
    counter = kwargs.pop("counter_column", None)
    source = text_source(open_byte_source(path), counter_column=counter, declared_rate=rate)
    return Pipeline(source, rate_hz=rate, **kwargs)


class ListSink:
    """A recorder that keeps what it is given, in the order given (optionally failing or
    slow): `events` is one list of ("block", (block, filtered)) and ("gap", reason), so a
    test sees where each gap sits among the blocks, as a recording file would."""

    def __init__(self, fail_after: int | None = None, delay_s: float = 0.0) -> None:
        self.events: list[tuple[str, object]] = []
        self.closed = False
        self.fail_after = fail_after
        self.delay_s = delay_s
        self.path = "memory"

    @property
    def blocks(self) -> list[tuple[Block, np.ndarray]]:
        return [item for kind, item in list(self.events) if kind == "block"]

    @property
    def gaps(self) -> list[str]:
        return [item for kind, item in list(self.events) if kind == "gap"]

    def write_block(self, block: Block, filtered: np.ndarray) -> None:
        if self.fail_after is not None and len(self.blocks) >= self.fail_after:
            raise OSError(28, "No space left on device")
        time.sleep(self.delay_s)
        self.events.append(("block", (block, filtered)))

    def write_gap(self, reason: str) -> None:
        self.events.append(("gap", reason))

    def rows_and_gaps(self, column: int = 0) -> list[object]:
        """The stream as the sink saw it: each row's value in `column`, and each gap's
        reason where it came."""
        out: list[object] = []
        for kind, item in list(self.events):
            if kind == "block":
                out += item[0].values[:, column].tolist()
            else:
                out.append(item)
        return out

    def close(self) -> None:
        self.closed = True


def values_of(text_lines: list[bytes]) -> np.ndarray:
    """What float() makes of each field: the exact values the ring must hold."""
    return np.array([[float(f) for f in line.split(b",")] for line in text_lines])


def test_every_line_after_the_first_complete_one_arrives_exactly(pty_board, wait_for):
    pipe = open_pty_pipeline(pty_board.path)
    pipe.start()
    rng = np.random.default_rng(7)
    good = [b"%.4f,%d,%.6e" % (a, b, c) for a, b, c in zip(
        rng.normal(12, 0.4, 800), rng.integers(-500, 500, 800), rng.normal(0, 1e-3, 800),
        strict=True)]
    # The board was mid-line when the port opened; then the header and data at 1 kHz.
    script = [b"1.23,4", b"\r\n", b"load[kg],current[A],vib[g]\n"] + [g + b"\n" for g in good]
    pty_board.play(script, rate_hz=1000.0)
    assert wait_for(lambda: pipe.status().frames == len(good), timeout=20)
    pipe.stop()
    snap = pipe.ring.latest(10_000)
    np.testing.assert_array_equal(snap.raw, values_of(good))
    np.testing.assert_array_equal(snap.filtered, snap.raw)          # no chain: identity
    assert np.all(np.diff(snap.t_host) > 0)
    status = pipe.status()
    assert status.bad == 0 and status.dropped == 0 and not status.running
    assert pipe.schema == Schema(("load", "current", "vib"), ("kg", "A", "g"))


NUMERIC = re.compile(rb"[^0-9+\-.eEnaNAiIfF,\s]")
garbage = st.binary(min_size=1, max_size=300).filter(
    lambda g: b"\n" not in g and b"\r" not in g and NUMERIC.search(g) is not None)


@settings(max_examples=12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(junk=st.lists(garbage, min_size=1, max_size=20), seed=st.integers(0, 2**16))
def test_garbage_between_good_lines(junk, seed):
    master, slave = os.openpty()
    try:
        pipe = open_pty_pipeline(os.ttyname(slave))
        pipe.start()
        rng = np.random.default_rng(seed)
        good = [b"%d,%.3f" % (i, v) for i, v in enumerate(rng.normal(size=len(junk) * 3))]
        stream = b"\n"
        for i, line in enumerate(good):
            stream += line + b"\n"
            if i % 3 == 1:
                stream += junk[i // 3] + b"\n"
        os.write(master, stream)
        end = time.monotonic() + 10
        while pipe.status().frames < len(good) and time.monotonic() < end:
            time.sleep(0.01)
        time.sleep(0.05)           # let any wrongly accepted line arrive too
        pipe.stop()
        status = pipe.status()
        assert status.error is None
        np.testing.assert_array_equal(pipe.ring.latest(1000).raw, values_of(good))
        assert status.bad == len(junk)
        assert status.last_bad == junk[-1][:200]
    finally:
        os.close(master)
        os.close(slave)


class CounterSink(ListSink):
    """A slow recorder that checks the counter column instead of keeping blocks."""

    def __init__(self, delay_s: float) -> None:
        super().__init__(delay_s=delay_s)
        self.last = -1
        self.in_order = True

    def write_block(self, block: Block, filtered: np.ndarray) -> None:
        time.sleep(self.delay_s)
        self.in_order &= bool(block.counter[0] > self.last and np.all(np.diff(block.counter) > 0))
        self.last = int(block.counter[-1])


# Most bytes one FramedSource.read_block takes: it reads on while under BATCH_BYTES,
# each byte-source read at most READ_CHUNK.
MAX_READ_BYTES = BATCH_BYTES + READ_CHUNK
# A read's working set in multiples of its bytes: the reads and their joined copy,
# one bytes object per ~12-byte line (about 4x), numpy's parse buffers and the
# decoded block. About 4-8x measured here; 12 leaves room (an estimate, not a spec).
READ_COPIES = 12
STREAM_BUDGETS = 2          # the flood carries at least twice the budget through


def test_flood_memory_bounded_and_drops_counted(pty_board, wait_for):
    capacity = 5000
    # Bounded: the ring plus the working set of one read, however long the stream.
    budget = ring_bytes(1, capacity) + READ_COPIES * MAX_READ_BYTES
    sink = CounterSink(delay_s=0.004)      # a slow disk makes the consumer fall behind
    pipe = open_pty_pipeline(pty_board.path, counter_column="n", ring_capacity=capacity,
                             sink=sink)
    pty_board.write(b"\nn,load[kg]\n")
    pipe.start()
    tracemalloc.start()
    try:
        def line(i: int) -> bytes:
            return b"%d,%d.5\n" % (i, i % 1000)
        pty_board.flood(line, seconds=2.0, min_bytes=STREAM_BUDGETS * budget)
        pty_board.wait()
        last = pty_board.sent + pty_board.skipped
        pty_board.write(line(last))           # every skipped counter now lies before this one
        assert wait_for(lambda: pipe.status().frames == pty_board.sent + 1, timeout=30)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
        pipe.stop()
    status = pipe.status()
    assert pty_board.skipped > 0, "the flood did not outrun the consumer"
    assert status.dropped == pty_board.skipped
    assert status.frames == pty_board.sent + 1
    assert sink.in_order and sink.last == last
    assert pipe.ring.total == status.frames and len(pipe.ring.latest(10**9)) == capacity
    assert status.ring_overflow == status.frames - capacity
    assert pty_board.bytes_sent >= STREAM_BUDGETS * budget, "the flood stopped short"
    assert peak < budget, (peak, budget)


def sim_pipeline(**kwargs) -> Pipeline:
    rate = kwargs.pop("rate", 250.0)
    declared = kwargs.pop("declared", True)
    declare = "" if declared else "&declare=0"          # the sim board declares its rate
    source = text_source(open_byte_source(f"sim://?rate={rate:g}&seed=3{declare}"),
                         declared_rate=rate if declared else None)
    return Pipeline(source, rate_hz=rate if declared else None, **kwargs)


def test_commands_between_blocks(wait_for):
    pipe = sim_pipeline(rate=1000.0)
    pipe.start()
    assert wait_for(lambda: pipe.status().samples_total > 100)
    doubled = ChainSet(parse_chain('[[stage]]\nkind = "gain"\nscale = 2.0\n'),
                       pipe.schema.channels, 1000.0)
    assert pipe.submit(ReplaceChain(doubled))
    assert wait_for(lambda: pipe.chain is doubled)
    total = pipe.status().samples_total
    assert wait_for(lambda: pipe.status().samples_total > total + 50)
    snap = pipe.ring.latest(20)
    np.testing.assert_allclose(snap.filtered, 2.0 * snap.raw)

    pipe.submit(Pause())
    assert wait_for(lambda: pipe.status().paused)
    frozen = pipe.status()
    time.sleep(0.2)
    later = pipe.status()
    assert later.samples_total == frozen.samples_total      # the view holds still...
    assert later.frames > frozen.frames                     # ...while the board is drained
    pipe.submit(Resume())
    assert wait_for(lambda: pipe.status().samples_total > later.samples_total)

    pipe.submit(ResetChain())
    pipe.submit(Seek(3.0))
    assert wait_for(lambda: pipe.status().notice is not None)
    assert "cannot seek" in pipe.status().notice
    t0 = time.monotonic()
    pipe.stop()
    assert time.monotonic() - t0 < 1.5 and not pipe.is_alive()
    assert pipe.status().error is None


def test_recording_sink_gets_blocks_and_disk_error_stops_only_the_recording(wait_for):
    sink = ListSink()
    failing = ListSink(fail_after=3)
    pipe = sim_pipeline(sink=sink)
    pipe.start()
    assert wait_for(lambda: len(sink.blocks) >= 3)
    assert pipe.status().recording == "memory"
    pipe.submit(StopRecording())
    assert wait_for(lambda: sink.closed and pipe.status().recording is None)
    pipe.submit(StartRecording(failing))
    assert wait_for(lambda: pipe.status().recording_error is not None)
    status = pipe.status()
    assert "No space left" in status.recording_error and status.recording is None
    assert failing.closed
    frames = status.frames
    assert wait_for(lambda: pipe.status().frames > frames + 10)    # the stream goes on
    pipe.stop()
    block, filtered = sink.blocks[0]
    assert filtered.shape == block.values.shape


def test_rate_estimated_from_arrival_then_chain_built(wait_for):
    spec = parse_chain('[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 5.0\n')
    pipe = sim_pipeline(declared=False, chain_spec=spec)
    pipe.start()
    assert wait_for(lambda: pipe.status().frames > 20)
    early = pipe.status()
    assert early.chain_note == RATE_WAIT_NOTE and early.rate_origin in (None, "estimated")
    assert wait_for(lambda: pipe.status().chain_note is None, timeout=15)
    status = pipe.status()
    assert status.rate_origin == "estimated"
    # within 0.5 %: the pipeline's own "same rate" (a settled rate further off than that
    # redesigns the chain); the estimator settles when stable to 0.1 %
    assert status.rate_hz == pytest.approx(250.0, rel=5e-3)
    assert pipe.chain.rate_hz == pytest.approx(250.0, rel=5e-3)
    assert pipe.chain.spec is spec
    pipe.stop()


def test_refused_chain_shows_why_and_stream_runs_unfiltered(wait_for):
    spec = parse_chain('[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 200.0\n')
    pipe = sim_pipeline(chain_spec=spec)                  # 200 Hz is above Nyquist at 250 Hz
    pipe.start()
    assert wait_for(lambda: pipe.status().frames > 10)
    status = pipe.status()
    assert "refused" in status.chain_error
    snap = pipe.ring.latest(10)
    np.testing.assert_array_equal(snap.filtered, snap.raw)
    pipe.stop()


class BrokenChain(ChainSet):
    def process(self, values):
        raise FloatingPointError("overflow in stage 1")


def test_chain_exception_falls_back_to_raw(wait_for):
    pipe = sim_pipeline()
    pipe.start()
    assert wait_for(lambda: pipe.schema is not None)
    pipe.submit(ReplaceChain(BrokenChain.identity(pipe.schema.channels, 250.0)))
    assert wait_for(lambda: pipe.status().chain_error is not None)
    assert "overflow in stage 1" in pipe.status().chain_error
    frames = pipe.status().frames
    assert wait_for(lambda: pipe.status().frames > frames)
    pipe.stop()


class ExplodingSource:
    schema = Schema(("a",))
    state = "connected"

    def read_block(self, timeout):
        raise RuntimeError("decoder bug")

    def take_gaps(self):
        return []

    def describe(self):
        return "exploding"

    def rate_hint(self):
        return None

    def close(self):
        self.state = "ended"


def test_unexpected_error_in_the_thread_is_shown_not_lost(wait_for):
    pipe = Pipeline(ExplodingSource())
    pipe.start()
    assert wait_for(lambda: not pipe.status().running)
    assert "RuntimeError: decoder bug" in pipe.status().error
    pipe.stop()


def test_device_vanishes_and_returns_nothing_delivered_lost(tmp_path, wait_for):
    link = str(tmp_path / "board")
    master, slave = os.openpty()
    os.symlink(os.ttyname(slave), link)
    sink = ListSink()
    pipe = open_pty_pipeline(link, sink=sink)
    pipe.start()
    os.write(master, b"\na,b\n" + b"".join(b"%d,1\n" % i for i in range(50)))
    assert wait_for(lambda: pipe.status().frames == 50)
    os.close(master)
    os.close(slave)
    os.unlink(link)
    assert wait_for(lambda: pipe.status().source_state == "reconnecting")
    master, slave = os.openpty()
    os.symlink(os.ttyname(slave), link)
    try:
        assert wait_for(lambda: pipe.status().source_state == "connected")
        time.sleep(0.1)
        os.write(master, b"x\n" + b"".join(b"%d,2\n" % i for i in range(50, 80)))
        assert wait_for(lambda: pipe.status().frames == 80)
        pipe.stop()
    finally:
        os.close(master)
        os.close(slave)
    raw = pipe.ring.latest(1000).raw
    assert raw[:, 0].tolist() == list(range(80))
    assert pipe.status().gaps >= 2 and any("vanished" in g for g in sink.gaps)
    # in the recording the gaps sit where they happened: after row 49, before row 50
    seen = sink.rows_and_gaps()
    assert [x for x in seen if not isinstance(x, str)] == list(range(80))
    cut = seen.index(50)
    assert seen[cut - 1 - len(sink.gaps)] == 49
    assert all(isinstance(x, str) for x in seen[cut - len(sink.gaps):cut])


class ScriptedSource:
    """A block source that plays a script of reads: each step is (gaps, rows), the gaps
    being the ones that came before that read's rows (the block-source contract)."""

    schema = Schema(("load",))

    def __init__(self, steps: list[tuple[list[str], list[float]]]) -> None:
        self.steps = list(steps)
        self.state = "connected"
        self._gaps: list[str] = []

    def read_block(self, timeout: float) -> Block | None:
        if not self.steps:
            self.state = "ended"
            return None
        gaps, rows = self.steps.pop(0)
        self._gaps += gaps
        if not rows:
            return None
        t = np.asarray(rows, dtype=np.float64) / 100.0
        return Block(t_host=t, values=np.asarray(rows, dtype=np.float64).reshape(-1, 1))

    def take_gaps(self) -> list[str]:
        gaps, self._gaps = self._gaps, []
        return gaps

    def describe(self) -> str:
        return "script"

    def rate_hint(self):
        return (100.0, "declared")

    def close(self) -> None:
        self.state = "ended"


def test_a_reads_gaps_reach_the_sink_before_its_block(wait_for):
    # DEVELOPERS.md, gap order: take_gaps() after read_block() are gaps that came before
    # that block, so the recording must get them first. One ordered list tells.
    steps = [([], [0.0, 1.0]), (["reconnected"], [2.0, 3.0]), (["5 frames dropped"], []),
             (["a", "b"], [4.0]), ([], [5.0])]
    sink = ListSink()
    pipe = Pipeline(ScriptedSource(steps), rate_hz=100.0, sink=sink)
    pipe.start()
    assert wait_for(lambda: not pipe.status().running)
    pipe.stop()
    assert pipe.status().error is None
    assert sink.rows_and_gaps() == [0.0, 1.0, "reconnected", 2.0, 3.0, "5 frames dropped",
                                    "a", "b", 4.0, 5.0]
    assert sink.closed


def test_framed_source_drains_what_is_waiting_and_timestamps_follow_the_rate():
    class Bytes:
        state = "connected"

        def __init__(self):
            self.chunks = []
            self.reads = 0

        def read(self, timeout):
            self.reads += 1
            return self.chunks.pop(0) if self.chunks else b""

        def take_gaps(self):
            return []

        def describe(self):
            return "list"

    from monitor.decoding import TextDecoder
    from monitor.framing import TextFramer

    raw = Bytes()
    src = FramedSource(raw, TextFramer(), TextDecoder(), declared_rate=100.0)
    raw.chunks += [b"\n1\n2\n", b"3\n", b"4\n5\n"]
    first = src.read_block(0.0)                  # all three waiting reads in one block
    assert first.values[:, 0].tolist() == [1, 2, 3, 4, 5] and raw.reads == 4
    np.testing.assert_allclose(np.diff(first.t_host), 0.01)
    raw.chunks.append(b"6\n")
    second = src.read_block(0.0)
    assert second.t_host[0] > first.t_host[-1]
    assert src.rate_hint() == (100.0, "declared")


def test_device_time_gives_the_rate_and_counter_gaps_count_as_dropped(wait_for):
    url = "sim://?rate=500&seed=5&clock=1&seq=1&drop=0.02&glitch=0.02"
    source = text_source(open_byte_source(url), time_column="t_s", counter_column="seq")
    pipe = Pipeline(source, chain_spec=parse_chain('[[stage]]\nkind = "median"\nwindow = 3\n'))
    pipe.start()
    assert wait_for(lambda: pipe.status().frames > 400 and pipe.status().dropped > 0
                    and pipe.status().bad > 0)
    status = pipe.status()
    pipe.stop()
    assert (status.rate_hz, status.rate_origin) == (pytest.approx(500.0), "device")
    assert status.chain_note is None and pipe.chain.rate_hz == pytest.approx(500.0)
    assert pipe.schema.time_column == "t_s" and "t_s" not in pipe.schema.channels
    assert status.error is None and status.last_bad_reason


def test_core_bench_quick_reports_every_metric():
    from monitor.bench import core

    metrics = core.run(quick=True)
    for key in ("pipeline_lines_per_s", "reference_lines_per_s", "ratio", "latency_p99_ms",
                "identity_ratio", "board_to_ring_p99_ms", "help_seconds"):
        assert metrics[key] > 0, key
    assert metrics["ratio"] == pytest.approx(
        metrics["pipeline_lines_per_s"] / metrics["reference_lines_per_s"])
    assert metrics["latency_samples"] == 600        # every line the board wrote was measured
    assert all(isinstance(metrics[k], bool) for k in metrics if k.endswith("_ok"))
