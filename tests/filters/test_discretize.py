"""Discretization methods against scipy.signal.cont2discrete, butter/bessel/cheby1 and the
definitions of the methods themselves (for orders where transfer functions are too poor)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from filters import prototypes as P
from filters.discretize import DISCRETE_METHODS, discretize, zpk_to_sos

RATE = 250.0
T = 1 / RATE
FREQS = np.linspace(0.0, 124.0, 97)

LOW_ORDER = {
    "rc-lowpass": P.rc("lowpass", 8.0),
    "rc-highpass": P.rc("highpass", 0.5),
    "rlc-bandpass": P.resonant("bandpass", 18.0, 4.0),
    "rlc-notch": P.resonant("bandstop", 50.0, 5.0),
    "second-order-lowpass": P.resonant("lowpass", 10.0, 0.8),
    "butterworth-2": P.band_design("butterworth", "lowpass", 2, (20.0,)),
}


def digital_response(d, freqs=FREQS) -> np.ndarray:
    _, h = signal.sosfreqz(d.sos(), worN=freqs, fs=1 / d.sample_time_s)
    return h


def tf_response(num, den, freqs=FREQS, fs=RATE) -> np.ndarray:
    _, h = signal.freqz(np.ravel(num), np.ravel(den), worN=freqs, fs=fs)
    return h


@pytest.mark.parametrize("name", list(LOW_ORDER))
@pytest.mark.parametrize("method,c2d,alpha", [
    ("forward-euler", "euler", None), ("backward-euler", "backward_diff", None),
    ("tustin", "bilinear", None), ("tustin", "gbt", 0.5), ("zoh", "zoh", None),
])
def test_methods_equal_cont2discrete(name, method, c2d, alpha):
    # Reference: scipy.signal.cont2discrete on the prototype's transfer function.
    proto = LOW_ORDER[name]
    num, den, _ = signal.cont2discrete(proto.tf(), T, method=c2d, alpha=alpha)
    ref = tf_response(num, den)
    ours = digital_response(discretize(proto, T, method))
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)


def test_forward_euler_keeps_the_delay_of_a_strictly_proper_prototype():
    # cont2discrete("euler") of w/(s + w) is wT z^-1 / (1 - (1 - wT) z^-1): a one-sample delay.
    w = 2 * math.pi * 8.0
    sos = discretize(P.rc("lowpass", 8.0), T, "forward-euler").sos()
    np.testing.assert_allclose(sos, [[0.0, w * T, 0.0, 1.0, w * T - 1.0, 0.0]], atol=1e-15)


def test_zpk_to_sos_spreads_delays_over_sections():
    # Three poles, no zeros: H(z) = 2 / ((z - 0.5)(z^2 - 0.6 z + 0.13)) needs z^-3 overall.
    poles = np.array([0.5, 0.3 + 0.2j, 0.3 - 0.2j])
    sos = zpk_to_sos(np.array([]), poles, 2.0)
    f = np.linspace(0, 100, 11)
    _, ours = signal.sosfreqz(sos, worN=f, fs=RATE)
    # In powers of z^-1, 2 / prod(z - p) is 2 z^-3 / poly(p): numerator [0, 0, 0, 2].
    _, ref = signal.freqz([0.0, 0.0, 0.0, 2.0], np.poly(poles), worN=f, fs=RATE)
    np.testing.assert_allclose(ours, ref, atol=1e-14)


SCIPY_DIGITAL = {
    "butterworth": lambda n, wn, band: signal.butter(n, wn, btype=band, fs=RATE, output="sos"),
    "bessel": lambda n, wn, band: signal.bessel(n, wn, btype=band, fs=RATE, output="sos",
                                                norm="mag"),
    "chebyshev1": lambda n, wn, band: signal.cheby1(n, 1.0, wn, btype=band, fs=RATE,
                                                    output="sos"),
}


@pytest.mark.parametrize("family", list(SCIPY_DIGITAL))
@pytest.mark.parametrize("band", ["lowpass", "highpass", "bandpass", "bandstop"])
@pytest.mark.parametrize("order", [1, 2, 5, 10])
def test_tustin_prewarp_equals_scipy_digital_designs(family, band, order):
    # Reference: scipy.signal.butter/bessel/cheby1 with fs given (they prewarp every edge).
    edges = (30.0,) if band in ("lowpass", "highpass") else (12.0, 45.0)
    proto = P.band_design(family, band, order, edges, 1.0 if family == "chebyshev1" else None)
    ours = digital_response(discretize(proto, T, "tustin-prewarp"))
    wn = edges[0] if len(edges) == 1 else list(edges)
    _, ref = signal.sosfreqz(SCIPY_DIGITAL[family](order, wn, band), worN=FREQS, fs=RATE)
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)


def test_tustin_prewarp_at_a_given_frequency_matches_analog_there():
    # Definition of prewarping: the digital response equals the analog one at prewarp_hz
    # (Tustin with the frequency pre-warped by tan; common practice).
    proto = P.band_design("butterworth", "lowpass", 4, (30.0,))
    for f in (10.0, 30.0, 80.0):
        d = discretize(proto, T, "tustin-prewarp", prewarp_hz=f)
        ours = digital_response(d, np.array([f]))[0]
        assert ours == pytest.approx(proto.response(np.array([f]))[0], abs=1e-12)


def s_of_z(method: str, z: np.ndarray, t: float) -> np.ndarray:
    """The substitution each method makes (definitions, common practice)."""
    if method == "forward-euler":
        return (z - 1) / t
    if method == "backward-euler":
        return (z - 1) / (z * t)
    return 2 / t * (z - 1) / (z + 1)


@pytest.mark.parametrize("method", ["forward-euler", "backward-euler", "tustin"])
def test_order_10_bandpass_substitution_is_exact(method):
    # H_d(z) must equal H_a(s(z)) at points of the unit circle; the 20-pole prototype is
    # evaluated straight from its zeros and poles, with no degree-20 polynomial anywhere.
    proto = P.band_design("butterworth", "bandpass", 10, (2.0, 6.0))
    d = discretize(proto, T / 10 if method == "forward-euler" else T, method)
    f = np.linspace(0.3, 100.0, 57)
    z = np.exp(2j * np.pi * f * d.sample_time_s)
    s = s_of_z(method, z, d.sample_time_s)
    analog = np.full(s.shape, proto.k, complex)
    for zero in proto.z:
        analog = analog * (s - zero)
    for pole in proto.p:
        analog = analog / (s - pole)
    ours = digital_response(d, f)
    np.testing.assert_allclose(ours, analog, rtol=1e-9, atol=1e-12)


def analog_step(proto: P.AnalogPrototype, t: np.ndarray) -> np.ndarray:
    """Step response from residues of H(s)/s at distinct poles (partial fractions)."""
    y = np.full(t.shape, proto.response(np.array([0.0]))[0].real)
    for i, pole in enumerate(proto.p):
        others = np.delete(proto.p, i)
        residue = proto.k * np.prod(pole - proto.z) / np.prod(pole - others) / pole
        y = y + (residue * np.exp(pole * t)).real
    return y


@pytest.mark.parametrize("band,edges", [("lowpass", (10.0,)), ("bandpass", (8.0, 30.0))])
def test_zoh_order_10_is_step_invariant(band, edges):
    # Definition of ZOH (step invariance): the digital step response equals the analog
    # step response at the sample instants; the poles are exp(pT) (common practice; the
    # analog step response from partial fractions, residues of H(s)/s).
    proto = P.band_design("butterworth", band, 10, edges)
    d = discretize(proto, T, "zoh")
    np.testing.assert_allclose(np.sort_complex(d.poles), np.sort_complex(np.exp(proto.p * T)),
                               atol=1e-14)
    n = np.arange(400)
    ours = signal.sosfilt(d.sos(), np.ones(n.size))
    np.testing.assert_allclose(ours, analog_step(proto, n * T), atol=1e-9)


def test_matched_maps_roots_by_exp_and_matches_gain():
    # Matched z-transform: z = exp(sT) for poles and finite zeros (common practice);
    # gain matched at DC (low-pass), Nyquist vs s -> infinity (high-pass), centre (band-pass).
    low = P.band_design("chebyshev1", "lowpass", 4, (20.0,), 1.0)
    d = discretize(low, T, "matched")
    np.testing.assert_allclose(np.sort_complex(d.poles), np.sort_complex(np.exp(low.p * T)),
                               atol=1e-15)
    assert np.count_nonzero(np.isclose(d.zeros, -1.0)) == 4
    dc = digital_response(d, np.array([0.0]))[0]
    assert dc.real == pytest.approx(low.response(np.array([0.0]))[0].real, rel=1e-12)

    high = P.band_design("butterworth", "highpass", 3, (5.0,))
    d = discretize(high, T, "matched")
    assert np.allclose(d.zeros, 1.0)
    assert abs(digital_response(d, np.array([RATE / 2]))[0]) == pytest.approx(1.0, rel=1e-12)

    band = P.resonant("bandpass", 18.0, 3.0)
    d = discretize(band, T, "matched")
    assert abs(digital_response(d, np.array([18.0]))[0]) == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("method", DISCRETE_METHODS)
def test_every_method_is_stable_for_a_stable_order_10_design(method):
    proto = P.band_design("bessel", "bandstop", 10, (40.0, 60.0))
    rate = 50_000.0 if method == "forward-euler" else RATE
    d = discretize(proto, 1 / rate, method)
    assert np.max(np.abs(d.poles)) < 1.0
    assert d.sos().shape == (10, 6)


def test_unknown_method_is_refused():
    with pytest.raises(ValueError, match="method = 'impulse'"):
        discretize(P.rc("lowpass", 5.0), T, "impulse")


def test_zoh_reports_how_far_its_sections_are_from_the_exact_filter():
    # A narrow, low order-10 band-pass puts ten ZOH zeros within 1e-4 of z = 1, beyond
    # what double precision resolves; sos_error must say so, measured against the
    # residue formula of the analog step response (step invariance).
    narrow = P.band_design("butterworth", "bandpass", 10, (1.0, 3.0))
    d = discretize(narrow, T, "zoh")
    n = np.arange(1024)
    step = analog_step(narrow, n * T)
    actual = np.abs(signal.sosfilt(d.sos(), np.ones(n.size)) - step).max() / np.abs(step).max()
    assert d.sos_error > 1e-6
    assert d.sos_error == pytest.approx(actual, rel=1e-3)
    wide = discretize(P.band_design("butterworth", "bandpass", 10, (8.0, 30.0)), T, "zoh")
    assert wide.sos_error < 1e-9
