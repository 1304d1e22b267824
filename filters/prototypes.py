"""Continuous-time prototypes of every analog stage kind, in zero-pole-gain form.

Handbook circuit formulas (any electronics handbook):
  RC:  cutoff 1/(2 pi R C), time constant R C.
  RL:  cutoff R/(2 pi L), time constant L/R.
  series RLC: f0 = 1/(2 pi sqrt(L C)), Q = (1/R) sqrt(L/C); band-pass taken across R,
       H(s) = (R/L) s / (s^2 + (R/L) s + 1/(L C)); notch taken across L and C,
       H(s) = (s^2 + 1/(L C)) / (s^2 + (R/L) s + 1/(L C)).
  second-order low-pass: w0^2 / (s^2 + (w0/Q) s + w0^2).
Butterworth, Bessel and Chebyshev type I come from scipy.signal.butter/bessel/cheby1
with analog=True and output="zpk". Every prototype stays in zpk form: the
transfer-function polynomials of an order-10 band-pass are of degree 20 and
lose most of their digits, so (b, a) is offered only as a convenience.

Frequencies are in Hz in the public fields; z, p are in rad/s.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

BAND_FAMILIES: tuple[str, ...] = ("butterworth", "bessel", "chebyshev1")


@dataclass(frozen=True)
class AnalogPrototype:
    """A continuous-time filter H(s) = k prod(s - z) / prod(s - p).

    z, p:      zeros and poles in rad/s, complex arrays (zeros at infinity are absent).
    k:         gain (float).
    band:      "lowpass", "highpass", "bandpass" or "bandstop": decides where the
               matched method matches gain and which points a report shows.
    edges_hz:  the characteristic frequencies (Hz): (cutoff,) for low/high-pass,
               (centre,) for RLC and second-order kinds, (low, high) for band designs.
    check_hz:  frequencies (Hz) where the analog response is characteristic, used to
               compare the digital design against it (cutoff, edges, or centre).
    derived:   cutoff_hz, centre_hz, q, time_constant_s, bandwidth_hz and the
               components, as the kind has them.
    """

    z: np.ndarray
    p: np.ndarray
    k: float
    band: str
    edges_hz: tuple[float, ...]
    check_hz: tuple[float, ...]
    derived: dict[str, float]
    rebuild: Callable[[tuple[float, ...]], AnalogPrototype] | None = field(
        default=None, repr=False, compare=False)

    @property
    def order(self) -> int:
        """Number of poles."""
        return len(self.p)

    def tf(self) -> tuple[np.ndarray, np.ndarray]:
        """(b, a) in s, descending powers; numerically poor above order ~8."""
        from scipy import signal

        b, a = signal.zpk2tf(self.z, self.p, self.k)
        return np.real(np.asarray(b, dtype=complex)), np.real(np.asarray(a, dtype=complex))

    def response(self, freqs_hz: np.ndarray) -> np.ndarray:
        """H(j 2 pi f) at freqs_hz (Hz, any shape) -> complex array of the same shape."""
        return zpk_response(self.z, self.p, self.k, 2j * np.pi * np.asarray(freqs_hz, float))

    def at_edges(self, edges_hz: tuple[float, ...]) -> AnalogPrototype:
        """The same prototype redesigned at other characteristic frequencies (prewarp)."""
        if self.rebuild is None:
            raise ValueError("this prototype cannot be redesigned at other frequencies")
        return self.rebuild(tuple(edges_hz))


def zpk_response(z: np.ndarray, p: np.ndarray, k: float, s: np.ndarray) -> np.ndarray:
    """k prod(s - z) / prod(s - p) at complex points s (any shape), factor by factor
    so that high orders keep their accuracy."""
    h = np.full(np.shape(s), k, dtype=complex)
    for zero in z:
        h = h * (s - zero)
    for pole in p:
        h = h / (s - pole)
    return h


def _zpk(z, p, k: float, band: str, edges, check, derived, rebuild) -> AnalogPrototype:
    return AnalogPrototype(np.asarray(z, dtype=complex), np.asarray(p, dtype=complex),
                           float(k), band, tuple(float(e) for e in edges),
                           tuple(float(c) for c in check), dict(derived), rebuild)


def first_order(band: str, cutoff_hz: float, derived: dict[str, float] | None = None
                ) -> AnalogPrototype:
    """w/(s + w) (band "lowpass") or s/(s + w) ("highpass"), w = 2 pi cutoff_hz."""
    w = 2 * math.pi * cutoff_hz
    info = {"cutoff_hz": cutoff_hz, "time_constant_s": 1 / w, **(derived or {})}

    def rebuild(edges: tuple[float, ...]) -> AnalogPrototype:
        return first_order(band, edges[0], derived)

    if band == "lowpass":
        return _zpk([], [-w], w, band, (cutoff_hz,), (cutoff_hz,), info, rebuild)
    return _zpk([0.0], [-w], 1.0, band, (cutoff_hz,), (cutoff_hz,), info, rebuild)


def _power(*factors: tuple[float, float]) -> float:
    """prod(value ** exponent) over (value, exponent) pairs of positive finite values,
    computed through logarithms so that it is inf or 0 where the true value lies beyond
    the float range, never an OverflowError or a division by zero on the way (R = 1e-200
    and C = 1e-200 give R C = 1e-400, which the plain product rounds to 0)."""
    log = sum(exponent * math.log(value) for value, exponent in factors)
    if log > 709.78:             # ln(1.797e308), the largest float
        return math.inf
    return math.exp(log)         # underflows quietly to 0.0


def _formula(plain, *factors: tuple[float, float]) -> float:
    """plain() (the handbook formula as written, to its last digit) where its steps stay
    within the float range, else _power(*factors), the same value through logarithms."""
    safe = _power(*factors)
    try:
        value = plain()
    except ArithmeticError:          # a product on the way left the float range
        return safe
    return value if abs(value - safe) <= 1e-9 * safe else safe


def rc_cutoff_hz(r_ohm: float, c_farad: float) -> float:
    """1 / (2 pi R C) (Hz), inf or 0 beyond the float range."""
    return _formula(lambda: 1 / (2 * math.pi * r_ohm * c_farad),
                    (r_ohm, -1.0), (c_farad, -1.0), (2 * math.pi, -1.0))


def rl_cutoff_hz(r_ohm: float, l_henry: float) -> float:
    """R / (2 pi L) (Hz), inf or 0 beyond the float range."""
    return _formula(lambda: r_ohm / (2 * math.pi * l_henry),
                    (r_ohm, 1.0), (l_henry, -1.0), (2 * math.pi, -1.0))


def rlc_centre_q(r_ohm: float, l_henry: float, c_farad: float) -> tuple[float, float]:
    """Series RLC: (f0 = 1/(2 pi sqrt(L C)) in Hz, Q = sqrt(L/C) / R), inf or 0 beyond
    the float range."""
    return (_formula(lambda: 1 / (2 * math.pi * math.sqrt(l_henry * c_farad)),
                     (l_henry, -0.5), (c_farad, -0.5), (2 * math.pi, -1.0)),
            _formula(lambda: math.sqrt(l_henry / c_farad) / r_ohm,
                     (l_henry, 0.5), (c_farad, -0.5), (r_ohm, -1.0)))


def rc(band: str, cutoff_hz: float | None = None, r_ohm: float | None = None,
       c_farad: float | None = None) -> AnalogPrototype:
    """RC low-/high-pass from the cutoff (Hz) or from R (ohm) and C (farad)."""
    if r_ohm is not None and c_farad is not None:
        return first_order(band, rc_cutoff_hz(r_ohm, c_farad),
                           {"r_ohm": r_ohm, "c_farad": c_farad})
    return first_order(band, float(cutoff_hz))


def rl(band: str, cutoff_hz: float | None = None, r_ohm: float | None = None,
       l_henry: float | None = None) -> AnalogPrototype:
    """RL low-/high-pass from the cutoff (Hz) or from R (ohm) and L (henry)."""
    if r_ohm is not None and l_henry is not None:
        return first_order(band, rl_cutoff_hz(r_ohm, l_henry),
                           {"r_ohm": r_ohm, "l_henry": l_henry})
    return first_order(band, float(cutoff_hz))


def resonant(band: str, centre_hz: float, q: float, derived: dict[str, float] | None = None
             ) -> AnalogPrototype:
    """A second-order section with natural frequency centre_hz and quality factor q.

    band "lowpass":  w0^2 / (s^2 + (w0/q) s + w0^2)   (second-order-lowpass)
    band "bandpass": (w0/q) s / (...)                 (series RLC across R)
    band "bandstop": (s^2 + w0^2) / (...)             (series RLC across L and C)
    """
    w0 = 2 * math.pi * centre_hz
    poles = np.roots([1.0, w0 / q, w0 * w0])
    half_bw = centre_hz / (2 * q)
    edge_lo = math.sqrt(centre_hz**2 + half_bw**2) - half_bw
    edge_hi = edge_lo + 2 * half_bw
    info = {"centre_hz": centre_hz, "q": q, **(derived or {})}
    if band == "lowpass":
        info = {"cutoff_hz": centre_hz, **info}
        z, k, check = [], w0 * w0, (centre_hz,)
    elif band == "bandpass":
        info["bandwidth_hz"] = centre_hz / q
        z, k, check = [0.0], w0 / q, (centre_hz, edge_lo, edge_hi)
    else:
        info["bandwidth_hz"] = centre_hz / q
        z, k, check = [1j * w0, -1j * w0], 1.0, (edge_lo, edge_hi)

    def rebuild(edges: tuple[float, ...]) -> AnalogPrototype:
        return resonant(band, edges[0], q, derived)

    return _zpk(z, poles, k, band, (centre_hz,), check, info, rebuild)


def rlc(band: str, centre_hz: float | None = None, q: float | None = None,
        r_ohm: float | None = None, l_henry: float | None = None,
        c_farad: float | None = None) -> AnalogPrototype:
    """Series RLC band-pass (across R) or notch (across L and C), from centre and Q or R, L, C."""
    if r_ohm is not None and l_henry is not None and c_farad is not None:
        centre_hz, q = rlc_centre_q(r_ohm, l_henry, c_farad)
        return resonant(band, centre_hz, q,
                        {"r_ohm": r_ohm, "l_henry": l_henry, "c_farad": c_farad})
    return resonant(band, float(centre_hz), float(q))


def band_design(family: str, band: str, order: int, edges_hz: tuple[float, ...],
                ripple_db: float | None = None, norm: str = "mag") -> AnalogPrototype:
    """Butterworth, Bessel or Chebyshev I of `order` (1..10) through scipy.signal.

    edges_hz: (cutoff,) for lowpass/highpass, (low, high) for bandpass/bandstop (Hz).
    A band-pass or band-stop has 2 * order poles, as in scipy.signal.
    """
    from scipy import signal

    wn = [2 * math.pi * e for e in edges_hz]
    wn_arg = wn[0] if len(wn) == 1 else wn
    if family == "butterworth":
        z, p, k = signal.butter(order, wn_arg, btype=band, analog=True, output="zpk")
    elif family == "bessel":
        z, p, k = signal.bessel(order, wn_arg, btype=band, analog=True, output="zpk", norm=norm)
    else:
        z, p, k = signal.cheby1(order, ripple_db, wn_arg, btype=band, analog=True, output="zpk")
    derived: dict[str, float] = {"order": float(order)}
    if len(edges_hz) == 1:
        derived["cutoff_hz"] = edges_hz[0]
    else:
        derived.update(low_hz=edges_hz[0], high_hz=edges_hz[1],
                       centre_hz=math.sqrt(edges_hz[0] * edges_hz[1]),
                       bandwidth_hz=edges_hz[1] - edges_hz[0])
    if ripple_db is not None:
        derived["ripple_db"] = ripple_db

    def rebuild(edges: tuple[float, ...]) -> AnalogPrototype:
        return band_design(family, band, order, edges, ripple_db, norm)

    return _zpk(z, p, k, band, edges_hz, edges_hz, derived, rebuild)


def prototype_for(kind: str, params: dict[str, object]) -> AnalogPrototype:
    """The prototype of an analog stage kind from already validated parameters."""
    get = params.get
    if kind in ("rc-lowpass", "rc-highpass"):
        return rc(kind[3:], get("cutoff_hz"), get("r_ohm"), get("c_farad"))
    if kind in ("rl-lowpass", "rl-highpass"):
        return rl(kind[3:], get("cutoff_hz"), get("r_ohm"), get("l_henry"))
    if kind in ("rlc-bandpass", "rlc-notch"):
        band = "bandpass" if kind == "rlc-bandpass" else "bandstop"
        return rlc(band, get("centre_hz"), get("q"), get("r_ohm"), get("l_henry"), get("c_farad"))
    if kind == "second-order-lowpass":
        return resonant("lowpass", float(get("cutoff_hz")), float(get("q")))
    if kind in BAND_FAMILIES:
        band = str(get("band", "lowpass"))
        if band in ("lowpass", "highpass"):
            edges: tuple[float, ...] = (float(get("cutoff_hz")),)
        else:
            edges = (float(get("low_hz")), float(get("high_hz")))
        ripple = float(get("ripple_db")) if kind == "chebyshev1" else None
        return band_design(kind, band, int(get("order")), edges, ripple,
                           str(get("norm", "mag")))
    raise ValueError(f"kind = {kind!r} is not an analog prototype")
