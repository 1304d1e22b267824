"""StageSpec + sample rate -> StageDesign: coefficients, derived values, warnings.

Every refusal is a ValueError naming the parameter, its value and the allowed
range, so a chain that cannot run is refused before it replaces a running one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from filters.checks import (
    below_nyquist,
    echo,
    fmt,
    integer,
    lowest_hz,
    near_nyquist,
    not_too_low,
    number,
    positive,
    sample_rate,
)
from filters.kinds import KINDS
from filters.spec import StageSpec
from filters.stages import MAX_AVERAGE_WINDOW, MAX_MEDIAN_WINDOW


@dataclass(frozen=True)
class StageDesign:
    """One stage designed at a sample rate.

    kind:       the stage kind (filters.spec.ALL_KINDS).
    rate_hz:    sample rate (Hz) the coefficients are for.
    params:     the parameters with the kind's defaults applied (method, band, alpha...).
    sos:        (m, 6) float64, scipy layout [b0 b1 b2 1 a1 a2]; every linear IIR kind.
    fir:        (taps,) float64 FIR coefficients; moving-average only.
    analog:     continuous prototype (b, a) in s, descending powers; analog kinds only.
                Poor at high orders: use analog_zpk for anything numerical.
    derived:    cutoff_hz, centre_hz, q, time_constant_s, alpha, ... as the kind has them.
    warnings:   one sentence each.
    analog_zpk: (zeros, poles, gain) of the prototype in rad/s; analog kinds only.
    """

    kind: str
    rate_hz: float
    params: dict[str, object]
    sos: np.ndarray | None = None
    fir: np.ndarray | None = None
    analog: tuple[np.ndarray, np.ndarray] | None = None
    derived: dict[str, float] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    analog_zpk: tuple[np.ndarray, np.ndarray, float] | None = None

    @property
    def linear(self) -> bool:
        """True when the stage is a linear filter (sos or fir present)."""
        return self.sos is not None or self.fir is not None

    @property
    def delay_samples(self) -> float:
        """Pure delay of the non-linear/affine kinds: (window - 1)/2 for median, else 0."""
        if self.kind == "median":
            return (int(self.params["window"]) - 1) / 2
        return 0.0


def _resolve(spec: StageSpec) -> dict[str, object]:
    if not isinstance(spec.kind, str) or spec.kind not in KINDS:
        raise ValueError(f"kind = {echo(spec.kind)} is unknown; allowed: {', '.join(KINDS)}")
    info = KINDS[spec.kind]
    unknown = sorted(set(spec.params) - set(info.keys), key=str)
    if unknown:
        raise ValueError(f"{echo(unknown[0])[1:-1]} is not a key of kind {spec.kind!r}; "
                         f"allowed: {', '.join(info.keys)}")
    params = {**info.defaults, **spec.params}
    if info.alternatives and not any(all(k in params for k in group)
                                     for group in info.alternatives):
        ways = " or ".join(" + ".join(group) for group in info.alternatives)
        raise ValueError(f"kind {spec.kind!r} needs {ways}")
    return params


def design_stage(spec: StageSpec, rate_hz: float) -> StageDesign:
    """Design one stage at rate_hz (Hz, filters.checks.MIN_RATE_HZ to MAX_RATE_HZ);
    ValueError naming parameter, value and range.

    Every parameter is range-checked before any arithmetic, so that no value a file can
    hold reaches scipy as an overflow, a division by zero or a singular matrix; should
    one slip through all the same, it is refused as a ValueError, never raised as
    another exception, and the result is checked for finite coefficients and poles
    inside the unit circle."""
    rate_hz = sample_rate(rate_hz)
    params = _resolve(spec)
    try:
        with np.errstate(all="ignore"):
            if KINDS[spec.kind].analog:
                from filters.analog_design import design_analog

                design = design_analog(spec.kind, params, rate_hz)
            else:
                design = _DIGITAL[spec.kind](params, rate_hz)
    except (ArithmeticError, np.linalg.LinAlgError) as exc:
        raise ValueError(f"these parameters are out of the range that can be computed at "
                         f"{fmt(rate_hz)} Hz ({type(exc).__name__}); bring them closer to "
                         f"the sample rate") from None
    _check_result(design)
    return design


def _check_result(design: StageDesign) -> None:
    """ValueError unless the coefficients are finite and every pole lies inside |z| = 1."""
    for name, values in (("sos", design.sos), ("fir", design.fir)):
        if values is not None and not np.all(np.isfinite(values)):
            raise ValueError(f"the design has non-finite {name} coefficients at "
                             f"{fmt(design.rate_hz)} Hz; bring the parameters closer to the "
                             f"sample rate")
    if design.sos is not None:
        a1, a2 = design.sos[:, 4], design.sos[:, 5]
        # the poles of each section: roots of z^2 + a1 z + a2
        root = np.sqrt(a1.astype(complex) ** 2 - 4 * a2)
        radius = float(np.max(np.abs(np.concatenate([(-a1 + root) / 2, (-a1 - root) / 2]))))
        if not radius < 1.0:
            raise ValueError(
                f"the design puts a pole on or outside the unit circle (|pole| = "
                f"{radius:.6f}) at {fmt(design.rate_hz)} Hz sampling; bring its frequencies "
                f"closer to the sample rate")


def _single_sos(b: np.ndarray, a: np.ndarray) -> np.ndarray:
    b = np.pad(np.asarray(b, float), (0, 3 - len(b)))
    a = np.pad(np.asarray(a, float), (0, 3 - len(a)))
    return (np.concatenate([b, a]) / a[0]).reshape(1, 6)


def _notch(params: dict[str, object], rate_hz: float) -> StageDesign:
    from scipy import signal

    freq = number(params, "freq_hz")
    below_nyquist("freq_hz", freq, rate_hz)
    q = positive(params, "q")
    width = freq / q
    # iirnotch places the poles at tan(pi bandwidth / fs): a bandwidth beyond Nyquist
    # wraps around, and one below lowest_hz puts the poles on the unit circle
    if width >= rate_hz / 2:
        raise ValueError(f"q = {fmt(q)} gives a notch bandwidth freq_hz / q = {fmt(width)} Hz, "
                         f"at or above the Nyquist frequency {fmt(rate_hz / 2)} Hz; give q "
                         f"above {fmt(2 * freq / rate_hz)}")
    not_too_low(f"q = {fmt(q)} gives a notch bandwidth freq_hz / q of", width, rate_hz,
                f"give q below {fmt(freq / lowest_hz(rate_hz))}")
    b, a = signal.iirnotch(freq, q, fs=rate_hz)
    derived = {"centre_hz": freq, "q": q, "bandwidth_hz": freq / q}
    return StageDesign("notch", rate_hz, params, sos=_single_sos(b, a), derived=derived,
                       warnings=tuple(near_nyquist("freq_hz", freq, rate_hz)))


def _ema(params: dict[str, object], rate_hz: float) -> StageDesign:
    t = 1 / rate_hz
    if "alpha" in params and "time_constant_s" in params:
        raise ValueError("ema takes alpha or time_constant_s, not both")
    if "alpha" in params:
        alpha = number(params, "alpha")
        if not 0 < alpha <= 1:
            raise ValueError(f"alpha = {fmt(alpha)} is outside the allowed range 0 < alpha <= 1")
        if alpha < 1:
            # the cutoff 1/(2 pi tau) of tau = -T / ln(1 - alpha), in a form that stays
            # finite for any alpha (log1p keeps the digits of a tiny alpha)
            cutoff = -math.log1p(-alpha) * rate_hz / (2 * math.pi)
            not_too_low(f"alpha = {fmt(alpha)} gives a cutoff of", cutoff, rate_hz,
                        "give a larger alpha")
            tau = 1 / (2 * math.pi * cutoff)
        else:
            tau = 0.0
    else:
        tau = positive(params, "time_constant_s", " s")
        not_too_low(f"time_constant_s = {fmt(tau)} s gives a cutoff of",
                    1 / (2 * math.pi * tau), rate_hz, "give a shorter time_constant_s")
        # Exact discretization of the first-order lag dy/dt = (x - y)/tau with the input
        # held over each sample (step invariance): alpha = 1 - exp(-T/tau). Common practice.
        alpha = -math.expm1(-t / tau)
    params = {**params, "alpha": alpha}
    derived = {"alpha": alpha, "time_constant_s": tau}
    if tau > 0:
        derived["cutoff_hz"] = 1 / (2 * math.pi * tau)
    # y[n] = y[n-1] + alpha (x[n] - y[n-1])  ->  alpha / (1 - (1 - alpha) z^-1)
    sos = _single_sos([alpha], [1.0, alpha - 1.0])
    return StageDesign("ema", rate_hz, params, sos=sos, derived=derived)


def _dc_block(params: dict[str, object], rate_hz: float) -> StageDesign:
    cutoff = number(params, "cutoff_hz")
    below_nyquist("cutoff_hz", cutoff, rate_hz)
    # y[n] = x[n] - x[n-1] + R y[n-1]. R places the pole where the matched z-transform
    # z = exp(sT) puts the pole s = -2 pi fc of the analog RC high-pass with the same
    # cutoff: R = exp(-2 pi fc / fs) (~ 1 - 2 pi fc/fs for fc << fs). Common practice.
    r = math.exp(-2 * math.pi * cutoff / rate_hz)
    sos = _single_sos([1.0, -1.0], [1.0, -r])
    warnings = near_nyquist("cutoff_hz", cutoff, rate_hz)
    return StageDesign("dc-block", rate_hz, params, sos=sos,
                       derived={"cutoff_hz": cutoff, "pole_r": r}, warnings=tuple(warnings))


def _window(params: dict[str, object], kind: str) -> int:
    window = integer(params, "window")
    if window < 1:
        raise ValueError(f"window = {echo(window)} must be at least 1 sample")
    largest = MAX_MEDIAN_WINDOW if kind == "median" else MAX_AVERAGE_WINDOW
    if window > largest:
        raise ValueError(f"window = {echo(window)} is more than the {largest} samples a "
                         f"{kind} may span; use a low-pass stage for longer smoothing")
    if kind == "median" and window % 2 == 0:
        raise ValueError(f"window = {window} must be odd (1, 3, 5, ...) for a median")
    return window


def _moving_average(params: dict[str, object], rate_hz: float) -> StageDesign:
    window = _window(params, "moving-average")
    derived = {"window": float(window), "delay_s": (window - 1) / 2 / rate_hz}
    if window > 1:
        derived["first_null_hz"] = rate_hz / window
    return StageDesign("moving-average", rate_hz, params, fir=np.full(window, 1.0 / window),
                       derived=derived)


def _median(params: dict[str, object], rate_hz: float) -> StageDesign:
    window = _window(params, "median")
    return StageDesign("median", rate_hz, params,
                       derived={"window": float(window), "delay_s": (window - 1) / 2 / rate_hz})


# Largest |scale| and |offset| of a gain: IEEE single precision's largest value, since the
# exported c-float code holds both as float; beyond it they are infinite there.
MAX_GAIN_VALUE = 3.4028234663852886e38


def _gain(params: dict[str, object], rate_hz: float) -> StageDesign:
    scale = number(params, "scale")
    offset = number(params, "offset")
    for key, value in (("scale", scale), ("offset", offset)):
        if abs(value) > MAX_GAIN_VALUE:
            raise ValueError(f"{key} = {fmt(value)} is outside the allowed range "
                             f"+-{fmt(MAX_GAIN_VALUE)} (the largest float of the exported C)")
    return StageDesign("gain", rate_hz, params, derived={"scale": scale, "offset": offset})


_DIGITAL = {
    "notch": _notch, "ema": _ema, "dc-block": _dc_block, "moving-average": _moving_average,
    "median": _median, "gain": _gain,
}

__all__ = ["StageDesign", "design_stage"]
