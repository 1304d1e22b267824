"""Streaming stage runtimes against per-sample loops and scipy.signal."""

from __future__ import annotations

import statistics

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st
from streaming_reference import EVERY_KIND, design, loop_stage, weigh_signal

from filters.spec import StageSpec
from filters.stages import (
    DC_BLOCKING_GAIN,
    BypassStage,
    FirStage,
    GainStage,
    MedianStage,
    SosStage,
    make_stage,
)

DESIGNS = {spec.kind: design(spec) for spec in EVERY_KIND}
IIR_KINDS = [kind for kind, d in DESIGNS.items() if d.sos is not None]
DATA = weigh_signal(400, 3, seed=4)


def run_blocks(stage, x: np.ndarray, sizes: list[int]) -> np.ndarray:
    out, i = [], 0
    for size in sizes:
        if i >= len(x):
            break
        out.append(stage.process(x[i:i + size]))
        i += size
    if i < len(x):
        out.append(stage.process(x[i:]))
    return np.vstack(out)


def test_every_kind_gets_its_runtime():
    expected = {"moving-average": FirStage, "median": MedianStage, "gain": GainStage}
    for kind, d in DESIGNS.items():
        assert type(make_stage(d, 2)) is expected.get(kind, SosStage), kind
        assert type(make_stage(d, 2, bypass=True)) is BypassStage


@settings(max_examples=120, deadline=None)
@given(kind=st.sampled_from(sorted(DESIGNS)), start=st.sampled_from(["steady", "zero"]),
       sizes=st.lists(st.integers(1, 90), min_size=1, max_size=12))
def test_blocks_equal_a_per_sample_loop(kind, start, sizes):
    d = DESIGNS[kind]
    got = run_blocks(make_stage(d, DATA.shape[1], start=start), DATA, sizes)
    for column in range(DATA.shape[1]):
        want = loop_stage(d, DATA[:, column], start)
        np.testing.assert_allclose(got[:, column], want, rtol=0, atol=1e-12 * 30)


@pytest.mark.parametrize("kind", IIR_KINDS)
def test_steady_start_equals_sosfilt_with_sosfilt_zi(kind):
    d = DESIGNS[kind]
    got = run_blocks(make_stage(d, 3), DATA, [7, 1, 50, 300])
    for column in range(3):
        x = DATA[:, column]
        # reference: scipy.signal.sosfilt with zi = scipy.signal.sosfilt_zi(sos) * first sample
        want, _ = scipy.signal.sosfilt(d.sos, x, zi=scipy.signal.sosfilt_zi(d.sos) * x[0])
        np.testing.assert_allclose(got[:, column], want, rtol=0, atol=1e-12)


@pytest.mark.parametrize("kind", IIR_KINDS)
def test_zero_start_equals_plain_sosfilt(kind):
    d = DESIGNS[kind]
    got = run_blocks(make_stage(d, 3, start="zero"), DATA, [1, 2, 3, 100])
    want = scipy.signal.sosfilt(d.sos, DATA, axis=0)  # reference: scipy.signal.sosfilt
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_steady_start_has_no_startup_ramp():
    # a load cell sitting at 12 kg: a low-pass started in steady state outputs 12 kg at once
    x = np.full((50, 1), 12.0)
    y = make_stage(DESIGNS["butterworth"], 1).process(x)
    np.testing.assert_allclose(y, 12.0, rtol=1e-12)


def test_moving_average_equals_convolve_and_lfilter():
    d = design(StageSpec("moving-average", {"window": 9}))
    x = DATA[:, 0]
    zero = run_blocks(make_stage(d, 1, start="zero"), x[:, None], [4, 5, 6, 1000])[:, 0]
    # reference: numpy.convolve of the taps with the signal (zero history)
    np.testing.assert_allclose(zero, np.convolve(x, np.full(9, 1 / 9))[:len(x)], atol=1e-12)
    # reference: scipy.signal.lfilter with b = ones/9, a = 1
    np.testing.assert_allclose(zero, scipy.signal.lfilter(np.full(9, 1 / 9), [1.0], x),
                               atol=1e-12)
    steady = run_blocks(make_stage(d, 1), x[:, None], [3, 1000])[:, 0]
    padded = np.concatenate((np.full(8, x[0]), x))
    np.testing.assert_allclose(steady, np.convolve(padded, np.full(9, 1 / 9), "valid"),
                               atol=1e-12)


def test_moving_average_does_not_drift_over_a_long_stream():
    # a running sum accumulates rounding; the FIR recomputes each output from its window
    d = design(StageSpec("moving-average", {"window": 25}))
    stage = make_stage(d, 1)
    rng = np.random.default_rng(1)
    for _ in range(200):
        x = 1e6 + rng.standard_normal((500, 1))
        y = stage.process(x)
    want = np.convolve(x[:, 0], np.full(25, 1 / 25), "valid")  # reference: numpy.convolve
    np.testing.assert_allclose(y[24:, 0], want, rtol=0, atol=1e-8)


def test_median_equals_statistics_median_of_the_window():
    d = DESIGNS["median"]
    x = DATA[:, 1]
    got = run_blocks(make_stage(d, 1), x[:, None], [1, 2, 3, 4, 500])[:, 0]
    padded = [x[0]] * 4 + list(x)
    # reference: Python's statistics.median of each window of 5
    want = [statistics.median(padded[t:t + 5]) for t in range(len(x))]
    assert np.array_equal(got, want)


def test_median_removes_single_sample_spikes():
    x = np.full((20, 1), 3.0)
    x[10] = 90.0
    assert np.array_equal(make_stage(DESIGNS["median"], 1).process(x), np.full((20, 1), 3.0))


def test_median_refuses_even_window():
    class Even:
        kind, params = "median", {"window": 4}
    with pytest.raises(ValueError, match="window"):
        MedianStage(Even(), 1)


def test_bypass_passes_samples_through_exactly():
    for d in DESIGNS.values():
        stage = make_stage(d, 3, bypass=True)
        y = stage.process(DATA)
        assert np.array_equal(y, DATA) and y is not DATA


def test_gain_is_scale_and_offset():
    y = make_stage(DESIGNS["gain"], 3).process(DATA)
    np.testing.assert_allclose(y, 9.81 * DATA - 0.2, rtol=1e-15)


@pytest.mark.parametrize("kind", sorted(DESIGNS))
def test_reset_restarts_by_the_start_policy(kind):
    d = DESIGNS[kind]
    stage = make_stage(d, 3)
    stage.process(DATA[:100])
    stage.reset()
    fresh = make_stage(d, 3)
    np.testing.assert_allclose(stage.process(DATA[100:]), fresh.process(DATA[100:]), atol=1e-12)


def test_reset_of_some_columns_leaves_the_others():
    d = DESIGNS["butterworth"]
    stage, untouched = make_stage(d, 3), make_stage(d, 3)
    stage.process(DATA[:100])
    untouched.process(DATA[:100])
    stage.reset(np.array([False, True, False]))
    y, want = stage.process(DATA[100:]), untouched.process(DATA[100:])
    np.testing.assert_allclose(y[:, [0, 2]], want[:, [0, 2]], atol=1e-12)
    fresh = make_stage(d, 1).process(DATA[100:, 1:2])
    np.testing.assert_allclose(y[:, 1:2], fresh, atol=1e-12)


def test_bad_start_policy_is_refused():
    with pytest.raises(ValueError, match="start"):
        make_stage(DESIGNS["notch"], 1, start="warm")


def test_dc_gain_classifies_dc_blocking_stages():
    passes = {"rc-lowpass", "rl-lowpass", "second-order-lowpass", "butterworth", "notch",
              "rlc-notch", "ema"}
    blocks = {"rc-highpass", "rl-highpass", "rlc-bandpass", "bessel", "chebyshev1", "dc-block"}
    for kind in passes | blocks:
        gain = make_stage(DESIGNS[kind], 1).dc_gain
        assert (abs(gain) < DC_BLOCKING_GAIN) == (kind in blocks), (kind, gain)


@pytest.mark.parametrize("kind", ["rc-lowpass", "butterworth", "notch", "ema",
                                  "moving-average", "median"])
def test_settle_of_a_dc_passing_stage_holds_the_last_output(kind):
    stage = make_stage(DESIGNS[kind], 2)
    stage.settle(0, 15.0, 12.5)
    stage.settle(1, 0.0, -3.0)
    y = stage.process(np.tile([12.5, -3.0], (40, 1)))
    np.testing.assert_allclose(y, np.tile([12.5, -3.0], (40, 1)), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("kind", ["rc-highpass", "rlc-bandpass", "dc-block", "chebyshev1"])
def test_settle_of_a_dc_blocking_stage_continues_then_decays(kind):
    stage = make_stage(DESIGNS[kind], 1)
    stage.settle(0, 12.0, 0.4)
    y = stage.process(np.full((5000, 1), 12.0))[:, 0]
    assert y[0] == pytest.approx(0.4, abs=1e-12)
    assert abs(y[-1]) < 1e-3


def test_copy_state_continues_exactly():
    d = DESIGNS["butterworth"]
    old = make_stage(d, 2)
    old.process(DATA[:100, :2])
    new = make_stage(d, 2)
    new.copy_state(0, old, 1)
    new.copy_state(1, old, 0)
    np.testing.assert_array_equal(new.process(DATA[100:, 1::-1]),
                                  old.process(DATA[100:, :2])[:, ::-1])
