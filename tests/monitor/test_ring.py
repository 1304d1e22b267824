"""Ring: capacity, wrap-around, totals, memory formula, no torn copies; stats over snapshots."""

from __future__ import annotations

import threading

import numpy as np
import pytest

from monitor.ring import DEFAULT_RING_CAPACITY, Ring, ring_bytes


def rows(start: int, n: int, channels: int):
    """Rows whose every value encodes its absolute index, to detect torn copies."""
    idx = np.arange(start, start + n, dtype=np.float64)
    raw = idx[:, None] + np.arange(channels) / 10.0
    return idx, raw, -raw


def check_consistent(snap, channels: int) -> None:
    idx = snap.t_host
    assert np.all(np.diff(idx) == 1.0), "rows not consecutive"
    if len(snap):
        assert idx[-1] == snap.total - 1
    np.testing.assert_array_equal(snap.raw, idx[:, None] + np.arange(channels) / 10.0)
    np.testing.assert_array_equal(snap.filtered, -snap.raw)


def test_empty_ring_gives_empty_snapshot():
    ring = Ring(3, 10)
    snap = ring.latest(5)
    assert len(snap) == 0 and snap.raw.shape == (0, 3) and snap.total == 0


def test_latest_before_and_after_wrap():
    ring = Ring(2, 10)
    ring.write(*rows(0, 4, 2))
    snap = ring.latest(100)
    assert snap.t_host.tolist() == [0, 1, 2, 3]
    for start in range(4, 37, 3):
        ring.write(*rows(start, 3, 2))
    assert ring.total == 37
    snap = ring.latest(10)
    assert snap.t_host.tolist() == list(range(27, 37))
    check_consistent(snap, 2)
    assert ring.latest(4).t_host.tolist() == [33, 34, 35, 36]


def test_block_larger_than_capacity_keeps_newest():
    ring = Ring(1, 5)
    ring.write(*rows(0, 12, 1))
    assert ring.total == 12
    assert ring.latest(5).t_host.tolist() == [7, 8, 9, 10, 11]


def test_wrong_shapes_refused():
    ring = Ring(2, 5)
    with pytest.raises(ValueError, match="expected"):
        ring.write(np.zeros(3), np.zeros((3, 1)), np.zeros((3, 1)))
    with pytest.raises(ValueError, match="capacity"):
        Ring(2, 0)
    with pytest.raises(ValueError, match="channels"):
        Ring(0, 5)


def test_memory_formula_and_default_capacity():
    ring = Ring(8, 1000)
    assert ring.nbytes == (2 * 8 + 1) * 8 * 1000
    assert ring_bytes(8, 1000) == ring._t.nbytes + ring._raw.nbytes + ring._filtered.nbytes
    assert DEFAULT_RING_CAPACITY >= 10 * 60 * 1000      # 10 minutes at 1 kHz


def test_no_torn_copies_under_a_concurrent_writer():
    channels, capacity = 4, 997
    ring = Ring(channels, capacity)
    stop = threading.Event()
    errors: list[BaseException] = []

    def writer() -> None:
        start = 0
        sizes = [1, 7, 64, 300, 996, 2000]
        i = 0
        while not stop.is_set():
            n = sizes[i % len(sizes)]
            ring.write(*rows(start, n, channels))
            start += n
            i += 1

    def reader() -> None:
        try:
            for i in range(3000):
                snap = ring.latest([capacity, 10, 500, 1][i % 4])
                check_consistent(snap, channels)
        except BaseException as exc:  # reported in the main thread
            errors.append(exc)

    w = threading.Thread(target=writer)
    readers = [threading.Thread(target=reader) for _ in range(2)]
    w.start()
    for r in readers:
        r.start()
    for r in readers:
        r.join(60)
    stop.set()
    w.join(10)
    assert not errors, errors[0]
    assert ring.total > capacity * 10               # the writer really wrapped many times


# -- monitor.stats over ring snapshots -----------------------------------------

def test_stats_of_a_sine_on_an_offset():
    from monitor.stats import ring_stats

    # RMS of a sine of amplitude A is A / sqrt(2) (any circuits handbook).
    n, rate = 10_000, 1000.0
    t = np.arange(n) / rate
    raw = np.column_stack([12.0 + 0.5 * np.sin(2 * np.pi * 50 * t), np.full(n, 3.0)])
    ring = Ring(2, n)
    ring.write(t, raw, raw * 0.1)
    load, flat = ring_stats(ring, n)
    assert load.mean_raw == pytest.approx(12.0, abs=1e-9)
    assert load.noise_raw == pytest.approx(0.5 / np.sqrt(2), rel=1e-3)   # n/(n-2) dof
    assert load.reduction_db == pytest.approx(20.0, abs=1e-9)           # scaled by 0.1
    assert (flat.noise_raw, flat.reduction_db) == (0.0, 0.0)            # no noise at all
    assert load.samples == n


def test_stats_noise_reduction_of_a_moving_average_on_white_noise():
    from filters.chainfile import parse_chain
    from filters.chainset import ChainSet
    from monitor.stats import ring_stats

    # Averaging N independent samples divides the variance by N (any statistics text):
    # a 16-sample moving average takes 10 log10(16) = 12.04 dB off white noise.
    rng = np.random.default_rng(11)
    raw = rng.normal(5.0, 2.0, size=(320_000, 1))
    chain = ChainSet(parse_chain('[[stage]]\nkind = "moving-average"\nwindow = 16\n'),
                     ["x"], 1000.0)
    filtered = chain.process(raw)
    ring = Ring(1, 300_000)
    ring.write(np.arange(320_000.0), raw, filtered)
    (stats,) = ring_stats(ring, 300_000, chain)
    assert stats.reduction_db == pytest.approx(10 * np.log10(16), abs=0.1)
    assert stats.white_reduction_db == pytest.approx(10 * np.log10(16), abs=1e-9)
    assert stats.mean_filtered == pytest.approx(5.0, abs=0.05)


def test_stats_ignore_missing_samples_and_empty_ring():
    from monitor.stats import noise_reduction_db, ring_stats

    ring = Ring(1, 10)
    assert ring_stats(ring, 10) == []
    raw = np.array([[1.0], [np.nan], [3.0]])
    ring.write(np.arange(3.0), raw, raw)
    (stats,) = ring_stats(ring, 10)
    assert (stats.mean_raw, stats.noise_raw, stats.samples) == (2.0, 1.0, 2)
    assert noise_reduction_db(1.0, 0.0) == np.inf


def test_stats_a_step_in_the_window_is_not_noise():
    from monitor.stats import ring_stats

    # A parcel lands mid-window: 20 kg on a 2 kg tare with 0.1 kg of white noise; the
    # filtered copy carries 0.01 kg. Noise is the median of sub-window AC RMS values, so
    # the step (one sub-window) does not count and the reduction stays near 20 dB.
    rng = np.random.default_rng(1)
    n = 2500
    step = np.where(np.arange(n) >= 1200, 20.0, 0.0)
    raw = (2.0 + step + 0.1 * rng.standard_normal(n))[:, None]
    filtered = (2.0 + step + 0.01 * rng.standard_normal(n))[:, None]
    ring = Ring(1, n)
    ring.write(np.arange(n) / 250.0, raw, filtered)
    (load,) = ring_stats(ring, n)
    assert load.noise_raw == pytest.approx(0.1, rel=0.1)
    # 0.1 kg against 0.01 kg of noise: 20 log10(0.1 / 0.01) = 20 dB (RMS ratio in dB)
    assert load.reduction_db == pytest.approx(20.0, abs=1.5)
    assert load.mean_raw == pytest.approx(float(raw.mean()))
