"""Analog stage kinds: validate parameters, build the prototype, discretize, warn.

Called by filters.design.design_stage for every kind whose KindInfo.analog is True.
"""

from __future__ import annotations

import numpy as np

from filters.checks import (
    below_nyquist,
    check_q,
    choice,
    echo,
    fmt,
    integer,
    near_nyquist,
    not_too_low,
    number,
    positive,
)
from filters.design import StageDesign
from filters.discretize import discretize
from filters.kinds import BANDS, BESSEL_NORMS, ORDER_RANGE
from filters.prototypes import (
    BAND_FAMILIES,
    AnalogPrototype,
    prototype_for,
    rc_cutoff_hz,
    rl_cutoff_hz,
    rlc_centre_q,
)
from filters.spec import METHODS

# The digital response may differ from the analog one by this much at the cutoff (dB).
MISMATCH_WARN_DB = 1.0
# zoh sections that differ from the exact step-invariant filter by more than this
# fraction of the step response's peak are warned about.
ZOH_ERROR_WARN = 1e-6
# Forward Euler is warned about when T exceeds this fraction of the largest stable T.
EULER_WARN_FRACTION = 0.8
# Chebyshev type I passband ripple (dB). Designs use 0.01 to 3 dB (common practice);
# these bounds only keep 10^(ripple/10) - 1, which scipy.signal.cheby1 divides by and
# raises to powers, away from 0 and from overflow.
RIPPLE_DB_RANGE = (1e-6, 100.0)

_COMPONENT_UNITS = {"r_ohm": " ohm", "c_farad": " F", "l_henry": " H"}
_COMPONENT_SETS = {
    "rc-lowpass": ("r_ohm", "c_farad"), "rc-highpass": ("r_ohm", "c_farad"),
    "rl-lowpass": ("r_ohm", "l_henry"), "rl-highpass": ("r_ohm", "l_henry"),
    "rlc-bandpass": ("r_ohm", "l_henry", "c_farad"), "rlc-notch": ("r_ohm", "l_henry", "c_farad"),
}


def largest_stable_forward_euler_t(proto: AnalogPrototype) -> float:
    """Largest T (s) for which forward Euler keeps every pole inside the unit circle.

    A pole p maps to 1 + pT, and |1 + pT| < 1 exactly when T < -2 Re(p) / |p|^2
    (2 RC for an RC network, whose pole is -1/RC).
    """
    p = proto.p
    return float(np.min(-2 * p.real / np.abs(p) ** 2))


def _check_parameters(kind: str, params: dict[str, object], rate_hz: float) -> None:
    choice(params, "method", METHODS)
    for key, unit in _COMPONENT_UNITS.items():
        positive(params, key, unit)
    components = _COMPONENT_SETS.get(kind, ())
    has_components = bool(components) and all(k in params for k in components)
    if has_components and ("cutoff_hz" in params or "centre_hz" in params):
        given = "cutoff_hz" if "cutoff_hz" in params else "centre_hz"
        raise ValueError(f"kind {kind!r} takes {given} or {' + '.join(components)}, not both")
    for key in ("q", "ripple_db"):
        positive(params, key)
    if "ripple_db" in params:
        ripple, (low_db, high_db) = number(params, "ripple_db"), RIPPLE_DB_RANGE
        if not low_db <= ripple <= high_db:
            raise ValueError(f"ripple_db = {fmt(ripple)} is outside the allowed range "
                             f"{fmt(low_db)} to {fmt(high_db)} dB")
    if kind in BAND_FAMILIES:
        band = choice(params, "band", BANDS)
        if kind == "bessel":
            choice(params, "norm", BESSEL_NORMS)
        order = integer(params, "order")
        low, high = ORDER_RANGE
        if not low <= order <= high:
            raise ValueError(f"order = {echo(order)} is outside the allowed range {low} to "
                             f"{high}")
        if band in ("lowpass", "highpass"):
            if "cutoff_hz" not in params or "low_hz" in params or "high_hz" in params:
                raise ValueError(f"band = {band!r} takes cutoff_hz (low_hz and high_hz are for "
                                 f"bandpass and bandstop)")
        else:
            if "low_hz" not in params or "high_hz" not in params or "cutoff_hz" in params:
                raise ValueError(f"band = {band!r} takes low_hz and high_hz, not cutoff_hz")
            lo, hi = number(params, "low_hz"), number(params, "high_hz")
            below_nyquist("low_hz", lo, rate_hz)
            below_nyquist("high_hz", hi, rate_hz)
            if lo >= hi:
                raise ValueError(f"low_hz = {fmt(lo)} Hz must be below high_hz = {fmt(hi)} Hz")
            not_too_low("the band high_hz - low_hz is", hi - lo, rate_hz,
                        "widen the band or sample slower")
    for key in ("cutoff_hz", "centre_hz"):
        if key in params:
            below_nyquist(key, number(params, key), rate_hz)
    if "prewarp_hz" in params:
        below_nyquist("prewarp_hz", number(params, "prewarp_hz"), rate_hz)
    _check_from_components(kind, params, rate_hz)
    if kind.startswith("rlc") and "q" in params and "centre_hz" in params:
        check_q("q", number(params, "q"), number(params, "centre_hz"), rate_hz)
    if kind == "second-order-lowpass":
        check_q("q", number(params, "q"), number(params, "cutoff_hz"), rate_hz)


def _check_from_components(kind: str, params: dict[str, object], rate_hz: float) -> None:
    """A cutoff or centre (and Q) computed from components must lie in range too; they are
    computed through logarithms (filters.prototypes), so extreme parts give inf or 0
    here and a sentence, not an overflow."""
    components = _COMPONENT_SETS.get(kind, ())
    if not components or not all(k in params for k in components):
        return
    r, other = float(params["r_ohm"]), float(params[components[1]])
    q = None
    if kind.startswith("rlc"):
        key = "centre_hz"
        value, q = rlc_centre_q(r, other, float(params["c_farad"]))
    else:
        key = "cutoff_hz"
        value = rc_cutoff_hz(r, other) if kind.startswith("rc") else rl_cutoff_hz(r, other)
    given = " and ".join(f"{k} = {fmt(float(params[k]))}" for k in components)
    nyquist = rate_hz / 2
    if value >= nyquist:
        raise ValueError(
            f"{given} give {key} = {fmt(value)} Hz, at or above the Nyquist frequency "
            f"{fmt(nyquist)} Hz; allowed: {key} below {fmt(nyquist)} Hz (larger components "
            f"or a higher sample rate)")
    not_too_low(f"{given} give {key} =", value, rate_hz,
                "give smaller components or sample slower")
    if q is not None:
        check_q(f"{', '.join(components[:-1])} and {components[-1]} give q", q, value, rate_hz)


def _mismatch_db(proto: AnalogPrototype, sos: np.ndarray, rate_hz: float) -> tuple[float, float]:
    """Largest |digital - analog| in dB over the prototype's characteristic frequencies."""
    from scipy import signal

    freqs = np.array(proto.check_hz)
    _, digital = signal.sosfreqz(sos, worN=freqs, fs=rate_hz)
    analog = proto.response(freqs)
    diff = 20 * np.log10(np.maximum(np.abs(digital), 1e-15)) - 20 * np.log10(
        np.maximum(np.abs(analog), 1e-15))
    worst = int(np.argmax(np.abs(diff)))
    return float(diff[worst]), float(freqs[worst])


def design_analog(kind: str, params: dict[str, object], rate_hz: float) -> StageDesign:
    """Design an analog-prototype stage; params already carry the kind's defaults."""
    _check_parameters(kind, params, rate_hz)
    proto = prototype_for(kind, params)
    method = str(params["method"])
    t = 1.0 / rate_hz
    derived = dict(proto.derived)
    warnings: list[str] = []
    for edge_name, edge in zip(_edge_names(proto), proto.edges_hz, strict=True):
        warnings += near_nyquist(edge_name, edge, rate_hz)
    if method == "forward-euler":
        t_max = largest_stable_forward_euler_t(proto)
        derived["max_stable_sample_time_s"] = t_max
        if t >= t_max:
            raise ValueError(
                f"method = 'forward-euler' is unstable at {fmt(rate_hz)} Hz sampling "
                f"(T = {fmt(t)} s): the largest stable sample time is {fmt(t_max)} s"
                f"{' (2 RC)' if proto.order == 1 else ''}, i.e. a rate above "
                f"{fmt(1 / t_max)} Hz; use tustin or a higher rate")
        if t > EULER_WARN_FRACTION * t_max:
            warnings.append(
                f"forward-euler is near instability: T = {fmt(t)} s is "
                f"{100 * t / t_max:.0f} % of the largest stable sample time {fmt(t_max)} s; "
                f"use tustin or a higher rate")
    prewarp = number(params, "prewarp_hz")
    if prewarp is not None and method != "tustin-prewarp":
        warnings.append(f"prewarp_hz is used only by method 'tustin-prewarp'; "
                        f"method {method!r} ignores it")
        prewarp = None
    digital = discretize(proto, t, method, prewarp)
    radius = float(np.max(np.abs(digital.poles)))
    if not radius < 1.0:
        raise ValueError(
            f"method = {method!r} puts a pole on or outside the unit circle (|pole| = "
            f"{radius:.6f}) at {fmt(rate_hz)} Hz sampling; use tustin or a higher rate")

    sos = digital.sos()
    if digital.sos_error > ZOH_ERROR_WARN:
        warnings.append(
            f"the zoh sections follow the exact step-invariant filter only to "
            f"{100 * digital.sos_error:.2g} % of its peak (zeros crowd near z = 1 at this "
            f"order and rate); use tustin-prewarp or a lower order")
    diff_db, at_hz = _mismatch_db(proto, sos, rate_hz)
    if abs(diff_db) > MISMATCH_WARN_DB:
        remedy = "tustin-prewarp or a higher rate"
        if method == "tustin-prewarp":
            remedy = "a higher rate"
        warnings.append(
            f"T = {fmt(t)} s is too long for {method} to match the prototype: the digital "
            f"response differs from the analog by {diff_db:+.1f} dB at {fmt(at_hz)} Hz; "
            f"use {remedy}")
    return StageDesign(kind, rate_hz, params, sos=sos, analog=proto.tf(), derived=derived,
                       warnings=tuple(warnings), analog_zpk=(proto.z, proto.p, proto.k))


def _edge_names(proto: AnalogPrototype) -> tuple[str, ...]:
    if len(proto.edges_hz) == 2:
        return ("low_hz", "high_hz")
    return ("cutoff_hz",) if "cutoff_hz" in proto.derived else ("centre_hz",)


__all__ = ["design_analog", "largest_stable_forward_euler_t"]
