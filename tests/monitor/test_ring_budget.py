"""The ring's byte budget: a wide stream keeps fewer samples of history, never more memory.

The ring is sized when the first block shows the stream's width: the samples asked for
(--ring-seconds x rate), or fewer so that (2 * channels + 1) * 8 bytes per sample fit
the ring memory (--ring-memory); a stream wider than MAX_CHANNELS gets no ring (the
view is refused with a notice) while the chain and the recording still get every block.
"""

from __future__ import annotations

import contextlib
import io

import numpy as np
import pytest

from monitor.block import Block, Schema
from monitor.framing_binary import CobsFramer, SlipFramer, cobs_encode, make_framer, slip_encode
from monitor.pipeline import Pipeline
from monitor.ring import (
    DEFAULT_RING_MEMORY,
    MAX_CHANNELS,
    Ring,
    capacity_within,
    ring_bytes,
)


class WideSource:
    """A block source of `blocks` blocks of `rows` rows, `width` channels wide."""

    def __init__(self, width: int, blocks: int = 3, rows: int = 5) -> None:
        self.schema = Schema(tuple(f"c{i}" for i in range(width)))
        self.state = "connected"
        self.width, self.blocks, self.rows, self.sent = width, blocks, rows, 0

    def read_block(self, timeout: float) -> Block | None:
        if self.sent == self.blocks:
            self.state = "ended"
            return None
        first = self.sent * self.rows
        self.sent += 1
        values = np.arange(first, first + self.rows, dtype=np.float64)[:, None] + np.zeros(
            self.width)
        return Block(t_host=np.arange(first, first + self.rows) / 100.0, values=values)

    def take_gaps(self) -> list[str]:
        return []

    def describe(self) -> str:
        return "wide"

    def rate_hint(self):
        return (100.0, "declared")

    def close(self) -> None:
        self.state = "ended"


class KeepingSink:
    def __init__(self) -> None:
        self.rows: list[float] = []
        self.widths: set[int] = set()

    def write_block(self, block: Block, filtered: np.ndarray) -> None:
        self.rows += block.values[:, 0].tolist()
        self.widths.add(block.values.shape[1])

    def write_gap(self, reason: str) -> None:
        pass

    def close(self) -> None:
        pass


def _run(pipe: Pipeline, wait_for) -> None:
    pipe.start()
    assert wait_for(lambda: not pipe.status().running)
    pipe.stop()
    assert pipe.status().error is None


def test_capacity_within_the_budget_is_the_memory_formula():
    # (2 * channels + 1) * 8 bytes per sample: raw, filtered and t_host as float64
    assert ring_bytes(2000, 1) == 32_008
    assert capacity_within(2000, 600_000, DEFAULT_RING_MEMORY) == DEFAULT_RING_MEMORY // 32_008
    assert capacity_within(8, 600_000, DEFAULT_RING_MEMORY) == 600_000     # 81.6 MB fits
    assert capacity_within(MAX_CHANNELS, 600_000, 1) == 1                 # at least one
    assert ring_bytes(MAX_CHANNELS, capacity_within(MAX_CHANNELS, 10**9,
                                                    DEFAULT_RING_MEMORY)) <= DEFAULT_RING_MEMORY
    with pytest.raises(ValueError, match="channels"):
        Ring(MAX_CHANNELS + 1, 10)


def test_a_wide_stream_keeps_fewer_samples_and_says_so(wait_for):
    sink = KeepingSink()
    pipe = Pipeline(WideSource(300), rate_hz=100.0, ring_capacity=60_000, sink=sink,
                    ring_memory=1 << 20)
    _run(pipe, wait_for)
    expected = (1 << 20) // ring_bytes(300, 1)          # 218 samples
    assert pipe.ring.capacity == expected and pipe.ring.nbytes <= 1 << 20
    notice = pipe.status().notice
    assert f"300 channels keep {expected / 100.0:.3g} s ({expected} samples)" in notice
    assert "fewer than the 6e+04 samples asked" in notice and "--ring-memory" in notice
    assert sink.rows == list(np.arange(15.0))


def test_a_narrow_stream_gets_the_history_it_asked_for(wait_for):
    pipe = Pipeline(WideSource(3), rate_hz=100.0, ring_capacity=60_000)
    _run(pipe, wait_for)
    assert pipe.ring.capacity == 60_000 and pipe.status().notice is None


def test_a_stream_wider_than_the_maximum_gets_no_view_but_loses_no_row(wait_for):
    sink = KeepingSink()
    pipe = Pipeline(WideSource(MAX_CHANNELS + 1), rate_hz=100.0, sink=sink)
    _run(pipe, wait_for)
    assert pipe.ring is None
    assert f"more than the {MAX_CHANNELS} a view can hold" in pipe.status().notice
    assert sink.rows == list(np.arange(15.0)) and sink.widths == {MAX_CHANNELS + 1}
    assert pipe.status().frames == 15


def test_ring_memory_option_is_checked_before_streaming():
    from monitor.cli import main

    for value, fragment in (("0.5", "below the least 1 MiB"), ("1e12", "more than this machine")):
        err = io.StringIO()
        with contextlib.redirect_stderr(err):
            code = main(["live", "-", "--plain", "--ring-memory", value])
        assert code == 2 and fragment in err.getvalue(), err.getvalue()


@pytest.mark.parametrize(("framing", "encode", "framer_type"), [
    ("cobs", cobs_encode, CobsFramer), ("slip", slip_encode, SlipFramer)])
def test_a_wide_binary_frame_fits_its_framer(framing, encode, framer_type):
    # 2000 float32 channels: 8000 bytes, longer than the framers' default 4096; stuffed
    # worst case COBS n + n/254 + 1 (Cheshire and Baker 1999), SLIP 2 n (RFC 1055)
    frame = bytes(range(256)) * 31 + b"\xc0\xdb" * 32
    framer = make_framer(framing, frame_length=len(frame))
    assert isinstance(framer, framer_type)
    assert framer.feed(encode(frame) + encode(frame)) == [frame, frame]
    assert framer.bad.count == 0
