"""Analysis of stages and chains against scipy.signal.freqz / group_delay and closed forms."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import signal

from filters import analysis as A
from filters.design import design_stage
from filters.reports import chain_report, stage_report
from filters.spec import StageSpec

RATE = 250.0


def design(kind: str, **params):
    return design_stage(StageSpec(kind, params), RATE)


def chain_tf(designs) -> tuple[np.ndarray, np.ndarray]:
    """The chain as one (b, a) in powers of z^-1, by polynomial products (low orders only)."""
    b, a = np.array([1.0]), np.array([1.0])
    for d in designs:
        if d.sos is not None:
            sb, sa = signal.sos2tf(d.sos)
        elif d.fir is not None:
            sb, sa = d.fir, np.array([1.0])
        else:
            delay = int(d.delay_samples)
            sb, sa = np.r_[np.zeros(delay), 1.0], np.array([1.0])
        b, a = np.convolve(b, sb), np.convolve(a, sa)  # (np.polymul would drop delays)
    return b, a



def weigh_chain():
    return [design("median", window=5), design("notch", freq_hz=50.0, q=30.0),
            design("rc-lowpass", cutoff_hz=8.0), design("moving-average", window=4)]


def test_chain_response_equals_freqz_of_the_product():
    # Reference: scipy.signal.freqz of the product polynomial (median as a 2-sample delay).
    chain = weigh_chain()
    f = np.linspace(0, 124, 200)
    b, a = chain_tf(chain)
    _, ref = signal.freqz(b, a, worN=f, fs=RATE)
    np.testing.assert_allclose(A.chain_response(chain, f, RATE), ref, atol=1e-12)
    np.testing.assert_allclose(A.chain_response([], f, RATE), 1.0)


@pytest.mark.parametrize("freq", [0.0, 3.0, 8.0, 30.0, 70.0])
def test_group_delay_equals_scipy_group_delay(freq):
    # Reference: scipy.signal.group_delay of the whole chain's (b, a).
    chain = [design("rc-lowpass", cutoff_hz=8.0), design("butterworth", order=2, cutoff_hz=20.0),
             design("median", window=3), design("moving-average", window=6)]
    b, a = chain_tf(chain)
    _, gd = signal.group_delay((b, a), w=[freq], fs=RATE)
    assert A.group_delay_s(chain, freq) == pytest.approx(gd[0] / RATE, rel=1e-9)


def test_median_and_gain_count_as_delay_and_flat_gain():
    # a median of N counts as a pure delay of (N - 1)/2 samples, exp(-j w 3 T) here
    # (common practice); a gain is flat and scales white-noise variance by scale^2
    med = design("median", window=7)
    h = A.frequency_response(med, np.array([10.0]))
    assert h[0] == pytest.approx(np.exp(-2j * np.pi * 10.0 * 3 / RATE))
    assert A.group_delay_s(med, 10.0) == pytest.approx(3 / RATE)
    gain = design("gain", scale=-2.5, offset=4.0)
    assert A.frequency_response(gain, np.array([1.0, 60.0])) == pytest.approx(2.5)
    assert A.group_delay_s(gain, 5.0) == 0.0
    assert A.noise_gain(gain) == pytest.approx(6.25)
    assert A.minus3db_hz(med) is None


def test_analog_response_equals_freqs_zpk():
    # Reference: scipy.signal.freqs_zpk on the prototype.
    d = design("bessel", order=5, band="bandpass", low_hz=10.0, high_hz=30.0)
    z, p, k = signal.bessel(5, [2 * np.pi * 10, 2 * np.pi * 30], btype="bandpass", analog=True,
                            output="zpk", norm="mag")
    f = np.geomspace(1, 100, 30)
    _, ref = signal.freqs_zpk(z, p, k, worN=2 * np.pi * f)
    np.testing.assert_allclose(A.analog_response(d, f), ref, rtol=1e-10)
    assert A.analog_response(design("ema", alpha=0.2), f) is None


def test_minus3db_at_the_designed_edges():
    # scipy.signal.butter with fs: -3 dB (|H| = 1/sqrt(2)) exactly at the cutoff and edges.
    assert A.minus3db_hz(design("butterworth", order=4, cutoff_hz=8.0)) == pytest.approx(8.0,
                                                                                        rel=1e-9)
    edges = A.minus3db_edges_hz(design("butterworth", order=3, band="bandpass", low_hz=10.0,
                                       high_hz=40.0))
    assert edges == pytest.approx((10.0, 40.0), rel=1e-9)
    # Bessel norm "mag": -3 dB at the cutoff (scipy.signal.bessel docs), kept by prewarping.
    assert A.minus3db_hz(design("bessel", order=6, cutoff_hz=12.0)) == pytest.approx(12.0,
                                                                                     rel=1e-9)
    # Notch: -3 dB bandwidth f0/Q, points f0 -+ f0/(2Q) approximately (Q = w0/bw as
    # scipy.signal.iirnotch documents it, after Orfanidis, Introduction to Signal
    # Processing, 1996).
    lo, hi = A.minus3db_edges_hz(design("notch", freq_hz=50.0, q=10.0))
    assert hi - lo == pytest.approx(5.0, rel=0.01)


def test_phase_lag_of_rc_at_cutoff_is_45_degrees():
    # Handbook: a first-order low-pass lags 45 deg at its cutoff; prewarped Tustin keeps it.
    d = design("rc-lowpass", cutoff_hz=8.0)
    assert A.phase_deg(d, 8.0) == pytest.approx(-45.0, abs=1e-9)
    assert A.phase_delay_s(d, 8.0) == pytest.approx(45 / 360 / 8.0, rel=1e-9)


def test_phase_is_unwrapped_from_dc():
    # A linear-phase FIR of 9 taps: phase -4 w T at every frequency below its first null
    # (a symmetric N-tap FIR delays by (N - 1)/2 samples, common practice).
    d = design("moving-average", window=9)
    assert A.phase_deg(d, 25.0) == pytest.approx(-4 * 360 * 25.0 / RATE, abs=1e-6)
    assert A.group_delay_s(d, 13.0) == pytest.approx(4 / RATE)


def test_settling_time_of_first_order_lag():
    # EMA step response 1 - (1 - alpha)^(n+1) is inside the 2 % band (common practice) from
    # the first n with (1 - alpha)^(n+1) <= 0.02 on, i.e. from t = n T with n as below.
    alpha = 0.05
    n = math.floor(math.log(0.02) / math.log(1 - alpha))
    assert A.settling_time_s(design("ema", alpha=alpha)) == pytest.approx(n / RATE)
    # Zero final value (DC block): settling measured against the peak excursion.
    assert 0 < A.settling_time_s(design("dc-block", cutoff_hz=1.0)) < 1.0
    assert A.settling_time_s(design("median", window=5)) == pytest.approx(2 / RATE)


def test_noise_gain_closed_forms():
    # EMA: sum alpha^2 (1 - alpha)^(2n) = alpha / (2 - alpha) (geometric series).
    alpha = 0.1
    assert A.noise_gain(design("ema", alpha=alpha)) == pytest.approx(alpha / (2 - alpha),
                                                                      rel=1e-9)
    # Moving average of N: N (1/N)^2 = 1/N.
    assert A.noise_gain(design("moving-average", window=8)) == pytest.approx(1 / 8)
    assert A.noise_gain_db(design("moving-average", window=10)) == pytest.approx(-10.0)
    # Equals the white-noise variance ratio through the same filter (Parseval).
    d = design("butterworth", order=2, cutoff_hz=10.0)
    h = signal.sosfilt(d.sos, np.r_[1.0, np.zeros(5000)])
    assert A.noise_gain(d) == pytest.approx(np.sum(h**2), rel=1e-9)


def test_dc_gain_poles_zeros_and_margin():
    # scipy.signal.cheby1: an even order low-pass has DC gain -ripple dB.
    d = design("chebyshev1", order=4, cutoff_hz=10.0, ripple_db=1.0)
    assert 20 * math.log10(A.dc_gain(d)) == pytest.approx(-1.0, abs=1e-9)
    # EMA y[n] = alpha x[n] + (1 - alpha) y[n-1]: its pole is 1 - alpha, so the margin
    # 1 - |pole| is alpha (from the recurrence)
    alpha = 0.2
    assert A.stability_margin(design("ema", alpha=alpha)) == pytest.approx(alpha)
    zeros, poles = A.poles_zeros(design("notch", freq_hz=50.0, q=30.0))
    # a second-order notch has its zeros on the unit circle at +-2 pi f0/fs
    # (scipy.signal.iirnotch, after Orfanidis, Introduction to Signal Processing, 1996)
    np.testing.assert_allclose(np.abs(zeros), 1.0)
    np.testing.assert_allclose(np.sort(np.abs(np.angle(zeros))), [2 * np.pi * 50 / RATE] * 2)
    zeros, poles = A.poles_zeros(design("rc-lowpass", cutoff_hz=5.0, method="forward-euler"))
    assert zeros.size == 0 and poles.size == 1
    assert A.stability_margin(design("moving-average", window=3)) == 1.0


def test_table_points():
    pts = A.table_points_hz([design("median", window=3), design("notch", freq_hz=50.0, q=9.0),
                             design("rc-lowpass", cutoff_hz=8.0)], RATE)
    assert pts == [0.8, 4.0, 8.0, 16.0, 40.0, 50.0]
    assert A.table_points_hz(design("gain"), RATE) == [0.25, 2.5, 12.5, 25.0, 50.0, 100.0]


def test_reports_are_json_ready():
    chain = weigh_chain()
    for i, d in enumerate(chain):
        report = stage_report(d, 8.0, index=i)
        json.dumps(report.to_dict(), allow_nan=False)
    rc = stage_report(chain[2], 8.0)
    assert rc.costs.minus3db_hz == pytest.approx((8.0,), rel=1e-9)
    assert rc.costs.table[2].freq_hz == 8.0
    # RC at its cutoff: 20 log10(1/sqrt(2)) = -3.0103 dB, any electronics handbook
    assert rc.costs.table[2].mag_db == pytest.approx(-3.0103, abs=1e-4)
    assert rc.costs.table[2].analog_db == pytest.approx(-3.0103, abs=1e-4)
    report = chain_report("load", list(enumerate(chain)), RATE, 8.0)
    data = report.to_dict()
    json.dumps(data, allow_nan=False)
    assert data["stages"] == [0, 1, 2, 3] and any("median" in n for n in data["notes"])
    assert report.costs.group_delay_ms == pytest.approx(1e3 * A.group_delay_s(chain, 8.0))
    assert stage_report(design("median", window=5), 8.0).costs.noise_gain is None


def test_default_analysis_frequency_and_unsettled_response():
    # an EMA's cutoff 1/(2 pi tau), as RC 1/(2 pi R C), any electronics handbook
    assert A.default_analysis_hz([design("notch", freq_hz=50.0, q=9.0),
                                  design("ema", time_constant_s=0.1)], RATE) == pytest.approx(
        1 / (2 * math.pi * 0.1))
    assert A.default_analysis_hz([design("rlc-bandpass", centre_hz=18.0, q=3.0)], RATE) == 18.0
    assert A.default_analysis_hz([design("median", window=3)], RATE) == 1.0
    assert A.default_analysis_hz([], 2.0) == 0.5
    # A chain whose response outlasts the longest simulation never settles: 24 EMAs at
    # nearly the slowest allowed pole (filters.checks.MIN_FREQUENCY_FRACTION).
    assert A.settling_time_s([design("ema", alpha=7e-6)] * 24) == math.inf


def test_minus3db_of_a_resonant_lowpass_is_relative_to_dc():
    # Second-order low-pass |H|^2 = 1 / ((1 - x^2)^2 + x^2/Q^2), x = f/f0 (textbook form);
    # |H| = 1/sqrt(2) at x^2 = u with u^2 - (2 - 1/Q^2) u - 1 = 0. Sampled fast so that
    # Tustin's warping is negligible.
    q, f0, rate = 5.0, 10.0, 20_000.0
    c = 2 - 1 / q**2
    x = math.sqrt((c + math.sqrt(c * c + 4)) / 2)
    d = design_stage(StageSpec("second-order-lowpass", {"cutoff_hz": f0, "q": q}), rate)
    assert A.minus3db_edges_hz(d) == pytest.approx((x * f0,), rel=1e-4)
