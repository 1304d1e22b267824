"""Live block sources: a byte source with a framer and decoder behind the block-source contract.

FramedSource is what the pipeline reads for serial devices, pyserial URLs, stdin
and sim://: bytes -> frames -> Block, with host timestamps and the sample rate
(declared by the user or the board, from device time, or estimated from arrival
by monitor.arrival_rate).

Gap order: a gap the byte source reports during a read that also brought data
happened after that data. Such a read returns its block and holds the gap; the
next read_block returns None and releases it, so the pipeline (which writes a
read's gaps before its block) puts the gap line after the rows before the event.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from monitor.arrival_rate import ArrivalRate, SessionRate, warm_up
from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.decoding import TextDecoder

BATCH_BYTES = 65536            # most bytes a live source decodes in one block


class FramedSource:
    """A byte source with a framer and decoder: the block source of live streams.

    byte_source:   monitor.sources.ByteSource (already open).
    framer:        TextFramer or a binary framer (feed, bad).
    decoder:       TextDecoder or a binary decoder (decode, schema, bad).
    declared_rate: the rate the user declared (Hz), or None.
    Block.t_host of a read is spread back from the arrival time at the known rate
    (or evenly since the previous read), and kept increasing.
    """

    def __init__(self, byte_source: Any, framer: Any, decoder: Any,
                 declared_rate: float | None = None) -> None:
        if declared_rate is not None and not declared_rate > 0:
            raise ValueError(f"declared_rate = {declared_rate!r} must be a positive number of Hz")
        self.byte_source = byte_source
        self.framer = framer
        self.decoder = decoder
        self.declared_rate = declared_rate
        self.bad = BadFrames()
        self._seen_bad = [0, 0]
        self._arrival = ArrivalRate()
        if declared_rate is None and getattr(byte_source, "declared_rate", lambda: None)() is None:
            warm_up()                     # the rate may have to be measured: import scipy now
        self._last_read: float | None = None
        self._last_t = -np.inf
        self._held_gaps: list[str] = []      # came after the rows of the last block
        self._ended = False                  # the end of the stream was handled
        self._ready_gaps: list[str] = []

    @property
    def schema(self) -> Schema | None:
        return self.decoder.schema

    @property
    def dropped(self) -> int:
        return int(getattr(self.decoder, "dropped", 0))

    @property
    def warning(self) -> str | None:
        return getattr(self.decoder, "warning", None)

    def read_block(self, timeout: float) -> Block | None:
        """Wait up to `timeout` s for bytes, take whatever else is already waiting (up to
        BATCH_BYTES, so a backlog is parsed in few large calls) and decode it."""
        if self._held_gaps:                   # release the gaps that followed the last block
            self._ready_gaps += self._held_gaps
            self._held_gaps = []
            return None
        data = self.byte_source.read(timeout)
        if data:
            parts, size = [data], len(data)
            while size < BATCH_BYTES:
                more = self.byte_source.read(0.0)
                if not more:
                    break
                parts.append(more)
                size += len(more)
            data = b"".join(parts) if len(parts) > 1 else data
        now = time.monotonic()
        frames = self.framer.feed(data) if data else []
        self._offer_cut(now)
        final = self.byte_source.state == "ended" and not self._ended
        if final:
            self._ended = True
            if getattr(self.byte_source, "is_stdin", False) and hasattr(self.framer, "flush"):
                frames += self.framer.flush()     # a file's last line needs no line end
            elif hasattr(self.framer, "restart"):
                self.framer.restart()             # a link's unfinished line was cut off
        block = self.decoder.decode(frames, now) if frames else None
        if final and hasattr(self.decoder, "flush"):
            block = _joined(block, self.decoder.flush(now))
        self._collect_bad()
        if frames:
            # Every line is a sample period, a corrupted one too: count frames, not samples.
            self._arrival.add(now, max(len(block) if block is not None else 0, len(frames)))
        gaps = self._source_gaps()
        if block is None or len(block) == 0:
            self._ready_gaps += gaps
            return None
        self._held_gaps += gaps
        n = len(block)
        return Block(self._timestamps(now, n), block.values, block.t_dev, block.counter)

    def _offer_cut(self, now: float) -> None:
        """Hand the framer's cut line (the bytes before the first line end after connect)
        to a decoder that judges it; others drop it."""
        take = getattr(self.framer, "take_cut", None)
        cut = take() if take is not None else None
        if cut is not None and hasattr(self.decoder, "offer_cut"):
            self.decoder.offer_cut(cut, now)

    def _source_gaps(self) -> list[str]:
        """The byte source's gaps; after a link dropped the framer starts afresh (after
        this read's bytes, which came before the drop)."""
        gaps = self.byte_source.take_gaps()
        if gaps:
            self._arrival.restart()
            if (not getattr(self.byte_source, "is_stdin", False)
                    and self.byte_source.state != "ended" and hasattr(self.framer, "restart")):
                self.framer.restart()
        return gaps

    def _timestamps(self, now: float, n: int) -> np.ndarray:
        steps = np.arange(n, dtype=np.float64)
        hint = self.rate_hint()
        if hint is not None:
            t = now - (n - 1 - steps) / hint[0]
        else:
            since = self._last_read if self._last_read is not None else now
            t = since + (steps + 1) * (now - since) / n
        if t[0] <= self._last_t:                    # never go back in time
            t = self._last_t + (steps + 1) * max(now - self._last_t, 1e-9) / n
        self._last_read, self._last_t = now, float(t[-1])
        return t

    def _collect_bad(self) -> None:
        for i, counter in enumerate((self.framer.bad, self.decoder.bad)):
            if counter.count != self._seen_bad[i]:
                self.bad.count += counter.count - self._seen_bad[i]
                self.bad.last, self.bad.last_reason = counter.last, counter.last_reason
                self._seen_bad[i] = counter.count

    def rate_hint(self) -> tuple[float, str] | None:
        """(Hz, origin): declared by the user, else from device time (the board's own
        clock), else declared by the board (sim://), else the settled arrival estimate."""
        if self.declared_rate is not None:
            return (float(self.declared_rate), "declared")
        device = self.decoder.device_rate() if hasattr(self.decoder, "device_rate") else None
        if device is not None:
            return (device, "device")
        board = getattr(self.byte_source, "declared_rate", lambda: None)()
        if board is not None:
            return (float(board), "declared")
        if self._arrival.settled():
            return (float(self._arrival.rate()), "estimated")
        return None

    def device_jitter(self) -> float | None:
        """Jitter of the device clock (s) from the decoder's time column, or None."""
        clock = getattr(self.decoder, "clock", None)
        timing = clock.timing() if clock is not None else None
        return timing.jitter_s if timing is not None else None

    def rate_estimate(self) -> float | None:
        """The provisional arrival-rate estimate (Hz) before it settles, for status lines."""
        return self._arrival.estimate()

    def session_rate(self) -> SessionRate | None:
        """The arrival rate measured over the whole stream so far, or None."""
        return self._arrival.session()

    @property
    def state(self) -> str:
        """The byte source's state; "connected" still while a gap waits to be released."""
        state = self.byte_source.state
        return "connected" if state == "ended" and self._held_gaps else state

    def take_gaps(self) -> list[str]:
        """Source gaps (vanish, reconnect, end of input) and decoder gaps, oldest first."""
        gaps, self._ready_gaps = self._ready_gaps, []
        if not self._held_gaps:               # nothing held: anything new is in order
            gaps += self._source_gaps()
        decoder_gaps = getattr(self.decoder, "take_gaps", None)   # dropped frames, clock resets
        return gaps + decoder_gaps() if decoder_gaps else gaps

    def describe(self) -> str:
        return self.byte_source.describe()

    def close(self) -> None:
        self.byte_source.close()


def _joined(first: Block | None, second: Block | None) -> Block | None:
    """Two blocks of one read, in order, as one (either may be None)."""
    if first is None or len(first) == 0:
        return second
    if second is None or len(second) == 0:
        return first

    def cat(a: np.ndarray | None, b: np.ndarray | None) -> np.ndarray | None:
        return None if a is None or b is None else np.concatenate([a, b])

    return Block(np.concatenate([first.t_host, second.t_host]),
                 np.vstack([first.values, second.values]),
                 cat(first.t_dev, second.t_dev), cat(first.counter, second.counter))


def text_source(byte_source: Any, *, channels: tuple[str, ...] | None = None,
                time_column: str | None = None, counter_column: str | None = None,
                declared_rate: float | None = None, clock: Any = None,
                sequence: Any = None) -> FramedSource:
    """A FramedSource with the text framer and decoder (stdin keeps its first line; any
    other source's first bytes before a line end go to the decoder as a cut line).

    clock / sequence: monitor.devicetime unwrappers for the time and counter columns.
    """
    from monitor.framing import TextFramer

    framer = TextFramer(drop_partial_first=not getattr(byte_source, "is_stdin", False))
    decoder = TextDecoder(channels, time_column=time_column, counter_column=counter_column,
                          clock=clock, sequence=sequence)
    return FramedSource(byte_source, framer, decoder, declared_rate)
