"""Counters shared by framers, decoders and sources: bad input is counted, never raised."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class BadFrames:
    """Running count of rejected frames and the newest one, for display.

    count:       frames rejected so far (malformed, overlong, non-UTF-8, wrong width, bad CRC).
    last:        the raw bytes of the newest rejected frame (truncated to 200 bytes), or None.
    last_reason: one short phrase saying why it was rejected ("3 fields, expected 4").
    """

    count: int = 0
    last: bytes | None = None
    last_reason: str = ""

    def add(self, frame: bytes, reason: str) -> None:
        self.count += 1
        self.last = bytes(frame[:200])
        self.last_reason = reason
