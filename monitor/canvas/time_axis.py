"""What the time lanes' x axis reads: seconds before now (live) or seconds of a recording.

A live stream has no fixed start worth naming, so its ticks count back from
the newest sample, which reads "now". A recording has one: its ticks read
seconds from its first row, the same count `snapshot --start` and replay's
seek use, so a tick can be typed back as --start. A recording's wall-clock
start (its header's `started:` line) is shown once in a caption rather than
turned into clock-time ticks: seconds stay short, readable numbers at any zoom,
and a plain CSV file from another logger, which has no start time, reads the
same way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

STARTED_MAX_CHARS = 40   # a header line is the user's text: shown cut to this length


@dataclass(frozen=True)
class TimeAxis:
    """The time axis of the lanes.

    origin: host t_host (s) that reads 0 s: the recording's first row (t_first);
    None for a live stream (ticks are seconds before the newest sample, 0 reads "now").
    started: the recording header's wall-clock start as written (e.g.
    "2026-12-01T21:40:12Z"), or None; shown in the caption only.
    """

    origin: float | None = None
    started: str | None = None

    def __post_init__(self) -> None:
        if self.origin is not None and not math.isfinite(self.origin):
            raise ValueError(f"origin = {self.origin!r} must be a finite t_host in seconds "
                             "or None for a live stream")

    @property
    def is_recording(self) -> bool:
        return self.origin is not None

    def caption(self) -> str:
        """One line naming what the ticks count, e.g. "time: s from the recording's start"."""
        if not self.is_recording:
            return "time: s before now"
        text = "time: s from the recording's start"
        started = shown_started(self.started)
        return f"{text} ({started})" if started else text


def shown_started(started: str | None) -> str:
    """The header's start time fit for a label: printable characters, at most STARTED_MAX_CHARS."""
    if not started:
        return ""
    clean = "".join(c for c in started.strip() if c.isprintable())
    if len(clean) > STARTED_MAX_CHARS:
        clean = clean[:STARTED_MAX_CHARS - 1] + "…"
    return clean
