"""The parameter schema of every stage kind: which keys a chain file may give.

One table serves the chain-file validator (unknown keys, wrong types, missing
parameters), the designer (defaults) and the UI (which fields to show).
"""

from __future__ import annotations

from dataclasses import dataclass

from filters.spec import METHODS

# Keys every stage may carry, whatever its kind.
COMMON_KEYS: dict[str, type | tuple[type, ...]] = {
    "kind": str,
    "channels": list,
    "bypass": bool,
    "start": str,
}

NUMBER = (int, float)


@dataclass(frozen=True)
class KindInfo:
    """What one stage kind accepts.

    keys:         every kind-specific key and its accepted Python type(s) after TOML parsing.
    alternatives: ways to give the required parameters; exactly one group must be
                  complete (e.g. cutoff_hz, or r_ohm + c_farad). Empty: nothing required.
    defaults:     values used when an optional key is absent.
    analog:       True for analog prototypes, which take a discretization `method`.
    summary:      one line for help screens and the UI's kind picker.
    """

    keys: dict[str, type | tuple[type, ...]]
    alternatives: tuple[tuple[str, ...], ...]
    defaults: dict[str, object]
    analog: bool
    summary: str


_ANALOG_OPT: dict[str, type | tuple[type, ...]] = {"method": str, "prewarp_hz": NUMBER}
_ANALOG_DEF: dict[str, object] = {"method": "tustin-prewarp"}
_BAND = {"band": str, "order": int, "cutoff_hz": NUMBER, "low_hz": NUMBER, "high_hz": NUMBER}
_BAND_ALT = (("order", "cutoff_hz"), ("order", "low_hz", "high_hz"))

KINDS: dict[str, KindInfo] = {
    "rc-lowpass": KindInfo(
        {"cutoff_hz": NUMBER, "r_ohm": NUMBER, "c_farad": NUMBER, **_ANALOG_OPT},
        (("cutoff_hz",), ("r_ohm", "c_farad")), dict(_ANALOG_DEF), True,
        "first-order RC low-pass, from cutoff or R and C",
    ),
    "rc-highpass": KindInfo(
        {"cutoff_hz": NUMBER, "r_ohm": NUMBER, "c_farad": NUMBER, **_ANALOG_OPT},
        (("cutoff_hz",), ("r_ohm", "c_farad")), dict(_ANALOG_DEF), True,
        "first-order RC high-pass, from cutoff or R and C",
    ),
    "rl-lowpass": KindInfo(
        {"cutoff_hz": NUMBER, "r_ohm": NUMBER, "l_henry": NUMBER, **_ANALOG_OPT},
        (("cutoff_hz",), ("r_ohm", "l_henry")), dict(_ANALOG_DEF), True,
        "first-order RL low-pass, from cutoff or R and L",
    ),
    "rl-highpass": KindInfo(
        {"cutoff_hz": NUMBER, "r_ohm": NUMBER, "l_henry": NUMBER, **_ANALOG_OPT},
        (("cutoff_hz",), ("r_ohm", "l_henry")), dict(_ANALOG_DEF), True,
        "first-order RL high-pass, from cutoff or R and L",
    ),
    "rlc-bandpass": KindInfo(
        {"centre_hz": NUMBER, "q": NUMBER, "r_ohm": NUMBER, "l_henry": NUMBER,
         "c_farad": NUMBER, **_ANALOG_OPT},
        (("centre_hz", "q"), ("r_ohm", "l_henry", "c_farad")), dict(_ANALOG_DEF), True,
        "series RLC band-pass (output across R), from centre and Q or R, L, C",
    ),
    "rlc-notch": KindInfo(
        {"centre_hz": NUMBER, "q": NUMBER, "r_ohm": NUMBER, "l_henry": NUMBER,
         "c_farad": NUMBER, **_ANALOG_OPT},
        (("centre_hz", "q"), ("r_ohm", "l_henry", "c_farad")), dict(_ANALOG_DEF), True,
        "series RLC notch (output across L and C), from centre and Q or R, L, C",
    ),
    "second-order-lowpass": KindInfo(
        {"cutoff_hz": NUMBER, "q": NUMBER, **_ANALOG_OPT},
        (("cutoff_hz", "q"),), dict(_ANALOG_DEF), True,
        "second-order low-pass with natural frequency and Q",
    ),
    "butterworth": KindInfo(
        {**_BAND, **_ANALOG_OPT}, _BAND_ALT,
        {**_ANALOG_DEF, "band": "lowpass"}, True,
        "maximally flat, order 1 to 10, any band",
    ),
    "bessel": KindInfo(
        {**_BAND, "norm": str, **_ANALOG_OPT}, _BAND_ALT,
        {**_ANALOG_DEF, "band": "lowpass", "norm": "mag"}, True,
        "flattest group delay, order 1 to 10, any band (norm mag: -3 dB at the cutoff)",
    ),
    "chebyshev1": KindInfo(
        {**_BAND, "ripple_db": NUMBER, **_ANALOG_OPT}, tuple(a + ("ripple_db",) for a in _BAND_ALT),
        {**_ANALOG_DEF, "band": "lowpass"}, True,
        "passband ripple for a steeper edge, order 1 to 10, any band",
    ),
    "notch": KindInfo(
        {"freq_hz": NUMBER, "q": NUMBER}, (("freq_hz", "q"),), {}, False,
        "digital second-order notch at freq_hz with quality factor q",
    ),
    "moving-average": KindInfo(
        {"window": int}, (("window",),), {}, False,
        "mean of the last `window` samples",
    ),
    "ema": KindInfo(
        {"alpha": NUMBER, "time_constant_s": NUMBER}, (("alpha",), ("time_constant_s",)), {},
        False, "exponential moving average, from alpha or a time constant",
    ),
    "median": KindInfo(
        {"window": int}, (("window",),), {}, False,
        "running median of an odd `window`, removes single-sample spikes",
    ),
    "dc-block": KindInfo(
        {"cutoff_hz": NUMBER}, (("cutoff_hz",),), {}, False,
        "first-order DC blocker (differentiator with a leaky integrator)",
    ),
    "gain": KindInfo(
        {"scale": NUMBER, "offset": NUMBER}, (), {"scale": 1.0, "offset": 0.0}, False,
        "y = scale * x + offset (calibration)",
    ),
}

BANDS: tuple[str, ...] = ("lowpass", "highpass", "bandpass", "bandstop")
BESSEL_NORMS: tuple[str, ...] = ("mag", "phase", "delay")
ORDER_RANGE: tuple[int, int] = (1, 10)

__all__ = ["BANDS", "BESSEL_NORMS", "COMMON_KEYS", "KINDS", "KindInfo", "METHODS", "ORDER_RANGE"]
