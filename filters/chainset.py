"""Run a ChainSpec on a multi-channel stream, block by block, with state carried.

CONTRACT (used by monitor and replay): the constructor designs and validates
everything and raises ValueError with a one-sentence reason, so a refused chain
never touches a running one. `process` is called only by the one thread that
owns the chain.

PLACEHOLDER: this identity-only version exists so that the streaming core can
be built against the interface; the filters work replaces the body.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from filters.spec import ChainSpec


class ChainSet:
    """Every channel's list of stages, built from one flat ChainSpec.

    spec:     the chain file contents.
    channels: channel names in column order of the values passed to `process`.
    rate_hz:  sample rate the stages are designed for (Hz, > 0).
    """

    def __init__(self, spec: ChainSpec, channels: Sequence[str], rate_hz: float) -> None:
        if not rate_hz > 0:
            raise ValueError(f"rate_hz = {rate_hz!r} must be a positive number of Hz")
        self.spec = spec
        self.channels = tuple(channels)
        self.rate_hz = float(rate_hz)

    @classmethod
    def identity(cls, channels: Sequence[str], rate_hz: float = 1.0) -> ChainSet:
        """A chain with no stages: filtered equals raw."""
        return cls(ChainSpec(), channels, rate_hz)

    def process(self, values: np.ndarray) -> np.ndarray:
        """Filter one block. values: (n, channels) float64 -> (n, channels) float64."""
        return np.array(values, dtype=np.float64, copy=True)

    def reset(self) -> None:
        """Forget all state; the next sample starts each stage by its start policy."""

    def continue_from(self, old: ChainSet) -> None:
        """Take over from `old` without an output jump (steady state at its last output)."""
