"""Decimation and the plot's history, checked against brute force and a real Ring."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.canvas.decimate import (
    BucketCache,
    Buckets,
    bucketize,
    pack_columns,
    pack_every,
    samples_per_bucket,
)
from monitor.canvas.history import History
from monitor.ring import Ring


def brute_minmax(values: np.ndarray, spb: int, start: int = 0):
    """Bucket extremes by a plain loop (buckets aligned at multiples of spb, counted from start)."""
    mins, maxs = [], []
    for lo in range(0, len(values), spb):
        chunk = values[lo:lo + spb]
        mins.append(chunk.min(axis=0))
        maxs.append(chunk.max(axis=0))
    return np.array(mins), np.array(maxs)


def test_buckets_match_a_loop_with_a_partial_tail():
    values = np.random.default_rng(3).standard_normal((1003, 4)).astype(np.float32)
    t = np.arange(1003) * 0.01
    for spb in (1, 2, 7, 64, 2000):
        buckets = bucketize(t, values, spb, origin=1.0)
        want_min, want_max = brute_minmax(values, spb)
        np.testing.assert_array_equal(buckets.mins, want_min)
        np.testing.assert_array_equal(buckets.maxs, want_max)
        np.testing.assert_array_equal(buckets.lasts, values[[min(i + spb, 1003) - 1
                                                             for i in range(0, 1003, spb)]])
        assert buckets.x[0] == (t[0] + t[min(spb, 1003) - 1]) / 2 - 1.0


def test_bucketize_skips_nan():
    values = np.array([[1.0], [np.nan], [3.0], [np.nan]], np.float32)
    buckets = bucketize(np.arange(4.0), values, 2)
    assert buckets.mins[:, 0].tolist() == [1.0, 3.0] and buckets.maxs[:, 0].tolist() == [1.0, 3.0]


def test_one_bucket_per_pixel_column():
    assert samples_per_bucket(600_000, 1196) == 502
    assert samples_per_bucket(100, 1196) == 1
    assert -(-600_000 // samples_per_bucket(600_000, 1196)) <= 1196


def test_columns_join_the_previous_bucket_and_reach_half_a_line_width_further():
    buckets = Buckets(x=np.array([0.0, 1.0, 2.0]),
                      mins=np.array([[0.0], [5.0], [5.0]], np.float32),
                      maxs=np.array([[1.0], [6.0], [5.0]], np.float32),
                      lasts=np.array([[1.0], [5.5], [5.0]], np.float32))
    verts = pack_columns(buckets, np.array([0.25], np.float32))
    assert verts.dtype == np.float32 and verts.shape == (1, 6, 2)
    # bucket 1 reaches down to bucket 0's last sample (1.0), so the trace is connected;
    # the flat bucket 2 (5..5, with 5.5 before it) still has a height
    assert verts[0].tolist() == [[0, -0.25], [0, 1.25], [1, 0.75], [1, 6.25], [2, 4.75],
                                 [2, 5.75]]
    every = pack_every(np.arange(3.0), np.arange(6.0).reshape(3, 2))
    assert every.shape == (2, 3, 2) and every[1, :, 1].tolist() == [1, 3, 5]


def _filled_history(n: int, channels: int, capacity: int, seed: int = 0) -> History:
    rng = np.random.default_rng(seed)
    history = History(channels, capacity)
    t = np.arange(n) / 100.0
    raw = rng.standard_normal((n, channels))
    history.append(0, t, raw, raw * 0.5)
    return history


@settings(max_examples=40, deadline=None)
@given(steps=st.lists(st.tuples(st.integers(0, 300), st.integers(50, 900)), min_size=1,
                      max_size=12),
       spb=st.integers(1, 40))
def test_cached_buckets_equal_a_fresh_computation(steps, spb):
    """A rolling window updated frame by frame gives exactly the buckets computed afresh."""
    rng = np.random.default_rng(7)
    history = History(2, 1500)
    cache = BucketCache()
    index = 0
    for new, window in steps:
        t = (index + np.arange(new)) / 100.0
        values = rng.standard_normal((new, 2))
        history.append(index, t, values, -values)
        index += new
        if not len(history):
            continue
        i1 = history.end
        i0 = max(history.start, i1 - window)
        got = cache.update(history, i0, i1, spb)
        fresh = BucketCache().update(history, i0, i1, spb)
        for field in ("x", "mins", "maxs", "lasts"):
            np.testing.assert_array_equal(getattr(got, field), getattr(fresh, field))
        mins, maxs = got.mins, got.maxs
        # and right: the extremes are those of the samples from i0's bucket start to i1
        _, vals = history.slice((i0 // spb) * spb, i1)
        assert mins.min(axis=0).tolist() == vals.min(axis=0).tolist()
        assert maxs.max(axis=0).tolist() == vals.max(axis=0).tolist()


def test_history_keeps_the_newest_samples_as_contiguous_views():
    history = _filled_history(0, 1, 100)
    for start in range(0, 1000, 37):
        n = 37
        t = np.arange(start, start + n, dtype=float)
        history.append(start, t, t[:, None], -t[:, None])
    assert history.end == 1036 and history.start == 936
    t, values = history.slice(900, 2000)
    assert t[0] == 936 and t[-1] == 1035 and values[-1].tolist() == [1035, -1035]
    assert history.index_at(1000.2 - history.origin) == 1001


def test_history_pull_copies_only_what_is_new_from_a_real_ring():
    ring = Ring(3, 5000)
    history = History(3, 2000)
    rng = np.random.default_rng(5)
    written = 0
    for size in rng.integers(1, 700, size=40):
        t = (written + np.arange(size)) / 250.0
        raw = rng.standard_normal((size, 3))
        ring.write(t, raw, raw * 2)
        written += size
        if rng.random() < 0.7:
            history.pull(ring)
    history.pull(ring)
    snap = ring.latest(2000)
    t, values = history.slice(history.start, history.end)
    assert history.end == ring.total
    np.testing.assert_array_equal(t, snap.t_host)
    np.testing.assert_array_equal(values[:, :3], snap.raw.astype(np.float32))
    np.testing.assert_array_equal(values[:, 3:], snap.filtered.astype(np.float32))

