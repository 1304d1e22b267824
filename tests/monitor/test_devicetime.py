"""Device clock and counter unwrapping across wraps, block splits, drops and resets."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.devicetime import DeviceClock, SequenceCounter


def feed_in_blocks(unwrapper, raw, splits):
    pieces = np.split(np.asarray(raw), splits)
    return np.concatenate([unwrapper.unwrap(p) for p in pieces])


def test_32_bit_microsecond_clock_wrapping_mid_session_is_continuous():
    rate = 250.0
    true_us = 2**32 - 2_000_000 + np.arange(5000) * 4000   # wraps 2 s into the session
    raw = true_us % 2**32
    assert (np.diff(raw) < 0).sum() == 1
    t = feed_in_blocks(DeviceClock("us", 32), raw, [100, 499, 500, 501, 3000])
    np.testing.assert_allclose(t, true_us * 1e-6, rtol=0, atol=1e-9)
    timing = DeviceClock("us", 32)
    timing.unwrap(raw)
    assert timing.timing().rate_hz == pytest.approx(rate)
    assert timing.take_gaps() == []


def test_16_bit_millisecond_clock_wraps_many_times():
    true_ms = np.arange(0, 300_000, 2)   # 5 minutes at 500 Hz: 4 wraps of 65.536 s
    clock = DeviceClock("ms", 16)
    t = feed_in_blocks(clock, true_ms % 65536, list(range(7, true_ms.size, 977)))
    np.testing.assert_allclose(t, true_ms * 1e-3, atol=1e-9)
    assert clock.timing().rate_hz == pytest.approx(500.0)


def test_16_bit_microsecond_clock_wraps_inside_one_block():
    true_us = np.arange(2000) * 1000      # 1 kHz, wraps every 65.5 samples
    t = DeviceClock("us", 16).unwrap(true_us % 65536)
    np.testing.assert_allclose(t, true_us * 1e-6, atol=1e-12)


def test_jitter_is_measured_and_drops_do_not_count_as_jitter():
    rng = np.random.default_rng(3)
    nominal = np.arange(4000) * 4000.0
    jittered = np.round(nominal + rng.normal(0, 20.0, nominal.size))   # 20 us rms
    keep = np.ones(nominal.size, bool)
    keep[1000:1010] = False                                           # a hole
    clock = DeviceClock("us", 32)
    clock.unwrap(jittered[keep])
    timing = clock.timing()
    assert timing.rate_hz == pytest.approx(250.0, rel=1e-3)
    # difference of two independent 20 us errors: sqrt(2) * 20 us (variances of
    # independent errors add, common practice)
    assert timing.jitter_s == pytest.approx(np.sqrt(2) * 20e-6, rel=0.1)


def test_float_seconds_without_wrap_and_a_board_reset():
    clock = DeviceClock("s")
    first = clock.unwrap(np.array([10.0, 10.004, 10.008]))
    after_reset = clock.unwrap(np.array([0.0, 0.004]))
    t = np.concatenate([first, after_reset])
    assert np.all(np.diff(t) > 0)
    np.testing.assert_allclose(np.diff(t), 0.004, atol=1e-9)
    assert clock.resets == 1
    assert "jumped back" in clock.take_gaps()[0]


def test_clock_options_are_validated():
    with pytest.raises(ValueError, match="s, ms, us"):
        DeviceClock("min")
    with pytest.raises(ValueError, match="16 or 32"):
        DeviceClock("us", 24)


@pytest.mark.parametrize("bits", [8, 16, 32])
def test_counter_wraps_and_counts_every_drop(bits):
    modulus = 2**bits
    true = np.arange(modulus - 300, modulus - 300 + 3000)   # crosses a wrap
    lost = np.array([5, 6, 7, 299, 300, 1500, 2999])        # 299/300 straddle the wrap
    keep = np.setdiff1d(np.arange(true.size), lost)
    counter = SequenceCounter(bits)
    got = feed_in_blocks(counter, true[keep] % modulus, [3, 296, 297, 1000])
    np.testing.assert_array_equal(got - got[0], true[keep] - true[keep][0])
    assert counter.dropped == 6    # the last one is unknowable: nothing came after it
    gaps = counter.take_gaps()
    assert len(gaps) == 3          # 299 and 300 are one hole
    assert gaps[0].startswith("3 frames dropped")
    assert gaps[1] == f"2 frames dropped (counter {modulus - 2} -> 1)"
    assert counter.take_gaps() == []


def test_counter_drop_across_block_boundary_and_repeats():
    counter = SequenceCounter(8)
    counter.unwrap(np.array([250, 251, 252]))
    got = counter.unwrap(np.array([2, 2, 3]))   # 253..255, 0, 1 lost; then a repeat
    assert counter.dropped == 5
    assert counter.repeated == 1
    assert got.tolist() == [258, 258, 259]


def test_counter_restart_is_a_gap_not_a_huge_drop():
    # RFC 1982 serial number arithmetic: a step of half the modulus or more is backwards.
    counter = SequenceCounter(16)
    counter.unwrap(np.array([1000, 1001]))
    got = counter.unwrap(np.array([0, 1, 2]))
    assert counter.dropped == 0
    assert counter.restarts == 1
    assert np.all(np.diff(np.concatenate([[1001], got])) == 1)
    assert "board reset" in counter.take_gaps()[0]
    with pytest.raises(ValueError, match="8, 16 or 32"):
        SequenceCounter(12)


@settings(max_examples=100, deadline=None)
@given(bits=st.sampled_from([16, 32]), seed=st.integers(0, 10_000), n=st.integers(2, 400))
def test_any_clock_with_steps_below_half_the_wrap_unwraps_exactly(bits, seed, n):
    rng = np.random.default_rng(seed)
    modulus = 2**bits
    steps = rng.integers(0, modulus // 2, size=n - 1)
    true = int(rng.integers(0, modulus)) + np.concatenate([[0], np.cumsum(steps)])
    splits = np.sort(rng.choice(np.arange(1, n), size=min(5, n - 1), replace=False))
    t = feed_in_blocks(DeviceClock("us", bits), true % modulus, splits)
    np.testing.assert_allclose(t, true * 1e-6, rtol=0, atol=1e-9)


@settings(max_examples=100, deadline=None)
@given(bits=st.sampled_from([8, 16, 32]), seed=st.integers(0, 10_000), n=st.integers(2, 400))
def test_any_loss_pattern_below_half_the_wrap_is_counted_exactly(bits, seed, n):
    rng = np.random.default_rng(seed)
    modulus = 2**bits
    steps = rng.integers(1, min(modulus // 2, 50), size=n - 1)   # 1 = no loss
    true = int(rng.integers(0, modulus)) + np.concatenate([[0], np.cumsum(steps)])
    counter = SequenceCounter(bits)
    got = feed_in_blocks(counter, true % modulus, [n // 3, n // 2])
    np.testing.assert_array_equal(got - got[0], true - true[0])
    assert counter.dropped == int(np.sum(steps - 1))
    assert len(counter.take_gaps()) == int(np.sum(steps > 1))
