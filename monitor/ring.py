"""Fixed-capacity history of raw and filtered samples: one writer, any number of readers.

Memory: (2 * channels + 1) * 8 bytes per sample * capacity (raw, filtered and
t_host, all float64). The arrays are allocated zeroed, so pages the writer has
not reached yet cost nothing on Linux.

Consistency without stalling the writer: the writer first publishes how far it
is about to write (`_reserved`), writes, then publishes the new `_total`. A
reader takes `_total`, copies the newest rows, then reads `_reserved`: every
row older than `_reserved - capacity` may have been overwritten while it
copied, so those rows are cut from the front of the copy. What is returned was
complete before the copy began and untouched during it. Neither side waits on
the other; a lock held for the copy would stall the writer for the length of a
large copy (tens of ms for minutes of 8-channel history). Overwriting old
history is what a ring does and is not data loss.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DEFAULT_RING_CAPACITY = 600_000          # 10 minutes at 1 kHz
BYTES_PER_VALUE = 8


def ring_bytes(channels: int, capacity: int) -> int:
    """Memory of a Ring in bytes: (2 * channels + 1) * 8 * capacity."""
    return (2 * channels + 1) * BYTES_PER_VALUE * capacity


@dataclass(frozen=True)
class RingSnapshot:
    """A consistent copy of the newest samples, oldest first.

    t_host:   (m,) float64 seconds (monotonic clock).
    raw:      (m, channels) float64.
    filtered: (m, channels) float64.
    total:    samples ever written when the copy was taken; row i has absolute
              index total - m + i.
    """

    t_host: np.ndarray
    raw: np.ndarray
    filtered: np.ndarray
    total: int

    def __len__(self) -> int:
        return int(self.t_host.shape[0])


class Ring:
    """Raw and filtered history side by side with host time.

    channels: number of value columns (>= 1).
    capacity: samples kept (>= 1); older samples are overwritten.
    """

    def __init__(self, channels: int, capacity: int) -> None:
        if not isinstance(channels, int) or channels < 1:
            raise ValueError(f"channels = {channels!r} must be a whole number >= 1")
        if not isinstance(capacity, int) or capacity < 1:
            raise ValueError(f"capacity = {capacity!r} must be a whole number of samples >= 1")
        self.channels = channels
        self.capacity = capacity
        self._t = np.zeros(capacity, dtype=np.float64)
        self._raw = np.zeros((capacity, channels), dtype=np.float64)
        self._filtered = np.zeros((capacity, channels), dtype=np.float64)
        self._total = 0
        self._reserved = 0

    @property
    def total(self) -> int:
        """Samples ever written."""
        return self._total

    @property
    def nbytes(self) -> int:
        return ring_bytes(self.channels, self.capacity)

    def write(self, t_host: np.ndarray, raw: np.ndarray, filtered: np.ndarray) -> None:
        """Append samples (writer thread only). t_host: (n,), raw and filtered: (n, channels)."""
        n = int(t_host.shape[0])
        if raw.shape != (n, self.channels) or filtered.shape != (n, self.channels):
            raise ValueError(f"ring write of shapes {raw.shape} and {filtered.shape}; "
                             f"expected ({n}, {self.channels})")
        if n == 0:
            return
        start = self._total
        if n > self.capacity:                  # only the newest `capacity` rows can be kept
            skip = n - self.capacity
            t_host, raw, filtered = t_host[skip:], raw[skip:], filtered[skip:]
            start, n = start + skip, self.capacity
        self._reserved = start + n
        first = start % self.capacity
        head = min(n, self.capacity - first)
        for dest, src in ((self._t, t_host), (self._raw, raw), (self._filtered, filtered)):
            dest[first:first + head] = src[:head]
            if head < n:
                dest[:n - head] = src[head:]
        self._total = start + n

    def latest(self, n: int) -> RingSnapshot:
        """A consistent copy of the newest min(n, available) samples (any thread)."""
        end = self._total
        start = max(0, end - min(int(n), self.capacity))
        t, raw, filtered = (self._copy(a, start, end)
                            for a in (self._t, self._raw, self._filtered))
        safe_from = self._reserved - self.capacity   # rows before this may be overwritten
        if safe_from > start:
            cut = min(safe_from, end) - start
            t, raw, filtered = t[cut:], raw[cut:], filtered[cut:]
        return RingSnapshot(t_host=t, raw=raw, filtered=filtered, total=end)

    def _copy(self, array: np.ndarray, start: int, end: int) -> np.ndarray:
        first, last = start % self.capacity, end % self.capacity
        if end - start == 0:
            return array[:0].copy()
        if first < last:
            return array[first:last].copy()
        return np.concatenate((array[first:], array[:last]))
