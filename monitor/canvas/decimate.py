"""Min/max decimation per pixel column, and prepacked float32 vertices for line visuals.

A window of n samples drawn into W pixel columns becomes buckets of
spb = ceil(n / W) samples. Each bucket is drawn as one vertical segment from
its minimum to its maximum, widened to take in the previous bucket's last
sample so the trace stays connected: spikes survive, the number of vertices
depends on W, not n, and every pixel is covered about once (a min/max line
strip would cover each column twice, which is what a software rasterizer
pays for).

BucketCache keeps the buckets of the previous frame (edges at multiples of
spb, in absolute sample indices, so they stay put as the window rolls) and
computes only the samples that arrived since: a rolling frame costs
O(new samples + W).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Buckets:
    """Per bucket: x (b,) its mid-time; mins, maxs, lasts (b, c) its extremes and last sample."""

    x: np.ndarray
    mins: np.ndarray
    maxs: np.ndarray
    lasts: np.ndarray

    def __len__(self) -> int:
        return len(self.x)

    def __getitem__(self, index: slice) -> Buckets:
        return Buckets(self.x[index], self.mins[index], self.maxs[index], self.lasts[index])

    @staticmethod
    def empty(columns: int) -> Buckets:
        none = np.empty((0, columns), np.float32)
        return Buckets(np.empty(0), none, none, none)

    @staticmethod
    def join(a: Buckets, b: Buckets) -> Buckets:
        return Buckets(*(np.concatenate([getattr(a, f), getattr(b, f)])
                         for f in ("x", "mins", "maxs", "lasts")))


def samples_per_bucket(samples: float, columns: int) -> int:
    """ceil(samples / columns), at least 1: one bucket per pixel column."""
    return max(1, int(np.ceil(samples / max(1, columns))))


def bucketize(t: np.ndarray, values: np.ndarray, spb: int, origin: float = 0.0) -> Buckets:
    """Buckets of `spb` samples. t: (n,) s, values: (n, c); the last bucket may be partial.

    NaN is skipped (a bucket of NaN only stays NaN, and draws nothing).
    """
    n, c = values.shape
    full = n // spb
    head = values[: full * spb].reshape(full, spb, c)
    mins = np.fmin.reduce(head, axis=1)
    maxs = np.fmax.reduce(head, axis=1)
    lasts = values[spb - 1::spb]
    first_t, last_t = t[::spb], t[spb - 1::spb]
    if full * spb < n:
        tail = values[full * spb:]
        mins = np.vstack([mins, np.fmin.reduce(tail, axis=0)[None, :]])
        maxs = np.vstack([maxs, np.fmax.reduce(tail, axis=0)[None, :]])
        lasts = np.vstack([lasts, values[-1:]])
        last_t = np.append(last_t, t[-1])
    return Buckets(0.5 * (first_t + last_t) - origin, mins, maxs, lasts)


def pack_columns(buckets: Buckets, pad: np.ndarray) -> np.ndarray:
    """One vertical segment per bucket -> (c, 2b, 2) float32 for connect="segments".

    Bucket b spans min..max of its samples and bucket b-1's last sample, plus
    pad (c,) data units at each end: half a pixel covers the end pixel GL's
    half-open line rule leaves out and keeps a flat stretch one pixel tall
    (GL widens steep lines sideways only, so the line width needs no pad).
    """
    lo = buckets.mins.astype(np.float32, copy=True)
    hi = buckets.maxs.astype(np.float32, copy=True)
    if len(buckets) > 1:
        np.fmin(lo[1:], buckets.lasts[:-1], out=lo[1:])
        np.fmax(hi[1:], buckets.lasts[:-1], out=hi[1:])
    pad = np.asarray(pad, np.float32)
    lo -= pad
    hi += pad
    b, c = lo.shape
    out = np.empty((c, 2 * b, 2), dtype=np.float32)
    out[:, 0::2, 0] = buckets.x
    out[:, 1::2, 0] = buckets.x
    out[:, 0::2, 1] = lo.T
    out[:, 1::2, 1] = hi.T
    return out


def pack_every(x: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Every sample as a vertex for connect="strip". x: (n,), values: (n, c) -> (c, n, 2)."""
    n, c = values.shape
    out = np.empty((c, n, 2), dtype=np.float32)
    out[:, :, 0] = x
    out[:, :, 1] = values.T
    return out


class BucketCache:
    """Buckets of a History kept from frame to frame.

    `update(history, i0, i1, spb, origin)` returns the Buckets covering absolute
    sample indices [i0, i1); bucket edges sit at multiples of `spb`. Complete
    buckets computed before are reused; only new or partial ones are computed.
    """

    def __init__(self) -> None:
        self.spb = 0
        self.first = 0          # absolute index of the first cached bucket's first sample
        self.complete_end = 0   # absolute index up to which cached buckets are complete
        self.origin = 0.0
        self.cached = Buckets.empty(0)

    def update(self, history, i0: int, i1: int, spb: int, origin: float = 0.0) -> Buckets:
        """Buckets of `history` samples [i0, i1); x is t_host - origin (s)."""
        i0, i1 = max(i0, history.start), min(i1, history.end)
        if i1 <= i0:
            return Buckets.empty(history.columns)
        start = (i0 // spb) * spb
        head = Buckets.empty(history.columns)
        if start < history.start:
            # The oldest bucket is cut by the history's start: computed afresh every frame.
            start += spb
            t, values = history.slice(i0, min(start, i1))
            head = bucketize(t, values, len(t), origin)
        if start >= i1:
            return head
        return Buckets.join(head, self._body(history, start, i1, spb, origin))

    def _body(self, history, start: int, i1: int, spb: int, origin: float) -> Buckets:
        """Aligned buckets from `start` (a multiple of spb) to i1, reusing cached ones."""
        reuse = (spb == self.spb and origin == self.origin
                 and self.first <= start < self.complete_end <= i1
                 and self.cached.mins.shape[1] == history.columns)
        if reuse:
            kept = self.cached[(start - self.first) // spb:]
            compute_from = self.complete_end
        else:
            kept = Buckets.empty(history.columns)
            compute_from = start
        t, values = history.slice(compute_from, i1)
        result = Buckets.join(kept, bucketize(t, values, spb, origin)) if len(t) else kept
        complete_end = compute_from + (len(t) // spb) * spb
        # Cache complete buckets only; a partial last bucket is recomputed next frame.
        self.spb, self.first, self.origin = spb, start, origin
        self.complete_end = complete_end
        self.cached = result[:(complete_end - start) // spb]
        return result
