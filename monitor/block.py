"""The unit of data that flows from a source through the chain into the ring."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Block:
    """Samples that arrived together.

    t_host:  (n,) float64, seconds on the host's monotonic clock (time.monotonic()).
    values:  (n, channels) float64, one column per channel in schema order.
    t_dev:   (n,) float64 device time in seconds (already unwrapped), or None.
    counter: (n,) int64 device sequence counter (already unwrapped), or None.
    """

    t_host: np.ndarray
    values: np.ndarray
    t_dev: np.ndarray | None = None
    counter: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.values.shape[0])


@dataclass(frozen=True)
class Schema:
    """What the columns of a stream mean.

    channels: names of the value columns, in order (excludes time and counter columns).
    units:    one unit string per channel ("" when unknown).
    time_column / counter_column: names of the device time and counter fields, if any.
    """

    channels: tuple[str, ...]
    units: tuple[str, ...] = ()
    time_column: str | None = None
    counter_column: str | None = None

    def unit(self, index: int) -> str:
        return self.units[index] if index < len(self.units) else ""
