"""Live block sources: a byte source with a framer and decoder behind the block-source contract.

FramedSource is what the pipeline reads for serial devices, pyserial URLs, stdin
and sim://: bytes -> frames -> Block, with host timestamps and the sample rate
(declared, from device time, or estimated from arrival).
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.decoding import ArrivalRate, TextDecoder

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
        self._last_read: float | None = None
        self._last_t = -np.inf

    @property
    def schema(self) -> Schema | None:
        return self.decoder.schema

    @property
    def state(self) -> str:
        return self.byte_source.state

    @property
    def dropped(self) -> int:
        return int(getattr(self.decoder, "dropped", 0))

    @property
    def warning(self) -> str | None:
        return getattr(self.decoder, "warning", None)

    def read_block(self, timeout: float) -> Block | None:
        """Wait up to `timeout` s for bytes, take whatever else is already waiting (up to
        BATCH_BYTES, so a backlog is parsed in few large calls) and decode it."""
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
        if self.byte_source.state == "ended" and hasattr(self.framer, "flush"):
            frames += self.framer.flush()
        block = self.decoder.decode(frames, now) if frames else None
        self._collect_bad()
        if block is None or len(block) == 0:
            return None
        n = len(block)
        # Every line is a sample period, a corrupted one too: count frames, not good samples.
        self._arrival.add(now, max(n, len(frames)))
        return Block(self._timestamps(now, n), block.values, block.t_dev, block.counter)

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
        """(Hz, origin): declared, else from device time, else a settled arrival estimate."""
        if self.declared_rate is not None:
            return (float(self.declared_rate), "declared")
        device = self.decoder.device_rate() if hasattr(self.decoder, "device_rate") else None
        if device is not None:
            return (device, "device")
        if self._arrival.settled():
            return (float(self._arrival.estimate()), "estimated")
        return None

    def device_jitter(self) -> float | None:
        """Jitter of the device clock (s) from the decoder's time column, or None."""
        clock = getattr(self.decoder, "clock", None)
        timing = clock.timing() if clock is not None else None
        return timing.jitter_s if timing is not None else None

    def rate_estimate(self) -> float | None:
        """The provisional arrival-rate estimate (Hz) before it settles, for status lines."""
        return self._arrival.estimate()

    def take_gaps(self) -> list[str]:
        gaps = self.byte_source.take_gaps()
        if gaps:
            self._arrival.restart()
        decoder_gaps = getattr(self.decoder, "take_gaps", None)   # dropped frames, clock resets
        return gaps + decoder_gaps() if decoder_gaps else gaps

    def describe(self) -> str:
        return self.byte_source.describe()

    def close(self) -> None:
        self.byte_source.close()


def text_source(byte_source: Any, *, channels: tuple[str, ...] | None = None,
                time_column: str | None = None, counter_column: str | None = None,
                declared_rate: float | None = None, clock: Any = None,
                sequence: Any = None) -> FramedSource:
    """A FramedSource with the text framer and decoder (stdin keeps its first line).

    clock / sequence: monitor.devicetime unwrappers for the time and counter columns.
    """
    from monitor.framing import TextFramer

    framer = TextFramer(drop_partial_first=not getattr(byte_source, "is_stdin", False))
    decoder = TextDecoder(channels, time_column=time_column, counter_column=counter_column,
                          clock=clock, sequence=sequence)
    return FramedSource(byte_source, framer, decoder, declared_rate)
