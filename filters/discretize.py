"""Analog prototype -> digital filter at sample time T, as zeros/poles/gain and SOS.

Methods (s is the Laplace variable, z the shift operator):
  forward-euler   s = (z - 1)/T             root a -> 1 + aT; zeros at infinity stay
                                            there (a pure delay), like cont2discrete "euler".
  backward-euler  s = (z - 1)/(zT)          root a -> 1/(1 - aT); zeros at infinity -> z = 0.
  tustin          s = (2/T)(z - 1)/(z + 1)  scipy.signal.bilinear_zpk; zeros at inf -> z = -1.
  tustin-prewarp  Tustin after prewarping: without prewarp_hz, every characteristic
                  frequency of the prototype (the cutoff, the centre, or both band
                  edges) is replaced by (fs/pi) tan(pi f/fs) and the prototype is
                  redesigned, exactly what scipy.signal.butter/bessel/cheby1 do when
                  given fs; with prewarp_hz the whole s-plane is scaled so that this
                  one frequency maps exactly (s = w/tan(wT/2) (z - 1)/(z + 1)).
  zoh             step invariance through scipy.signal.cont2discrete on a cascade
                  state space (see _zoh for why not on the transfer function).
  matched         pole-zero mapping z = exp(aT) for every finite pole and zero; each
                  zero at infinity goes to z = -1 (Nyquist); the gain is matched at DC
                  for low-pass, at Nyquist (digital) against s -> infinity (analog) for
                  high-pass, at the centre for band-pass and at DC for band-stop. This
                  convention is common practice; texts differ on the excess zeros.

The substitution methods are written as root maps rather than as calls to
cont2discrete on (b, a): a root map is exact per root, while the polynomials of
an order-10 band-pass (degree 20) carry too few correct digits. The tests check
every method against cont2discrete on prototypes small enough for its tf path.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace

import numpy as np

from filters.prototypes import AnalogPrototype

DISCRETE_METHODS: tuple[str, ...] = (
    "forward-euler", "backward-euler", "tustin", "tustin-prewarp", "zoh", "matched",
)


@dataclass(frozen=True)
class DigitalZpk:
    """H(z) = k prod(z - zeros) / prod(z - poles); fewer zeros than poles means a delay.

    zeros, poles: complex arrays; k: float; sample_time_s: T in seconds.
    sos_error:    largest step-response difference between sos() and the exact
                  discretization, relative to the response's peak (zoh only, where the
                  zeros are computed; 0.0 for the methods that map roots exactly).
    """

    zeros: np.ndarray
    poles: np.ndarray
    k: float
    sample_time_s: float
    sos_error: float = 0.0
    known_sos: np.ndarray | None = field(default=None, repr=False, compare=False)

    def sos(self) -> np.ndarray:
        """(m, 6) float64 second-order sections, scipy layout [b0 b1 b2 1 a1 a2]."""
        if self.known_sos is not None:     # zoh computes them once for its own check
            return self.known_sos.copy()
        return zpk_to_sos(self.zeros, self.poles, self.k)


def zpk_to_sos(zeros: np.ndarray, poles: np.ndarray, k: float) -> np.ndarray:
    """Second-order sections of k prod(z - zeros)/prod(z - poles), delays kept.

    scipy.signal.zpk2sos pads missing zeros with zeros at the origin, which
    advances the filter by one sample per missing zero; the numerators are
    shifted back here so the sections equal the given H(z) exactly.
    """
    from scipy import signal

    zeros = np.asarray(zeros, dtype=complex)
    poles = np.asarray(poles, dtype=complex)
    delay = len(poles) - len(zeros)
    if delay < 0:
        raise ValueError("an improper digital filter (more zeros than poles) has no SOS form")
    sos = np.array(signal.zpk2sos(zeros, poles, k), dtype=np.float64)
    for row in sos:
        while delay and row[2] == 0.0 and (row[0] != 0.0 or row[1] != 0.0):
            row[0:3] = (0.0, row[0], row[1])
            delay -= 1
    if delay:  # not reached for scipy's padding; kept so the result is never wrong
        sos = np.vstack([sos] + [[0.0, 1.0, 0.0, 1.0, 0.0, 0.0]] * delay)
    return sos


def prewarp_edges(edges_hz: tuple[float, ...], rate_hz: float) -> tuple[float, ...]:
    """Analog frequencies that Tustin maps onto edges_hz: (fs/pi) tan(pi f/fs)."""
    return tuple(rate_hz / math.pi * math.tan(math.pi * f / rate_hz) for f in edges_hz)


def discretize(proto: AnalogPrototype, sample_time_s: float, method: str,
               prewarp_hz: float | None = None) -> DigitalZpk:
    """The prototype at sample time T (s) by `method` (one of DISCRETE_METHODS)."""
    from scipy import signal

    t = float(sample_time_s)
    z, p, k = proto.z, proto.p, proto.k
    excess = len(p) - len(z)
    if method == "forward-euler":
        return DigitalZpk(1 + z * t, 1 + p * t, float(k * t**excess), t)
    if method == "backward-euler":
        gain = k * t**excess * np.prod(1 - z * t) / np.prod(1 - p * t)
        zd = np.concatenate([1 / (1 - z * t), np.zeros(excess)])
        return DigitalZpk(zd, 1 / (1 - p * t), float(np.real(gain)), t)
    if method in ("tustin", "tustin-prewarp"):
        fs = 1.0 / t
        if method == "tustin-prewarp":
            if prewarp_hz is not None:
                w = 2 * math.pi * prewarp_hz
                fs = w / (2 * math.tan(w * t / 2))
            else:
                proto = proto.at_edges(prewarp_edges(proto.edges_hz, 1.0 / t))
                z, p, k = proto.z, proto.p, proto.k
        zd, pd, kd = signal.bilinear_zpk(z, p, k, fs)
        return DigitalZpk(np.asarray(zd, complex), np.asarray(pd, complex), float(kd), t)
    if method == "zoh":
        return _zoh(proto, t)
    if method == "matched":
        return _matched(proto, t)
    raise ValueError(f"method = {method!r} is unknown; allowed: {', '.join(DISCRETE_METHODS)}")


def _unit_gain_response(zeros: np.ndarray, poles: np.ndarray, at: complex) -> complex:
    return complex(np.prod(at - zeros) / np.prod(at - poles))


def _matched(proto: AnalogPrototype, t: float) -> DigitalZpk:
    zd = np.concatenate([np.exp(proto.z * t), -np.ones(len(proto.p) - len(proto.z))])
    pd = np.exp(proto.p * t)
    if proto.band == "highpass":
        analog = proto.k  # H(s) -> k as s -> infinity (as many zeros as poles)
        at = -1.0 + 0j
    elif proto.band == "bandpass":
        centre = math.sqrt(proto.edges_hz[0] * proto.edges_hz[-1])
        analog = complex(proto.response(np.array([centre]))[0])
        at = complex(np.exp(2j * math.pi * centre * t))
    else:
        analog = complex(proto.response(np.array([0.0]))[0])
        at = 1.0 + 0j
    unit = _unit_gain_response(zd, pd, at)
    ratio = analog / unit
    sign = -1.0 if ratio.real < 0 else 1.0
    return DigitalZpk(zd, pd, sign * abs(analog) / abs(unit), t)


def _cascade_state_space(proto: AnalogPrototype):
    """A well-conditioned (A, B, C, D) of the prototype: its analog sections in series."""
    from scipy import signal

    sections = signal.zpk2sos(proto.z, proto.p, proto.k, analog=True)
    a_mat = np.zeros((0, 0))
    b_vec = np.zeros((0, 1))
    c_vec = np.zeros((1, 0))
    d = 1.0
    for row in sections:
        num, den = np.trim_zeros(row[:3], "f"), np.trim_zeros(row[3:], "f")
        if len(den) == 1:  # a constant section (gain only)
            d_scale = num[0] / den[0] if len(num) else 0.0
            c_vec, d = c_vec * d_scale, d * d_scale
            continue
        with warnings.catch_warnings():  # tiny gains of sample-time units are not an error
            warnings.simplefilter("ignore", signal.BadCoefficients)
            a2, b2, c2, d2 = signal.tf2ss(num, den)
        n1, n2 = a_mat.shape[0], a2.shape[0]
        a_new = np.zeros((n1 + n2, n1 + n2))
        a_new[:n1, :n1] = a_mat
        a_new[n1:, :n1] = b2 @ c_vec
        a_new[n1:, n1:] = a2
        b_vec = np.vstack([b_vec, b2 * d])
        c_vec = np.hstack([d2 @ c_vec, c2])
        a_mat, d = a_new, float(d2[0, 0] * d)
    return a_mat, b_vec, c_vec, np.array([[d]])


def _zoh(proto: AnalogPrototype, t: float) -> DigitalZpk:
    """Step-invariant discretization, accurate at order 20.

    cont2discrete(method="zoh") on the cascade state space gives (Ad, Bd, C, D).
    The poles are exp(pT) exactly; the zeros are the finite generalized eigenvalues
    of the system pencil [[Ad, Bd], [C, D]] - z [[I, 0], [0, 0]] (n - 1 of them for a
    strictly proper prototype, n otherwise); the gain follows from H(z0) = C (z0 I - Ad)^-1 Bd + D
    at a point z0 away from poles and zeros. This avoids the degree-20 polynomials
    that scipy's ss2tf would form. Zeros that crowd around z = 1 (a narrow low band-pass
    of high order) are ill-conditioned in any double-precision state space, so the
    sections are checked against the exact state-space step response (sos_error).
    """
    from scipy import linalg, signal

    # Work in time measured in samples (roots scaled by T, dt = 1): the state space then
    # holds numbers near 1 and the far sampling zeros of an order-10 design stay accurate.
    excess = len(proto.p) - len(proto.z)
    scaled = replace(proto, z=proto.z * t, p=proto.p * t, k=proto.k * t**excess)
    a_mat, b_vec, c_vec, d_mat = _cascade_state_space(scaled)
    ad, bd, cd, dd, _ = signal.cont2discrete((a_mat, b_vec, c_vec, d_mat), 1.0, method="zoh")
    n = ad.shape[0]
    pencil_m = np.block([[ad, bd], [cd, dd]])
    pencil_n = np.zeros((n + 1, n + 1))
    pencil_n[:n, :n] = np.eye(n)
    alpha, beta = linalg.eig(pencil_m, pencil_n, right=False, homogeneous_eigvals=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        candidates = alpha / beta
    candidates = candidates[np.isfinite(candidates)]
    wanted = n if abs(dd[0, 0]) > 1e-14 * max(1.0, np.abs(cd).max()) else n - 1
    zeros = candidates[np.argsort(np.abs(candidates))][:wanted]
    zeros = _conjugate_clean(zeros)
    poles = np.exp(proto.p * t)
    at = 1.3 + 1.1j  # any point off the unit circle and away from the roots
    value = complex((cd @ np.linalg.solve(at * np.eye(n) - ad, bd) + dd)[0, 0])
    k = value / _unit_gain_response(zeros, poles, at)
    digital = DigitalZpk(zeros, poles, float(k.real), t)
    sos = digital.sos()
    return replace(digital, sos_error=_step_mismatch(sos, ad, bd, cd, dd), known_sos=sos)


def _step_mismatch(sos: np.ndarray, ad, bd, cd, dd, samples: int = 1024) -> float:
    """Largest |sosfilt step - state-space step| over `samples`, relative to the peak."""
    from scipy import signal

    # The state-space step response y[k] = D + sum_{j<k} C A^j B, with the columns
    # A^j B (j < samples) built by doubling, [X, A^m X], so that it costs log2(samples)
    # matrix products instead of a Python loop of `samples` steps (30 ms per design).
    powers = bd[:, :1]
    step = ad
    while powers.shape[1] < samples:
        powers = np.hstack([powers, step @ powers])
        step = step @ step
    impulse = (cd[0] @ powers[:, :samples - 1])
    exact = dd[0, 0] + np.concatenate([[0.0], np.cumsum(impulse)])
    ours = signal.sosfilt(sos, np.ones(samples))
    peak = float(np.abs(exact).max())
    return float(np.abs(ours - exact).max() / peak) if peak > 0 else 0.0


def _conjugate_clean(roots: np.ndarray) -> np.ndarray:
    """Exact conjugate pairs and exactly real roots, as zpk2sos needs them."""
    roots = np.asarray(roots, dtype=complex)
    real = np.abs(roots.imag) < 1e-9 * np.maximum(1.0, np.abs(roots))
    upper = roots[~real & (roots.imag > 0)]
    if 2 * len(upper) != int(np.count_nonzero(~real)):
        return roots
    return np.concatenate([roots[real].real.astype(complex), upper, upper.conj()])
