"""Plain descriptions of a filter chain, as written in a chain file (see DESIGN.md).

These are data only; `filters.chainfile` parses and writes them, `filters.design`
turns a StageSpec into coefficients, `filters.chainset` runs them on streams.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

ALL_KINDS: tuple[str, ...] = (
    "rc-lowpass", "rc-highpass", "rl-lowpass", "rl-highpass",
    "rlc-bandpass", "rlc-notch", "second-order-lowpass",
    "butterworth", "bessel", "chebyshev1",
    "notch", "moving-average", "ema", "median", "dc-block", "gain",
)

METHODS: tuple[str, ...] = (
    "forward-euler", "backward-euler", "tustin", "tustin-prewarp", "zoh", "matched",
)

START_POLICIES: tuple[str, ...] = ("steady", "zero")


@dataclass(frozen=True)
class StageSpec:
    """One `[[stage]]` table of a chain file.

    kind:     one of ALL_KINDS.
    params:   the kind's own keys exactly as in the file (cutoff_hz, r_ohm, c_farad,
              q, order, band, low_hz, high_hz, ripple_db, freq_hz, window, alpha,
              time_constant_s, scale, offset, method, ...); units are in the key names.
    channels: channel names this stage selects, or None for every channel.
    bypass:   True passes samples through unchanged (the stage keeps its place).
    start:    "steady" (state as if the first input had held forever) or "zero".
    """

    kind: str
    params: dict[str, Any] = field(default_factory=dict)
    channels: tuple[str, ...] | None = None
    bypass: bool = False
    start: str = "steady"

    def selects(self, channel: str) -> bool:
        return self.channels is None or channel in self.channels


@dataclass(frozen=True)
class ChainSpec:
    """A whole chain file: an ordered flat list of stages and an optional rate."""

    stages: tuple[StageSpec, ...] = ()
    rate_hz: float | None = None

    def stages_for(self, channel: str) -> list[tuple[int, StageSpec]]:
        """(file index, stage) pairs that run on `channel`, in file order."""
        return [(i, s) for i, s in enumerate(self.stages) if s.selects(channel)]
