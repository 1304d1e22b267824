"""Min/max decimation per pixel column, and prepacked float32 vertices for line visuals.

A window of n samples drawn into W columns becomes buckets of `spb` samples
(a power of two, so bucket edges stay fixed as the window rolls); each bucket
contributes its minimum and maximum, so spikes survive and the number of
vertices depends on W, not n. BucketCache keeps the buckets of the previous
frame and computes only the samples that arrived since, so a rolling frame
costs O(new samples + W).
"""

from __future__ import annotations

import numpy as np


def samples_per_bucket(samples: int, columns: int) -> int:
    """Largest power of two <= samples / columns (at least 1): between W and 2W buckets."""
    ratio = samples / max(1, columns)
    if ratio < 2:
        return 1
    return 1 << int(np.floor(np.log2(ratio)))


def minmax(values: np.ndarray, spb: int) -> tuple[np.ndarray, np.ndarray]:
    """Bucket extremes. values: (n, c) -> mins, maxs: (ceil(n / spb), c); NaN is skipped."""
    n, c = values.shape
    full = n // spb
    head = values[: full * spb].reshape(full, spb, c)
    mins = np.fmin.reduce(head, axis=1)
    maxs = np.fmax.reduce(head, axis=1)
    if full * spb < n:
        tail = values[full * spb:]
        mins = np.vstack([mins, np.fmin.reduce(tail, axis=0)[None, :]])
        maxs = np.vstack([maxs, np.fmax.reduce(tail, axis=0)[None, :]])
    return mins, maxs


def bucket_centres(t: np.ndarray, spb: int) -> np.ndarray:
    """Mid-time of each bucket of `spb` samples of t (n,) -> (ceil(n / spb),)."""
    first = t[::spb]
    last = t[spb - 1::spb]
    if len(last) < len(first):
        last = np.append(last, t[-1])
    return 0.5 * (first + last)


def pack_minmax(x: np.ndarray, mins: np.ndarray, maxs: np.ndarray) -> np.ndarray:
    """Line-strip vertices per column. x: (b,), mins/maxs: (b, c) -> (c, 2b, 2) float32.

    Each bucket gives two vertices at its x: (x, min) then (x, max).
    """
    b, c = mins.shape
    out = np.empty((c, 2 * b, 2), dtype=np.float32)
    out[:, 0::2, 0] = x
    out[:, 1::2, 0] = x
    out[:, 0::2, 1] = mins.T
    out[:, 1::2, 1] = maxs.T
    return out


def pack_every(x: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Every sample as a vertex (undecimated reference). x: (n,), values: (n, c) -> (c, n, 2)."""
    n, c = values.shape
    out = np.empty((c, n, 2), dtype=np.float32)
    out[:, :, 0] = x
    out[:, :, 1] = values.T
    return out


class BucketCache:
    """Bucket extremes of a history, kept from frame to frame.

    `update(history, i0, i1, spb)` returns (x (b,), mins (b, c), maxs (b, c)) for
    absolute sample indices [i0, i1); buckets start at multiples of `spb`.
    Buckets already computed are reused; only new or partial ones are computed.
    """

    def __init__(self) -> None:
        self.spb = 0
        self.first = 0          # absolute index of the first cached bucket's first sample
        self.complete_end = 0   # absolute index up to which cached buckets are complete
        self.x = np.empty(0)
        self.mins = np.empty((0, 0), dtype=np.float32)
        self.maxs = np.empty((0, 0), dtype=np.float32)

    def update(self, history, i0: int, i1: int, spb: int,
               origin: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Buckets covering [i0, i1) of `history` (a History); x is t_host - origin."""
        i0, i1 = max(i0, history.start), min(i1, history.end)
        columns = history.columns
        no_buckets = np.empty((0, columns), np.float32)
        empty = (np.empty(0), no_buckets, no_buckets)
        if i1 <= i0:
            return empty
        aligned = (i0 // spb) * spb
        head = empty
        start = aligned
        if aligned < history.start:
            # The oldest bucket is cut by the history's start: computed afresh every frame.
            start = aligned + spb
            t, values = history.slice(i0, min(start, i1))
            head = (bucket_centres(t, len(t)) - origin, *minmax(values, len(values)))
        body = self._body(history, start, i1, spb, origin) if start < i1 else empty
        return tuple(np.concatenate([h, b]) for h, b in zip(head, body, strict=True))

    def _body(self, history, start: int, i1: int, spb: int, origin: float):
        """Aligned buckets from `start` (a multiple of spb) to i1, reusing complete cached ones."""
        reuse = (spb == self.spb and self.first <= start < self.complete_end <= i1
                 and self.mins.shape[1] == history.columns)
        if reuse:
            drop = (start - self.first) // spb
            x, mins, maxs = (a[drop:] for a in (self.x, self.mins, self.maxs))
            compute_from = self.complete_end
        else:
            x = np.empty(0)
            mins = maxs = np.empty((0, history.columns), dtype=np.float32)
            compute_from = start
        t, values = history.slice(compute_from, i1)
        if len(t):
            new_min, new_max = minmax(values, spb)
            x = np.concatenate([x, bucket_centres(t, spb) - origin])
            mins = np.concatenate([mins, new_min])
            maxs = np.concatenate([maxs, new_max])
        complete_end = compute_from + (len(t) // spb) * spb
        n_complete = (complete_end - start) // spb
        # Cache complete buckets only; a partial last bucket is recomputed next frame.
        self.spb, self.first, self.complete_end = spb, start, complete_end
        self.x, self.mins, self.maxs = x[:n_complete], mins[:n_complete], maxs[:n_complete]
        return x, mins, maxs
