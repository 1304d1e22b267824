"""Parameter checks shared by the designers: ValueError naming parameter, value and range."""

from __future__ import annotations

import math

from filters.limits import shown

# A characteristic frequency above this fraction of the Nyquist frequency is warned about.
NEAR_NYQUIST_FRACTION = 0.8

# Sample rates a chain may be designed for (Hz). The fastest link in DESIGN.md, USB
# high-speed (480 Mbit/s), carries under 6e7 bytes/s, i.e. under 3e7 two-byte samples/s:
# 1e9 leaves a factor of 30 for offline captures. One sample in 1e6 s (11.6 days) is
# slower than any streamed logger.
MIN_RATE_HZ = 1e-6
MAX_RATE_HZ = 1e9

# Lowest characteristic frequency (cutoff, centre, edge, bandwidth, pole) as a fraction
# of the sample rate. A second-order section with both poles a distance d from z = 1
# has 1 + a1 + a2 = d^2 while a1 and a2 (near -2 and 1) are rounded to 2.2e-16 (IEEE
# double), so its DC gain is good to about 2.2e-16 / d^2. A pole at f Hz sits
# d = 2 pi f / fs from z = 1: at f = 1e-6 fs the DC gain is good to 6e-6, at 1e-7 fs
# only to 6e-4 and at 1e-8 fs to 6 %, and below about 1e-10 fs the pole rounds to 1.
MIN_FREQUENCY_FRACTION = 1e-6


def fmt(value: float) -> str:
    """A number in 6 significant digits for messages."""
    return f"{value:.6g}"


def number(params: dict[str, object], key: str) -> float | None:
    """params[key] as a float, None when absent; ValueError unless a finite number."""
    if key not in params:
        return None
    value = params[key]
    try:
        result = float(value)   # an int beyond 1.8e308 raises OverflowError
    except (TypeError, ValueError, OverflowError):
        result = math.nan
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(
            result):
        raise ValueError(f"{key} = {echo(value)} must be a finite number")
    return result


def echo(value: object) -> str:
    """`value` for a message in Python's notation, cut to filters.limits.ECHO_CHARS."""
    return shown(value, quote="'")


def sample_rate(value: object, key: str = "rate_hz") -> float:
    """`value` as a sample rate in Hz, MIN_RATE_HZ to MAX_RATE_HZ; ValueError otherwise."""
    try:
        rate = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError, OverflowError):
        rate = math.nan
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (
            math.isfinite(rate) and rate > 0):
        raise ValueError(f"{key} = {echo(value)} must be a positive number of Hz")
    if not MIN_RATE_HZ <= rate <= MAX_RATE_HZ:
        raise ValueError(f"{key} = {fmt(rate)} Hz is outside the allowed range "
                         f"{fmt(MIN_RATE_HZ)} to {fmt(MAX_RATE_HZ)} Hz")
    return rate


def lowest_hz(rate_hz: float) -> float:
    """The lowest characteristic frequency (Hz) a stage may have at rate_hz."""
    return MIN_FREQUENCY_FRACTION * rate_hz


def q_range(centre_hz: float, rate_hz: float) -> tuple[float, float]:
    """Allowed (lowest, highest) q of a pole pair at centre_hz: its bandwidth centre/q
    (q >= 0.5) and its slower real pole, about centre * q (q < 0.5), both at least
    lowest_hz(rate_hz)."""
    low = lowest_hz(rate_hz)
    return low / centre_hz, centre_hz / low


def check_q(what: str, q: float, centre_hz: float, rate_hz: float) -> None:
    """ValueError unless q lies in q_range(centre_hz, rate_hz); `what` names where q came
    from: "q" or "r_ohm, l_henry and c_farad give q"."""
    low, high = q_range(centre_hz, rate_hz)
    if not low <= q <= high:
        verb = " is" if what == "q" else ","
        raise ValueError(
            f"{what} = {fmt(q)}{verb} outside the allowed range {fmt(low)} to {fmt(high)} at "
            f"{fmt(centre_hz)} Hz (centre/q and centre x q must be at least "
            f"{fmt(lowest_hz(rate_hz))} Hz, {MIN_FREQUENCY_FRACTION:g} of the sample rate)")


def not_too_low(what: str, value: float, rate_hz: float, remedy: str) -> None:
    """ValueError when a characteristic frequency (Hz) lies below lowest_hz(rate_hz), where
    its poles would crowd the unit circle beyond double precision.

    what: the sentence's subject up to the number: a key ("cutoff_hz", then "... Hz is
    below") or a phrase ("alpha = 1e-09 gives a cutoff of", then "... Hz, below").
    """
    if not value >= lowest_hz(rate_hz):
        subject = f"{what} =" if what.isidentifier() else what
        verb = " is below" if what.isidentifier() else ", below"
        raise ValueError(
            f"{subject} {fmt(value)} Hz{verb} the lowest allowed {fmt(lowest_hz(rate_hz))} Hz "
            f"({MIN_FREQUENCY_FRACTION:g} of the sample rate, where poles lose their "
            f"precision); {remedy}")


def positive(params: dict[str, object], key: str, unit: str = "") -> float | None:
    """params[key] as a float > 0, None when absent."""
    value = number(params, key)
    if value is not None and value <= 0:
        raise ValueError(f"{key} = {fmt(value)} must be greater than 0{unit}")
    return value


def below_nyquist(key: str, value: float, rate_hz: float) -> None:
    """ValueError unless lowest_hz(rate_hz) <= value < rate_hz / 2 (value in Hz)."""
    nyquist = rate_hz / 2
    if not 0 < value < nyquist:
        raise ValueError(
            f"{key} = {fmt(value)} Hz is outside the allowed range 0 < {key} < "
            f"{fmt(nyquist)} Hz (the Nyquist frequency at {fmt(rate_hz)} Hz sampling)")
    not_too_low(key, value, rate_hz, f"give a higher {key} or sample slower")


def integer(params: dict[str, object], key: str) -> int | None:
    """params[key] as an int, None when absent; ValueError unless a whole number."""
    if key not in params:
        return None
    value = params[key]
    if isinstance(value, bool) or not isinstance(value, int):
        if isinstance(value, float) and value.is_integer():
            return int(value)
        raise ValueError(f"{key} = {echo(value)} must be a whole number")
    return value


def choice(params: dict[str, object], key: str, allowed: tuple[str, ...]) -> str:
    """params[key], which must be one of `allowed`."""
    value = params[key]
    if value not in allowed:
        raise ValueError(f"{key} = {echo(value)} is unknown; allowed: {', '.join(allowed)}")
    return str(value)


def near_nyquist(key: str, value: float, rate_hz: float) -> list[str]:
    """A warning when value (Hz) lies above NEAR_NYQUIST_FRACTION of the Nyquist frequency."""
    nyquist = rate_hz / 2
    if value > NEAR_NYQUIST_FRACTION * nyquist:
        return [f"{key} = {fmt(value)} Hz is within {100 - 100 * NEAR_NYQUIST_FRACTION:.0f} % "
                f"of the Nyquist frequency {fmt(nyquist)} Hz, where the digital response is "
                f"squeezed; sample faster if you can"]
    return []
