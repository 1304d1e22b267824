"""Fixed-capacity history of raw and filtered samples: one writer, any number of readers.

Memory: (2 * channels + 1) * 8 bytes per sample * capacity (raw, filtered and
t_host, all float64). The arrays are allocated zeroed, so pages the writer has
not reached yet cost nothing on Linux; a long session reaches them all, so the
pipeline sizes the ring by a byte budget (`capacity_within`), not by the seconds
asked for alone: a wide stream keeps fewer seconds, never more memory.

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

from filters.limits import MAX_CHANNELS as MAX_CHANNELS  # the widest stream (derived there)

DEFAULT_RING_CAPACITY = 600_000          # 10 minutes at 1 kHz
BYTES_PER_VALUE = 8
# Bytes a ring may take. The default history, 600 s at 1 kHz, of 8 channels takes
# 600_000 * (2 * 8 + 1) * 8 = 81.6 MB; 256 MiB keeps those 600 s for up to 27 channels
# (fewer seconds for wider streams) and is a few percent of a practitioner's laptop.
# The readers copy from it (the plot's own history is at most 1.25 x capacity of float32
# raw + filtered, 0.6 x the ring; a trace copies at most the window it shows), so a view
# holds at most about 2.6 times this. `live --ring-memory MB` changes it.
DEFAULT_RING_MEMORY = 256 << 20
MIN_RING_MEMORY = 1 << 20


def ring_bytes(channels: int, capacity: int) -> int:
    """Memory of a Ring in bytes: (2 * channels + 1) * 8 * capacity."""
    return (2 * channels + 1) * BYTES_PER_VALUE * capacity


def capacity_within(channels: int, wanted: int, memory_bytes: int) -> int:
    """Samples of history for `channels`: `wanted`, or fewer so that the ring takes at most
    `memory_bytes` (at least one sample)."""
    return max(1, min(int(wanted), int(memory_bytes) // ring_bytes(channels, 1)))


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
        if not isinstance(channels, int) or not 1 <= channels <= MAX_CHANNELS:
            raise ValueError(f"channels = {channels!r} must be a whole number from 1 to "
                             f"{MAX_CHANNELS}")
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
