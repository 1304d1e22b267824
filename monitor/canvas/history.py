"""The plot's own copy of the newest samples, pulled from the ring a little at a time.

Each frame copies only what arrived since the last one (Ring.latest(new)),
so the plot's cost does not grow with the window and it never holds the
ring's lock for long. Samples are addressed by absolute index (Ring.total
counts every sample ever written); any index range is a contiguous view.
"""

from __future__ import annotations

import numpy as np


class History:
    """Fixed-capacity history of t_host and raw+filtered values.

    columns: 2 * channels (raw columns first, then filtered), stored float32.
    capacity: samples kept (> 0). `start`/`end`: absolute indices held, [start, end).
    """

    def __init__(self, channels: int, capacity: int) -> None:
        if channels < 1:
            raise ValueError(f"channels = {channels!r} must be at least 1")
        if capacity < 1:
            raise ValueError(f"capacity = {capacity!r} must be at least 1 sample")
        self.channels = channels
        self.columns = 2 * channels
        self.capacity = int(capacity)
        # A quarter more than the capacity: appends go at the end; when full, the newest
        # samples move to the front (about 4 rows copied per row appended, amortised),
        # so every slice is a plain view, for 1.25x the memory.
        self._rows = self.capacity + max(self.capacity // 4, 256)
        self._t = np.empty(self._rows)
        self._v = np.empty((self._rows, self.columns), dtype=np.float32)
        self._used = 0
        self.start = 0
        self.end = 0
        self.origin: float | None = None   # t_host of the first sample ever seen

    def __len__(self) -> int:
        return self.end - self.start

    def clear(self, next_index: int = 0) -> None:
        """Forget every sample; the next append is expected at `next_index`."""
        self._used = 0
        self.start = self.end = next_index

    def append(self, first_index: int, t_host: np.ndarray, raw: np.ndarray,
               filtered: np.ndarray) -> None:
        """Add samples with absolute indices first_index.. ; a jump forward drops the past.

        t_host: (n,) s; raw, filtered: (n, channels).
        """
        n = len(t_host)
        if n == 0:
            return
        if first_index != self.end:
            self.clear(first_index)
        if self.origin is None:
            self.origin = float(t_host[0])
        if n >= self.capacity:
            keep = slice(n - self.capacity, n)
            t_host, raw, filtered = t_host[keep], raw[keep], filtered[keep]
            self.clear(first_index + n - self.capacity)
            n = self.capacity
        if self._used + n > self._rows:
            keep = min(self._used, self.capacity - n)
            self._t[:keep] = self._t[self._used - keep:self._used]
            self._v[:keep] = self._v[self._used - keep:self._used]
            self._used = keep
            self.start = max(self.start, self.end - keep)   # samples dropped stay dropped
        lo, hi = self._used, self._used + n
        self._t[lo:hi] = t_host
        self._v[lo:hi, :self.channels] = raw
        self._v[lo:hi, self.channels:] = filtered
        self._used = hi
        self.end += n
        if self.end - self.start > self.capacity:
            self.start = self.end - self.capacity

    def drop_before(self, t_host: float) -> None:
        """Forget the held samples older than `t_host` (s); later appends go on as before."""
        times, _ = self.slice(self.start, self.end)
        if len(times) and times[0] < t_host:
            self.start += int(np.searchsorted(times, t_host))

    def slice(self, i0: int, i1: int) -> tuple[np.ndarray, np.ndarray]:
        """Views of samples [i0, i1) clipped to what is held: t (m,), values (m, columns)."""
        i0, i1 = max(i0, self.start), min(i1, self.end)
        if i1 <= i0:
            return self._t[:0], self._v[:0]
        base = self._used - (self.end - i0)
        return self._t[base:base + i1 - i0], self._v[base:base + i1 - i0]

    def index_at(self, t: float) -> int:
        """Absolute index of the first held sample at or after t_host - origin = t (s)."""
        times, _ = self.slice(self.start, self.end)
        k = int(np.searchsorted(times, t + (self.origin or 0.0)))
        return self.start + min(k, len(times))

    def pull(self, ring) -> int:
        """Copy from `ring` (monitor.ring.Ring) every sample newer than `end`; returns how many."""
        total = int(ring.total)
        if total < self.end:          # a new ring or a restarted stream
            self.clear(0)
            self.origin = None
        wanted = min(total - self.end, self.capacity)
        if wanted <= 0:
            return 0
        snap = ring.latest(wanted)
        first = snap.total - len(snap.t_host)
        if first > self.end and snap.total - self.end <= self.capacity:
            # More arrived between reading `total` and copying: fetch the whole gap once.
            snap = ring.latest(snap.total - self.end)
            first = snap.total - len(snap.t_host)
        self.append(first, snap.t_host, snap.raw, snap.filtered)
        return len(snap.t_host)
