"""Parameter checks shared by the designers: ValueError naming parameter, value and range."""

from __future__ import annotations

import math

# A characteristic frequency above this fraction of the Nyquist frequency is warned about.
NEAR_NYQUIST_FRACTION = 0.8


def fmt(value: float) -> str:
    """A number in 6 significant digits for messages."""
    return f"{value:.6g}"


def number(params: dict[str, object], key: str) -> float | None:
    """params[key] as a float, None when absent; ValueError unless a finite number."""
    if key not in params:
        return None
    value = params[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{key} = {value!r} must be a finite number")
    return float(value)


def positive(params: dict[str, object], key: str, unit: str = "") -> float | None:
    """params[key] as a float > 0, None when absent."""
    value = number(params, key)
    if value is not None and value <= 0:
        raise ValueError(f"{key} = {fmt(value)} must be greater than 0{unit}")
    return value


def below_nyquist(key: str, value: float, rate_hz: float) -> None:
    """ValueError unless 0 < value < rate_hz / 2 (value in Hz)."""
    nyquist = rate_hz / 2
    if not 0 < value < nyquist:
        raise ValueError(
            f"{key} = {fmt(value)} Hz is outside the allowed range 0 < {key} < "
            f"{fmt(nyquist)} Hz (the Nyquist frequency at {fmt(rate_hz)} Hz sampling)")


def integer(params: dict[str, object], key: str) -> int | None:
    """params[key] as an int, None when absent; ValueError unless a whole number."""
    if key not in params:
        return None
    value = params[key]
    if isinstance(value, bool) or not isinstance(value, int):
        if isinstance(value, float) and value.is_integer():
            return int(value)
        raise ValueError(f"{key} = {value!r} must be a whole number")
    return value


def choice(params: dict[str, object], key: str, allowed: tuple[str, ...]) -> str:
    """params[key], which must be one of `allowed`."""
    value = params[key]
    if value not in allowed:
        raise ValueError(f"{key} = {value!r} is unknown; allowed: {', '.join(allowed)}")
    return str(value)


def near_nyquist(key: str, value: float, rate_hz: float) -> list[str]:
    """A warning when value (Hz) lies above NEAR_NYQUIST_FRACTION of the Nyquist frequency."""
    nyquist = rate_hz / 2
    if value > NEAR_NYQUIST_FRACTION * nyquist:
        return [f"{key} = {fmt(value)} Hz is within {100 - 100 * NEAR_NYQUIST_FRACTION:.0f} % "
                f"of the Nyquist frequency {fmt(nyquist)} Hz, where the digital response is "
                f"squeezed; sample faster if you can"]
    return []
