"""Analog prototypes against circuit formulas and scipy.signal's analog designs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from filters import prototypes as P


def mag(proto: P.AnalogPrototype, f: float) -> float:
    return float(abs(proto.response(np.array([f]))[0]))


def test_rc_cutoff_from_components_and_half_power_at_cutoff():
    # Electronics handbook: RC low-pass cutoff 1/(2 pi R C), |H| = 1/sqrt(2) there.
    r, c = 10e3, 2.2e-6
    proto = P.rc("lowpass", r_ohm=r, c_farad=c)
    fc = 1 / (2 * math.pi * r * c)
    assert proto.derived["cutoff_hz"] == pytest.approx(fc, rel=1e-15)
    assert proto.derived["time_constant_s"] == pytest.approx(r * c, rel=1e-15)
    assert proto.derived["r_ohm"] == r and proto.derived["c_farad"] == c
    assert mag(proto, fc) == pytest.approx(1 / math.sqrt(2), rel=1e-14)
    assert mag(proto, 0.0) == pytest.approx(1.0)


def test_rc_highpass_half_power_and_plus_45_degrees_at_cutoff():
    # Electronics handbook: first-order high-pass s/(s + w), phase +45 deg at the cutoff.
    proto = P.rc("highpass", cutoff_hz=3.0)
    h = proto.response(np.array([3.0]))[0]
    assert abs(h) == pytest.approx(1 / math.sqrt(2), rel=1e-14)
    assert math.degrees(np.angle(h)) == pytest.approx(45.0, abs=1e-12)
    assert mag(proto, 1e6) == pytest.approx(1.0, rel=1e-9)


def test_rl_cutoff_from_components():
    # Electronics handbook: RL cutoff R/(2 pi L), time constant L/R.
    proto = P.rl("lowpass", r_ohm=47.0, l_henry=0.5)
    assert proto.derived["cutoff_hz"] == pytest.approx(47.0 / (2 * math.pi * 0.5), rel=1e-15)
    assert proto.derived["time_constant_s"] == pytest.approx(0.5 / 47.0, rel=1e-15)
    assert mag(proto, proto.derived["cutoff_hz"]) == pytest.approx(1 / math.sqrt(2), rel=1e-14)
    high = P.rl("highpass", r_ohm=47.0, l_henry=0.5)
    assert mag(high, high.derived["cutoff_hz"]) == pytest.approx(1 / math.sqrt(2), rel=1e-14)


def test_series_rlc_resonance_and_q():
    # Electronics handbook: series RLC f0 = 1/(2 pi sqrt(L C)), Q = (1/R) sqrt(L/C),
    # bandwidth f0/Q; across R the response peaks at 1 at f0, across L and C it is 0 there.
    r, ell, c = 12.0, 0.05, 4.7e-4
    f0 = 1 / (2 * math.pi * math.sqrt(ell * c))
    q = math.sqrt(ell / c) / r
    band = P.rlc("bandpass", r_ohm=r, l_henry=ell, c_farad=c)
    notch = P.rlc("bandstop", r_ohm=r, l_henry=ell, c_farad=c)
    for proto in (band, notch):
        assert proto.derived["centre_hz"] == pytest.approx(f0, rel=1e-14)
        assert proto.derived["q"] == pytest.approx(q, rel=1e-14)
        assert proto.derived["bandwidth_hz"] == pytest.approx(f0 / q, rel=1e-14)
    assert mag(band, f0) == pytest.approx(1.0, rel=1e-12)
    assert mag(notch, f0) < 1e-12
    # The -3 dB edges of the band-pass are bandwidth f0/Q apart and straddle f0 geometrically.
    lo, hi = band.check_hz[1], band.check_hz[2]
    assert hi - lo == pytest.approx(f0 / q, rel=1e-12)
    assert math.sqrt(lo * hi) == pytest.approx(f0, rel=1e-12)
    for edge in (lo, hi):
        assert mag(band, edge) == pytest.approx(1 / math.sqrt(2), rel=1e-10)
        assert mag(notch, edge) == pytest.approx(1 / math.sqrt(2), rel=1e-10)
    # Transfer function of the band-pass across R: (R/L) s / (s^2 + (R/L) s + 1/(L C)).
    b, a = band.tf()
    np.testing.assert_allclose(b, [r / ell, 0.0], rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(a, [1.0, r / ell, 1 / (ell * c)], rtol=1e-12)


def test_second_order_lowpass_gain_q_at_natural_frequency():
    # w0^2/(s^2 + (w0/Q) s + w0^2) has |H(j w0)| = Q and phase -90 deg (textbook identity).
    proto = P.resonant("lowpass", 12.0, 2.5)
    h = proto.response(np.array([12.0]))[0]
    assert abs(h) == pytest.approx(2.5, rel=1e-12)
    assert math.degrees(np.angle(h)) == pytest.approx(-90.0, abs=1e-9)
    assert mag(proto, 0.0) == pytest.approx(1.0)


@pytest.mark.parametrize("band,edges", [("lowpass", (10.0,)), ("highpass", (10.0,)),
                                        ("bandpass", (5.0, 20.0)), ("bandstop", (5.0, 20.0))])
@pytest.mark.parametrize("order", [1, 3, 10])
def test_band_designs_equal_scipy_analog(band, edges, order):
    # scipy.signal.butter/bessel/cheby1 with analog=True are the reference.
    wn = [2 * math.pi * e for e in edges]
    wn = wn[0] if len(wn) == 1 else wn
    f = np.geomspace(0.1, 200.0, 60)
    refs = {
        "butterworth": signal.butter(order, wn, btype=band, analog=True, output="zpk"),
        "bessel": signal.bessel(order, wn, btype=band, analog=True, output="zpk", norm="mag"),
        "chebyshev1": signal.cheby1(order, 0.5, wn, btype=band, analog=True, output="zpk"),
    }
    for family, (z, p, k) in refs.items():
        proto = P.band_design(family, band, order, edges, 0.5 if family == "chebyshev1" else None)
        assert proto.order == len(p) == (order if len(edges) == 1 else 2 * order)
        _, h_ref = signal.freqs_zpk(z, p, k, worN=2 * np.pi * f)
        np.testing.assert_allclose(proto.response(f), h_ref, rtol=1e-10, atol=1e-13)


def test_order_10_bandpass_kept_in_zpk_is_accurate_at_its_edges():
    # Butterworth: -3 dB at both band edges by definition (scipy.signal.butter docs).
    proto = P.band_design("butterworth", "bandpass", 10, (8.0, 30.0))
    for edge in (8.0, 30.0):
        assert mag(proto, edge) == pytest.approx(1 / math.sqrt(2), rel=1e-10)
    assert mag(proto, math.sqrt(8.0 * 30.0)) == pytest.approx(1.0, rel=1e-10)


def test_bessel_norms_and_chebyshev_ripple_at_cutoff():
    # scipy.signal.bessel norm="mag": -3 dB at the cutoff; cheby1: -ripple dB at the cutoff.
    bessel = P.band_design("bessel", "lowpass", 6, (10.0,), norm="mag")
    assert mag(bessel, 10.0) == pytest.approx(1 / math.sqrt(2), rel=1e-10)
    delay = P.band_design("bessel", "lowpass", 6, (10.0,), norm="delay")
    assert mag(delay, 10.0) != pytest.approx(1 / math.sqrt(2), rel=1e-3)
    cheb = P.band_design("chebyshev1", "lowpass", 5, (10.0,), ripple_db=2.0)
    assert 20 * math.log10(mag(cheb, 10.0)) == pytest.approx(-2.0, abs=1e-9)


def test_prototype_for_reads_stage_parameters():
    proto = P.prototype_for("rc-highpass", {"r_ohm": 1e3, "c_farad": 1e-4})
    assert proto.band == "highpass"
    # RC cutoff 1/(2 pi R C), any electronics handbook (R C = 0.1 s here)
    assert proto.derived["cutoff_hz"] == pytest.approx(1 / (2 * math.pi * 0.1))
    proto = P.prototype_for("chebyshev1", {"band": "bandstop", "order": 2, "low_hz": 40.0,
                                           "high_hz": 60.0, "ripple_db": 1.0})
    assert proto.edges_hz == (40.0, 60.0) and proto.order == 4
    # centre of a band design: the geometric mean sqrt(f_low f_high) of its edges, as the
    # lowpass-to-bandstop transform places it (scipy.signal.lp2bs: w0 = sqrt(w1 w2))
    assert proto.derived["centre_hz"] == pytest.approx(math.sqrt(2400.0))
    with pytest.raises(ValueError, match="kind"):
        P.prototype_for("median", {})


def test_at_edges_redesigns_at_new_frequencies():
    proto = P.rc("lowpass", r_ohm=1e3, c_farad=1e-5).at_edges((20.0,))
    assert proto.edges_hz == (20.0,)
    # RC low-pass: |H| = 1/sqrt(2) (-3 dB) at its cutoff, any electronics handbook
    assert mag(proto, 20.0) == pytest.approx(1 / math.sqrt(2), rel=1e-14)
