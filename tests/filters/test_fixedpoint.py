"""Fixed-point export model: quantization, the exact integer arithmetic, the report."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import signal

from filters.design import design_stage
from filters.fixedpoint import (
    Q15,
    Q31,
    FixedChainModel,
    fix_stage,
    from_fixed,
    plan_stage,
    q_format,
    quantize_group,
    quantize_sos,
    to_fixed,
)
from filters.fixedreport import quantization_report, report_for_plans
from filters.spec import StageSpec


def design(kind: str, rate: float = 250.0, **params):
    return design_stage(StageSpec(kind, params), rate)


def model(d, fmt, start="steady", full_scale=1.0) -> FixedChainModel:
    return FixedChainModel([fix_stage(plan_stage(d, start), fmt, full_scale)])


def steady_sosfilt(sos: np.ndarray, x: np.ndarray) -> np.ndarray:
    """scipy.signal.sosfilt started in steady state at x[0] (sosfilt_zi)."""
    return signal.sosfilt(sos, x, zi=signal.sosfilt_zi(sos) * x[0])[0]


def test_rc_backward_euler_worked_check_float_and_q15():
    # Common practice: backward Euler of the RC low-pass, a = T / (RC + T); 5 Hz at 100 Hz
    # gives RC = 1/(2 pi 5) = 0.031831 s, a = 0.01 / 0.041831 = 0.2391, 1 - a = 0.7609.
    d = design("rc-lowpass", 100.0, cutoff_hz=5.0, method="backward-euler")
    b0, b1, b2, a0, a1, a2 = d.sos[0]
    assert round(b0, 4) == 0.2391 and round(-a1, 4) == 0.7609
    assert b1 == pytest.approx(0.0, abs=1e-12) and b2 == pytest.approx(0.0, abs=1e-12)
    (sec,) = quantize_sos(d.sos, Q15)
    # round(0.2390572 * 32768) = round(7833.43) = 7833; round(-0.7609428 * 32768) = -24935
    assert sec.shift == 0
    assert sec.b == (7833, 0, 0) and sec.a == (-24935, 0)
    # Q15 recurrence written out: y = (2^14 + 7833 x + 24935 y1) >> 15, from rest
    x = np.full(40, 16384)
    y, expect = model(d, Q15, start="zero").process(x), []
    y1 = 0
    for v in x:
        y1 = (16384 + 7833 * int(v) + 24935 * y1) >> 15
        expect.append(y1)
    assert y.tolist() == expect
    # float: the step response of the backward-Euler RC is 1 - (1 - a)^(n + 1)
    n = np.arange(40)
    assert np.allclose(signal.sosfilt(d.sos, np.ones(40)), 1 - (1 - b0) ** (n + 1))
    assert np.max(np.abs(y / 32768 - 0.5 * (1 - (1 - b0) ** (n + 1)))) < 3 / 32768


def test_coefficients_of_magnitude_one_or_more_take_a_shift():
    assert quantize_group([0.5, -0.25], Q15) == ((16384, -8192), 0)
    assert quantize_group([-1.0], Q15) == ((-32768,), 0)   # -1.0 fits exactly
    assert quantize_group([1.0], Q15) == ((16384,), 1)     # +1.0 does not
    assert quantize_group([-1.8, 0.81], Q15) == ((-29491, 13271), 1)
    assert quantize_group([3.5], Q31) == ((1879048192,), 2)
    with pytest.raises(ValueError, match="does not fit Q15"):
        quantize_group([40000.0], Q15)
    with pytest.raises(ValueError, match="q15 or q31"):
        q_format("q7")


def test_accumulator_wraps_like_unsigned_c_and_results_saturate():
    assert Q15.wrap(2**31) == -(2**31) and Q15.wrap(2**32 + 5) == 5
    assert Q31.wrap(-(2**63) - 1) == 2**63 - 1
    assert Q15.saturate(40000) == 32767 and Q15.saturate(-40000) == -32768
    # a section whose partial sums exceed 32 bits but whose result fits: wrapping is exact
    d = design("butterworth", 250.0, order=2, cutoff_hz=100.0)
    m = model(d, Q15, start="zero")
    rng = np.random.default_rng(3)
    x = rng.integers(-12000, 12000, 3000)
    y = m.process(x)
    sections = quantize_sos(d.sos, Q15)
    x1 = x2 = y1 = y2 = 0
    for n, v in enumerate(x.tolist()):   # unbounded Python ints: no wrap at all
        (s,) = sections
        r = 15 - s.shift
        acc = (1 << (r - 1)) + s.b[0] * v + s.b[1] * x1 + s.b[2] * x2 - s.a[0] * y1 - s.a[1] * y2
        out = Q15.saturate(acc >> r)
        x2, x1, y2, y1 = x1, v, y1, out
        assert y[n] == out


def test_full_scale_square_wave_saturates_without_wrapping():
    d = design("butterworth", 250.0, order=4, cutoff_hz=20.0)   # overshoots a step
    x = np.where((np.arange(2000) // 100) % 2 == 0, 32767, -32768)
    y = model(d, Q15).process(x)
    assert y.max() == 32767 and y.min() == -32768
    # long after each edge the output has the input's sign: no overflow flipping it
    settled = (np.arange(2000) % 100) > 50
    assert np.all(np.sign(y[settled]) == np.sign(x[settled]))
    g = design("gain", scale=2.0, offset=0.0)
    assert model(g, Q15).process(np.array([30000, -30000, 1000])).tolist() == [32767, -32768, 2000]


@pytest.mark.parametrize("fmt", [Q15, Q31])
@pytest.mark.parametrize("kind,params", [
    ("butterworth", {"order": 4, "cutoff_hz": 20.0}),
    ("notch", {"freq_hz": 50.0, "q": 5.0}),
    ("ema", {"alpha": 0.1}),
    ("dc-block", {"cutoff_hz": 2.0}),
    ("chebyshev1", {"order": 3, "cutoff_hz": 30.0, "ripple_db": 1.0}),
])
def test_integer_model_stays_within_the_reported_bound_of_scipy(fmt, kind, params):
    d = design(kind, 250.0, **params)
    rng = np.random.default_rng(7)
    n = 4000
    xs = 0.3 + 0.2 * np.sin(np.arange(n) * 0.07) + 0.1 * rng.standard_normal(n)
    y = from_fixed(model(d, fmt).process(to_fixed(xs, 1.0, fmt)), 1.0, fmt)
    ref = steady_sosfilt(d.sos, xs)   # scipy.signal: the float64 reference
    bound = quantization_report([d], 250.0, "c-" + fmt.name).channels[0].error_bound
    err = np.max(np.abs(y - ref))
    assert err <= bound
    assert bound < (0.01 if fmt is Q15 else 1e-6)   # and the bound says something


def test_moving_average_is_exact_and_median_matches_numpy():
    x = np.random.default_rng(1).integers(-32768, 32768, 500)
    m = model(design("moving-average", window=6), Q15).process(x)
    padded = np.concatenate([np.full(5, x[0]), x])   # steady start: history full of x[0]
    sums = np.convolve(padded, np.ones(6, dtype=np.int64), mode="valid")
    assert m.tolist() == (np.sign(sums) * ((np.abs(sums) + 3) // 6)).tolist()
    med = model(design("median", window=5), Q31, start="zero").process(x)
    padded = np.concatenate([np.zeros(4, dtype=np.int64), x])   # zero start
    windows = np.lib.stride_tricks.sliding_window_view(padded, 5)
    assert med.tolist() == np.median(windows, axis=1).astype(np.int64).tolist()


def test_steady_start_matches_the_python_chain_and_holds():
    from filters.chainset import ChainSet
    from filters.spec import ChainSpec

    spec = ChainSpec((StageSpec("butterworth", {"order": 4, "cutoff_hz": 5.0}),
                      StageSpec("moving-average", {"window": 4})))
    x0 = 0.4
    python = ChainSet(spec, ["load"], 250.0).process(np.full((300, 1), x0))[:, 0]
    stages = [fix_stage(plan_stage(d), Q31, 1.0) for d in
              (design_stage(s, 250.0) for s in spec.stages)]
    y = from_fixed(FixedChainModel(stages).process(np.full(300, to_fixed(x0, 1.0, Q31))), 1, Q31)
    assert np.allclose(python, x0, atol=1e-12)           # the Python start: no transient
    assert np.max(np.abs(y - python)) < 1e-7            # the integer start: the same


def test_reset_restarts_by_the_start_policy():
    m = model(design("ema", alpha=0.25), Q15)
    first = m.process(np.full(5, 8000))
    m.process(np.full(50, -9000))
    m.reset()
    assert m.process(np.full(5, 8000)).tolist() == first.tolist()
    assert first.tolist() == [8000] * 5


def test_report_flags_q15_too_narrow_and_suggests_q31():
    d = design("butterworth", 250.0, order=4, cutoff_hz=1.0)
    q15 = quantization_report([d], 250.0, "c-q15")
    assert not q15.ok and not q15.fatal
    assert "c-q31" in q15.suggestion and "0.4 % of the rate" in q15.suggestion
    assert "PROBLEM" in q15.format_text()
    q31 = quantization_report([d], 250.0, "c-q31")
    assert q31.ok, q31.format_text()
    text = q31.format_text()
    assert "pole radius" in text and "response error at 1 Hz" in text and "headroom" in text


def test_report_refuses_poles_pushed_outside_the_unit_circle():
    # complex poles at radius sqrt(0.99998) = 0.99999; |a1| > 1 takes shift 1, so Q15 holds
    # a2 as round(0.99998 * 16384) / 16384 = 1.0: poles on the unit circle
    sos = np.array([[1e-2, 0.0, 0.0, 1.0, -1.99, 0.99998]])
    from types import SimpleNamespace

    d = SimpleNamespace(kind="second-order-lowpass", rate_hz=250.0, params={}, derived={},
                        sos=sos, fir=None)
    report = quantization_report([d], 250.0, "c-q15")
    assert report.fatal and "outside the unit circle" in report.fatal[0]
    assert quantization_report([d], 250.0, "c-float").fatal == ()


def test_report_headroom_warns_when_a_section_can_exceed_full_scale():
    d = design("chebyshev1", 250.0, order=4, cutoff_hz=10.0, ripple_db=3.0)
    report = quantization_report({"load": [d]}, 250.0, "c-q31")
    (stage,) = report.channels[0].stages
    assert stage.peak_gain > 1.0
    assert any("can saturate" in w for w in report.warnings)


def test_gain_and_window_limits_are_named():
    g = plan_stage(design("gain", scale=1.0, offset=60.0))
    with pytest.raises(ValueError, match="offset = 60 is outside the full scale"):
        fix_stage(g, Q15, 50.0)
    assert fix_stage(g, Q15, 100.0).offset == round(0.6 * 32768)
    # longer than design_stage allows (filters.stages.MAX_AVERAGE_WINDOW): a plan built by hand
    big = dataclasses.replace(plan_stage(design("moving-average", window=6)), window=70000)
    with pytest.raises(ValueError, match="window = 70000"):
        fix_stage(big, Q15, 1.0)
    with pytest.raises(ValueError, match="target"):
        report_for_plans({}, 250.0, "c-q7")


@given(st.lists(st.floats(-3.9, 3.9, allow_nan=False), min_size=1, max_size=5),
       st.sampled_from([Q15, Q31]))
def test_quantize_group_takes_the_smallest_shift_and_rounds_to_half_an_lsb(values, fmt):
    ints, shift = quantize_group(values, fmt)
    r = fmt.frac - shift
    for v, i in zip(values, ints, strict=True):
        assert fmt.min_int <= i <= fmt.max_int
        assert abs(i / 2**r - v) <= 2.0 ** -(r + 1)
    if shift:   # one shift less would not hold them
        finer = [np.floor(v * 2 ** (r + 1) + 0.5) for v in values]
        assert any(not fmt.min_int <= i <= fmt.max_int for i in finer)


@pytest.mark.parametrize("kind,params,form", [
    ("rc-highpass", {"cutoff_hz": 1.0}, "biquads"), ("dc-block", {"cutoff_hz": 1.0}, "biquads"),
    ("ema", {"alpha": 0.5}, "biquads"), ("moving-average", {"window": 4}, "moving-average"),
    ("median", {"window": 3}, "median"), ("gain", {"scale": 2.0}, "gain"),
])
def test_every_kind_has_an_export_form(kind, params, form):
    plan = plan_stage(design(kind, **params), "zero", "stage 1")
    assert plan.form == form and plan.start == "zero" and plan.label == "stage 1"


def _half_up_reference(value: float, full_scale: float, fmt) -> int:
    """floor(value / full_scale * 2^F + 1/2) in exact decimal arithmetic (decimal module,
    no float rounding), saturated: the module docstring's "round half up"."""
    from decimal import ROUND_FLOOR, Decimal, localcontext

    with localcontext() as ctx:
        ctx.prec = 80
        scaled = Decimal(value) / Decimal(full_scale) * (1 << fmt.frac)
        q = int((scaled + Decimal("0.5")).quantize(Decimal(1), rounding=ROUND_FLOOR))
    return min(max(q, fmt.min_int), fmt.max_int)


@pytest.mark.parametrize("fmt", [Q15, Q31])
@pytest.mark.parametrize("full_scale", [2.0, 16.0, 0.5])   # e.g. +-2 g vib, +-16 A current
def test_readings_round_half_up_to_the_nearest_lsb_not_truncate(fmt, full_scale):
    from decimal import ROUND_HALF_UP, Decimal

    lsb = full_scale / 2**fmt.frac
    k = np.array([0, 1, 2, 3, 7, 1000, 12345, -1, -2, -3, -1000, -12345])
    ties = (k + 0.5) * lsb                      # exactly half an LSB above an integer
    near = np.concatenate([(k + 0.49) * lsb, (k + 0.51) * lsb, (k + 0.999) * lsb])
    # a vibration trace: 18 Hz belt plus white noise and a spike, sampled at 250 Hz
    rng = np.random.default_rng(12)
    t = np.arange(2000) / 250.0
    trace = 0.4 * np.sin(2 * np.pi * 18.0 * t) + 0.05 * rng.standard_normal(t.size)
    trace[700] = 1.7
    readings = np.concatenate([ties, near, full_scale * trace / 2, [full_scale * 3.0,
                                                                    -full_scale * 3.0]])
    got = to_fixed(readings, full_scale, fmt)
    expected = [_half_up_reference(float(v), full_scale, fmt) for v in readings]
    assert got.tolist() == expected
    # the same by decimal's ROUND_HALF_UP where it agrees with half up (non-negative values;
    # ROUND_HALF_UP takes negative ties away from zero, half up takes them towards +inf)
    for v, g in zip(readings, got.tolist(), strict=True):
        if 0 <= v < full_scale:
            exact = Decimal(float(v)) / Decimal(full_scale) * (1 << fmt.frac)
            assert g == min(int(exact.quantize(Decimal(1), rounding=ROUND_HALF_UP)),
                            fmt.max_int)
    assert got[:len(k)].tolist() == (k + 1).tolist()      # ties go up, negative ones too
    # rounding to the nearest LSB: never more than half an LSB from the reading
    inside = np.abs(readings) < full_scale * 0.99
    assert np.all(np.abs(from_fixed(got, full_scale, fmt)[inside] - readings[inside])
                  <= lsb / 2)
    assert got[-2:].tolist() == [fmt.max_int, fmt.min_int]
