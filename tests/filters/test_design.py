"""design_stage: every kind, worked checks, scipy references, refusals and warnings."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from filters.design import StageDesign, design_stage
from filters.spec import ALL_KINDS, StageSpec

RATE = 250.0

MINIMAL = {
    "rc-lowpass": {"cutoff_hz": 8.0}, "rc-highpass": {"r_ohm": 1e4, "c_farad": 1e-4},
    "rl-lowpass": {"r_ohm": 10.0, "l_henry": 0.5}, "rl-highpass": {"cutoff_hz": 0.2},
    "rlc-bandpass": {"centre_hz": 18.0, "q": 4.0}, "rlc-notch": {"centre_hz": 50.0, "q": 10.0},
    "second-order-lowpass": {"cutoff_hz": 10.0, "q": 0.707},
    "butterworth": {"order": 4, "cutoff_hz": 8.0}, "bessel": {"order": 3, "cutoff_hz": 8.0},
    "chebyshev1": {"order": 2, "cutoff_hz": 8.0, "ripple_db": 0.5},
    "notch": {"freq_hz": 50.0, "q": 30.0}, "moving-average": {"window": 5},
    "ema": {"alpha": 0.1}, "median": {"window": 5}, "dc-block": {"cutoff_hz": 0.5},
    "gain": {"scale": 2.0, "offset": -1.0},
}


def design(kind: str, rate: float = RATE, **params) -> StageDesign:
    return design_stage(StageSpec(kind, params), rate)


@pytest.mark.parametrize("kind", ALL_KINDS)
def test_every_kind_designs(kind):
    d = design(kind, **MINIMAL[kind])
    assert d.kind == kind and d.rate_hz == RATE
    if kind in ("median", "gain"):
        assert d.sos is None and d.fir is None and not d.linear
    elif kind == "moving-average":
        assert d.fir is not None and d.sos is None and d.linear
    else:
        assert d.sos.dtype == np.float64 and d.sos.shape[1] == 6
        np.testing.assert_array_equal(d.sos[:, 3], 1.0)
        assert max(np.max(np.abs(np.roots(row[3:])), initial=0) for row in d.sos) < 1.0
    assert (d.analog is not None) == (d.analog_zpk is not None) == (
        kind not in ("notch", "moving-average", "ema", "median", "dc-block", "gain"))
    assert isinstance(d.warnings, tuple)


def test_defaults_are_resolved_into_params():
    assert design("butterworth", order=2, cutoff_hz=5.0).params["method"] == "tustin-prewarp"
    assert design("butterworth", order=2, cutoff_hz=5.0).params["band"] == "lowpass"
    assert design("bessel", order=2, cutoff_hz=5.0).params["norm"] == "mag"
    gain = design("gain")
    assert gain.params["scale"] == 1.0 and gain.params["offset"] == 0.0
    # alpha = 1 - exp(-T/tau): the step-invariant discretization of a first-order lag
    # (common practice; checked exactly in test_ema_is_the_step_invariant_first_order_lag)
    assert design("ema", time_constant_s=0.1).params["alpha"] == pytest.approx(
        1 - math.exp(-1 / (RATE * 0.1)))


def test_backward_euler_worked_check():
    # Common practice worked example: RC low-pass, 5 Hz cutoff, 100 Hz sampling, backward
    # Euler: y[n] = 0.2391 x[n] + 0.7609 y[n-1] (to 4 places). The 4-place values are from
    # memory; they agree with b0 = wT/(1 + wT), -a1 = 1/(1 + wT) for w = 2 pi 5, T = 0.01.
    d = design("rc-lowpass", 100.0, cutoff_hz=5.0, method="backward-euler")
    b0, b1, b2, _, a1, a2 = d.sos[0]
    assert round(b0, 4) == 0.2391 and round(-a1, 4) == 0.7609
    assert b1 == 0 and b2 == 0 and a2 == 0


def test_forward_euler_stability_boundary_at_two_rc():
    # Forward Euler maps the RC pole -1/RC to 1 - T/RC: stable only for T < 2 RC
    # (common practice). Here 2 RC = 0.01 s, i.e. the smallest stable rate is 100 Hz.
    rc = 0.005
    params = {"r_ohm": 1000.0, "c_farad": rc / 1000.0, "method": "forward-euler"}
    ok = design_stage(StageSpec("rc-lowpass", params), 100.0 * (1 + 1e-9))
    assert np.max(np.abs(np.roots(ok.sos[0, 3:]))) < 1.0
    assert ok.derived["max_stable_sample_time_s"] == pytest.approx(2 * rc)
    assert any("near instability" in w for w in ok.warnings)
    for rate in (100.0, 80.0):
        with pytest.raises(ValueError, match="forward-euler") as info:
            design_stage(StageSpec("rc-lowpass", params), rate)
        assert "0.01 s" in str(info.value) and "2 RC" in str(info.value)
        assert "100 Hz" in str(info.value) and "tustin" in str(info.value)


def test_forward_euler_second_order_limit_names_largest_stable_t():
    # |1 + pT| < 1 for p = w0(-1/(2Q) +- j sqrt(1 - 1/(4Q^2))) gives T < 1/(Q w0)
    # (derived here from the forward Euler map z = 1 + sT, common practice).
    with pytest.raises(ValueError, match="largest stable sample time is 0.00159155 s"):
        design("second-order-lowpass", cutoff_hz=10.0, q=10.0, method="forward-euler")


def test_notch_equals_iirnotch():
    # Reference: scipy.signal.iirnotch.
    d = design("notch", freq_hz=50.0, q=30.0)
    b, a = signal.iirnotch(50.0, 30.0, fs=RATE)
    f = np.linspace(0, 125, 501)
    _, ours = signal.sosfreqz(d.sos, worN=f, fs=RATE)
    _, ref = signal.freqz(b, a, worN=f, fs=RATE)
    np.testing.assert_allclose(ours, ref, atol=1e-14)


def test_ema_is_the_step_invariant_first_order_lag():
    # alpha = 1 - exp(-T/tau) makes the EMA's step response equal 1 - exp(-t/tau) at
    # t = (n + 1) T (exact discretization of a first-order lag with held input).
    tau = 0.05
    d = design("ema", time_constant_s=tau)
    n = np.arange(200)
    y = signal.sosfilt(d.sos, np.ones(n.size))
    np.testing.assert_allclose(y, 1 - np.exp(-(n + 1) / RATE / tau), atol=1e-14)
    # cutoff of a first-order lag 1/(2 pi tau), as RC 1/(2 pi R C), any electronics handbook
    assert d.derived["cutoff_hz"] == pytest.approx(1 / (2 * math.pi * tau))
    assert design("ema", alpha=d.derived["alpha"]).derived["time_constant_s"] == pytest.approx(tau)
    assert design("ema", alpha=1.0).derived["time_constant_s"] == 0.0


def test_dc_block_recurrence_and_pole():
    # y[n] = x[n] - x[n-1] + R y[n-1], R = exp(-2 pi fc / fs) (matched pole, common practice).
    d = design("dc-block", cutoff_hz=0.5)
    r = math.exp(-2 * math.pi * 0.5 / RATE)
    np.testing.assert_allclose(d.sos, [[1.0, -1.0, 0.0, 1.0, -r, 0.0]])
    x = np.random.default_rng(3).normal(size=64)
    y = np.zeros_like(x)
    for i in range(len(x)):
        y[i] = x[i] - (x[i - 1] if i else 0.0) + r * (y[i - 1] if i else 0.0)
    np.testing.assert_allclose(signal.sosfilt(d.sos, x), y, atol=1e-13)


def test_moving_average_and_median():
    ma = design("moving-average", window=10)
    np.testing.assert_array_equal(ma.fir, np.full(10, 0.1))
    # an N-point moving average has its first null at fs/N (common practice): 250/10 Hz
    assert ma.derived["first_null_hz"] == pytest.approx(25.0)
    # a median of N samples lags by (N - 1)/2 samples (common practice)
    med = design("median", window=7)
    assert med.delay_samples == 3.0 and med.derived["delay_s"] == pytest.approx(3 / RATE)


def test_prewarp_hz_and_bands():
    # prewarping at prewarp_hz: digital equals analog there (definition, common practice),
    # both sides evaluated by scipy.signal.sosfreqz and scipy.signal.freqs_zpk
    d = design("butterworth", order=3, cutoff_hz=30.0, prewarp_hz=10.0)
    _, h = signal.sosfreqz(d.sos, worN=[10.0], fs=RATE)
    z, p, k = d.analog_zpk
    _, ha = signal.freqs_zpk(z, p, k, worN=[2 * math.pi * 10.0])
    assert abs(h[0] - ha[0]) < 1e-12
    ignored = design("rc-lowpass", cutoff_hz=5.0, method="zoh", prewarp_hz=4.0)
    assert any("prewarp_hz" in w for w in ignored.warnings)
    bs = design("chebyshev1", band="bandstop", order=3, low_hz=45.0, high_hz=55.0, ripple_db=1.0)
    assert bs.sos.shape == (3, 6)
    # centre of a band design: geometric mean of its edges (scipy.signal.lp2bs: w0 = sqrt(w1 w2))
    assert bs.derived["centre_hz"] == pytest.approx(math.sqrt(45.0 * 55.0))


BAD = [
    ("rc-lowpass", {"cutoff_hz": 0.0}, "cutoff_hz = 0"),
    ("rc-lowpass", {"cutoff_hz": -3.0}, "cutoff_hz = -3"),
    ("rc-lowpass", {"cutoff_hz": 125.0}, "cutoff_hz = 125 Hz is outside the allowed range 0 <"),
    ("rc-lowpass", {"cutoff_hz": 200.0}, "cutoff_hz = 200"),
    ("rc-lowpass", {"r_ohm": 0.0, "c_farad": 1e-6}, "r_ohm = 0 must be greater than 0 ohm"),
    ("rc-highpass", {"r_ohm": 1e3, "c_farad": -1e-6}, "c_farad = -1e-06 must be greater than 0"),
    ("rl-lowpass", {"r_ohm": 1e3, "l_henry": 0.0}, "l_henry = 0"),
    ("rc-lowpass", {"r_ohm": 1.0, "c_farad": 1e-6}, "r_ohm = 1 and c_farad = 1e-06 give cutoff"),
    ("rlc-bandpass", {"r_ohm": 1.0, "l_henry": 1e-3, "c_farad": 1e-6}, "give centre_hz"),
    ("rlc-notch", {"centre_hz": 50.0, "q": 0.0}, "q = 0 must be greater than 0"),
    ("rlc-notch", {"centre_hz": 150.0, "q": 2.0}, "centre_hz = 150"),
    ("second-order-lowpass", {"cutoff_hz": 10.0, "q": -1.0}, "q = -1"),
    ("butterworth", {"order": 0, "cutoff_hz": 8.0}, "order = 0 is outside the allowed range 1"),
    ("butterworth", {"order": 11, "cutoff_hz": 8.0}, "order = 11"),
    ("butterworth", {"order": 2.5, "cutoff_hz": 8.0}, "order = 2.5 must be a whole number"),
    ("butterworth", {"order": 2, "cutoff_hz": 8.0, "band": "allpass"}, "band = 'allpass'"),
    ("butterworth", {"order": 2, "band": "bandpass", "low_hz": 30.0, "high_hz": 10.0},
     "low_hz = 30 Hz must be below high_hz = 10 Hz"),
    ("butterworth", {"order": 2, "band": "bandpass", "low_hz": 10.0, "high_hz": 130.0},
     "high_hz = 130"),
    ("butterworth", {"order": 2, "band": "bandpass", "cutoff_hz": 10.0}, "band = 'bandpass'"),
    ("butterworth", {"order": 2, "cutoff_hz": 8.0, "method": "impulse"}, "method = 'impulse'"),
    ("butterworth", {"order": 2, "cutoff_hz": 8.0, "prewarp_hz": 125.0}, "prewarp_hz = 125"),
    ("bessel", {"order": 2, "cutoff_hz": 8.0, "norm": "energy"}, "norm = 'energy'"),
    ("chebyshev1", {"order": 2, "cutoff_hz": 8.0, "ripple_db": 0.0}, "ripple_db = 0"),
    ("notch", {"freq_hz": 125.0, "q": 30.0}, "freq_hz = 125"),
    ("notch", {"freq_hz": 50.0, "q": 0.0}, "q = 0"),
    ("moving-average", {"window": 0}, "window = 0 must be at least 1"),
    ("median", {"window": 4}, "window = 4 must be odd"),
    ("median", {"window": -1}, "window = -1 must be at least 1"),
    ("ema", {"alpha": 0.0}, "alpha = 0 is outside the allowed range 0 < alpha <= 1"),
    ("ema", {"alpha": 1.5}, "alpha = 1.5"),
    ("ema", {"time_constant_s": 0.0}, "time_constant_s = 0"),
    ("dc-block", {"cutoff_hz": 0.0}, "cutoff_hz = 0"),
    ("gain", {"scale": float("nan")}, "scale = nan must be a finite number"),
    ("rc-lowpass", {"cutoff_hz": "fast"}, "cutoff_hz = 'fast' must be a finite number"),
    ("rc-lowpass", {"cutof_hz": 5.0}, "cutof_hz is not a key of kind 'rc-lowpass'"),
    ("rc-lowpass", {}, "needs cutoff_hz or r_ohm \\+ c_farad"),
    ("rc-lowpass", {"cutoff_hz": 5.0, "r_ohm": 1.0, "c_farad": 1.0}, "not both"),
    ("blur", {}, "kind = 'blur' is unknown"),
]


@pytest.mark.parametrize("kind,params,message", BAD)
def test_bad_input_names_the_parameter(kind, params, message):
    with pytest.raises(ValueError, match=message):
        design_stage(StageSpec(kind, params), RATE)


@pytest.mark.parametrize("rate", [0.0, -250.0, float("inf"), True])
def test_bad_rate_is_refused(rate):
    with pytest.raises(ValueError, match="rate_hz"):
        design_stage(StageSpec("median", {"window": 3}), rate)


def test_warning_near_nyquist():
    d = design("rc-lowpass", cutoff_hz=110.0)
    assert any("within 20 % of the Nyquist frequency 125 Hz" in w for w in d.warnings)
    assert not design("rc-lowpass", cutoff_hz=90.0).warnings
    assert any("Nyquist" in w for w in design("notch", freq_hz=120.0, q=5.0).warnings)


def test_warning_when_sample_time_too_long_for_the_prototype():
    # Matched RC at 60 Hz of 250 Hz: the digital -3 dB point moves; the warning says by
    # how many dB the response differs from the analog one at the cutoff.
    d = design("rc-lowpass", cutoff_hz=60.0, method="matched")
    (warning,) = [w for w in d.warnings if "too long" in w]
    _, h = signal.sosfreqz(d.sos, worN=[60.0], fs=RATE)
    # the analog RC is -3 dB (1/sqrt(2)) at its cutoff, any electronics handbook
    diff = 20 * math.log10(abs(h[0])) - 20 * math.log10(1 / math.sqrt(2))
    assert diff < -1.0 and f"{diff:+.1f} dB at 60 Hz" in warning
    assert not any("too long" in w for w in design("rc-lowpass", cutoff_hz=60.0).warnings)
    assert not any("too long" in w for w in design("rc-lowpass", cutoff_hz=40.0,
                                                   method="matched").warnings)


def test_any_pole_on_or_outside_the_unit_circle_is_refused(monkeypatch):
    # No method maps a stable prototype outside the unit circle, so the safety net is
    # exercised with a discretization replaced by one that returns a pole at |z| = 1.
    import filters.analog_design as analog_design
    from filters.discretize import DigitalZpk

    def unstable(proto, t, method, prewarp_hz=None):
        return DigitalZpk(np.array([], complex), np.array([1.0 + 0j]), 1.0, t)

    monkeypatch.setattr(analog_design, "discretize", unstable)
    with pytest.raises(ValueError, match="method = 'zoh' puts a pole on or outside the unit "
                                         "circle .*use tustin or a higher rate"):
        design("rc-lowpass", cutoff_hz=5.0, method="zoh")


def test_zoh_inaccuracy_is_warned():
    d = design("butterworth", order=10, band="bandpass", low_hz=1.0, high_hz=3.0, method="zoh")
    assert any("zoh sections follow the exact step-invariant filter only to" in w
               for w in d.warnings)
    assert not design("butterworth", order=10, band="bandpass", low_hz=8.0, high_hz=30.0,
                      method="zoh").warnings


@settings(max_examples=60, deadline=None)
@given(kind=st.sampled_from(["rc-lowpass", "rc-highpass", "rlc-bandpass", "rlc-notch",
                             "second-order-lowpass", "butterworth", "bessel", "chebyshev1"]),
       method=st.sampled_from(["backward-euler", "tustin", "tustin-prewarp", "zoh", "matched"]),
       fraction=st.floats(0.001, 0.45), q=st.floats(0.3, 20.0), order=st.integers(1, 10))
def test_stable_prototypes_give_stable_finite_designs(kind, method, fraction, q, order):
    # Every method but forward Euler maps the left half-plane inside the unit circle
    # (common practice), so any valid design must come out stable and finite.
    f = fraction * RATE
    params: dict[str, object] = {"method": method}
    if kind in ("rlc-bandpass", "rlc-notch"):
        params.update(centre_hz=f, q=q)
    elif kind == "second-order-lowpass":
        params.update(cutoff_hz=f, q=q)
    elif kind in ("butterworth", "bessel", "chebyshev1"):
        params.update(order=order, cutoff_hz=f)
        if kind == "chebyshev1":
            params["ripple_db"] = 1.0
    else:
        params["cutoff_hz"] = f
    d = design_stage(StageSpec(kind, params), RATE)
    assert np.all(np.isfinite(d.sos))
    radii = [np.abs(np.roots(row[3:])) for row in d.sos]
    assert max(float(r.max(initial=0.0)) for r in radii) < 1.0
