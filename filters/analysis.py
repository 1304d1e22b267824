"""What a stage or a per-channel chain of stages costs: response, lag, settling, noise.

A "chain" is a sequence of StageDesign run in order on one channel; a single
design is treated as a chain of one. Non-linear and affine kinds are counted as
follows in every response (say so wherever the numbers are shown):
  median: a pure delay of (window - 1)/2 samples (exact for a step, and the
          delay of its centre sample; the spike removal itself is not linear);
  gain:   a flat |scale| (the offset adds a constant and is left out).
Frequencies are in Hz, times in seconds unless a name says _ms.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from filters.design import StageDesign
from filters.prototypes import zpk_response

SETTLE_FRACTION = 0.02  # settling band: 2 % of the final value, common practice
_TAIL = 1e-7            # impulse responses are run until the slowest pole decays to this
_MAX_SAMPLES = 4_000_000


def _as_chain(designs: StageDesign | Sequence[StageDesign]) -> list[StageDesign]:
    return [designs] if isinstance(designs, StageDesign) else list(designs)


def _rate(chain: list[StageDesign], rate_hz: float | None) -> float:
    if rate_hz is not None:
        return float(rate_hz)
    if not chain:
        raise ValueError("rate_hz is needed for an empty chain")
    return chain[0].rate_hz


def frequency_response(design: StageDesign, freqs_hz: np.ndarray) -> np.ndarray:
    """H(e^{j 2 pi f / fs}) of one stage at freqs_hz (Hz, any shape) -> complex, same shape."""
    from scipy import signal

    freqs = np.asarray(freqs_hz, dtype=float)
    flat = freqs.ravel()
    if design.sos is not None:
        _, h = signal.sosfreqz(design.sos, worN=flat, fs=design.rate_hz)
    elif design.fir is not None:
        _, h = signal.freqz(design.fir, [1.0], worN=flat, fs=design.rate_hz)
    elif design.kind == "median":
        h = np.exp(-2j * np.pi * flat * design.delay_samples / design.rate_hz)
    else:  # gain
        h = np.full(flat.shape, abs(float(design.params["scale"])), dtype=complex)
    return np.asarray(h, dtype=complex).reshape(freqs.shape)


def analog_response(design: StageDesign, freqs_hz: np.ndarray) -> np.ndarray | None:
    """H(j 2 pi f) of the continuous prototype (analog kinds), else None."""
    if design.analog_zpk is None:
        return None
    z, p, k = design.analog_zpk
    return zpk_response(z, p, k, 2j * np.pi * np.asarray(freqs_hz, dtype=float))


def chain_response(designs: Sequence[StageDesign], freqs_hz: np.ndarray,
                   rate_hz: float | None = None) -> np.ndarray:
    """Product of the stage responses at freqs_hz (an empty chain is 1 everywhere)."""
    freqs = np.asarray(freqs_hz, dtype=float)
    h = np.ones(freqs.shape, dtype=complex)
    for design in _as_chain(designs):
        h = h * frequency_response(design, freqs)
    return h


def group_delay_s(designs: StageDesign | Sequence[StageDesign], freq_hz: float) -> float:
    """Group delay (s) at freq_hz: the sum over stages (scipy.signal.group_delay per section)."""
    import warnings

    from scipy import signal

    total = 0.0
    for design in _as_chain(designs):
        fs = design.rate_hz
        if design.sos is not None:
            for row in design.sos:
                with warnings.catch_warnings():  # singular at a zero on the unit circle
                    warnings.simplefilter("ignore")
                    _, gd = signal.group_delay((row[:3], row[3:]), w=[freq_hz], fs=fs)
                total += float(np.nan_to_num(gd[0])) / fs
        elif design.fir is not None:  # symmetric FIR: linear phase, (taps - 1)/2 samples
            total += (len(design.fir) - 1) / 2 / fs
        else:
            total += design.delay_samples / fs
    return total


def phase_deg(designs: StageDesign | Sequence[StageDesign], freq_hz: float,
              rate_hz: float | None = None) -> float:
    """Phase (degrees) at freq_hz, unwrapped continuously from DC."""
    chain = _as_chain(designs)
    if freq_hz <= 0:
        return 0.0
    grid = np.linspace(0.0, freq_hz, 4097)
    h = chain_response(chain, grid, _rate(chain, rate_hz))
    return float(np.degrees(np.unwrap(np.angle(h))[-1]))


def phase_delay_s(designs: StageDesign | Sequence[StageDesign], freq_hz: float,
                  rate_hz: float | None = None) -> float:
    """How far (s) a sine at freq_hz lags behind the input: -phase / (2 pi f)."""
    if freq_hz <= 0:
        return group_delay_s(designs, 0.0)
    return -math.radians(phase_deg(designs, freq_hz, rate_hz)) / (2 * math.pi * freq_hz)


def _grid(rate_hz: float) -> np.ndarray:
    nyquist = rate_hz / 2
    return np.unique(np.concatenate([np.linspace(0.0, nyquist, 8193),
                                     np.geomspace(nyquist * 1e-5, nyquist, 2049)]))


def minus3db_edges_hz(designs: StageDesign | Sequence[StageDesign],
                      rate_hz: float | None = None) -> tuple[float, ...]:
    """Every frequency where |H| crosses 1/sqrt(2) of its passband gain, ascending.

    The passband gain is the DC gain when the chain passes DC (low-pass, band-stop,
    notch: a resonant peak does not move the reference), else the peak gain (high-pass,
    band-pass, DC block).
    """
    from scipy import optimize

    chain = _as_chain(designs)
    fs = _rate(chain, rate_hz)
    grid = _grid(fs)
    mag = np.abs(chain_response(chain, grid, fs))
    passband = mag[0] if mag[0] > 1e-6 * mag.max() else mag.max()
    level = passband / math.sqrt(2)
    if level == 0 or np.all(np.abs(mag - mag.max()) < 1e-9 * mag.max()):
        return ()
    above = mag >= level
    edges = []
    for i in np.nonzero(above[1:] != above[:-1])[0]:
        def excess(f: float) -> float:
            return float(np.abs(chain_response(chain, np.array([f]), fs))[0]) - level
        edges.append(float(optimize.brentq(excess, grid[i], grid[i + 1], xtol=1e-12)))
    return tuple(edges)


def minus3db_hz(designs: StageDesign | Sequence[StageDesign],
                rate_hz: float | None = None) -> float | None:
    """The lowest -3 dB frequency (relative to the passband gain), None when |H| is flat."""
    edges = minus3db_edges_hz(designs, rate_hz)
    return edges[0] if edges else None


def dc_gain(designs: StageDesign | Sequence[StageDesign], rate_hz: float | None = None) -> float:
    """H at 0 Hz (real)."""
    chain = _as_chain(designs)
    return float(chain_response(chain, np.array([0.0]), _rate(chain, rate_hz))[0].real)


def poles_zeros(design: StageDesign) -> tuple[np.ndarray, np.ndarray]:
    """(zeros, poles) of a stage in the z-plane; empty for median and gain."""
    if design.sos is not None:
        zeros = np.concatenate([np.roots(row[:3]) for row in design.sos]).astype(complex)
        poles = np.concatenate([np.roots(row[3:]) for row in design.sos]).astype(complex)
        # zpk2sos pads with roots at z = 0 (odd orders, delays); cancel the common ones.
        common = min(np.count_nonzero(zeros == 0), np.count_nonzero(poles == 0))
        for _ in range(common):
            zeros = np.delete(zeros, np.nonzero(zeros == 0)[0][0])
            poles = np.delete(poles, np.nonzero(poles == 0)[0][0])
        return zeros, poles
    if design.fir is not None:  # ones(N)/N: the N-th roots of unity except 1, poles at 0
        n = len(design.fir)
        return np.exp(2j * np.pi * np.arange(1, n) / n), np.zeros(n - 1, complex)
    return np.zeros(0, complex), np.zeros(0, complex)


def stability_margin(designs: StageDesign | Sequence[StageDesign]) -> float:
    """1 - max |pole| over the chain (1.0 with no poles); > 0 means stable."""
    radii = [np.abs(poles_zeros(d)[1]) for d in _as_chain(designs)]
    largest = max((float(r.max()) for r in radii if r.size), default=0.0)
    return 1.0 - largest


def response_length(designs: StageDesign | Sequence[StageDesign]) -> int:
    """Samples after which the chain's impulse response has decayed below ~1e-7."""
    chain = _as_chain(designs)
    margin = stability_margin(chain)
    n = 64
    if margin < 1.0:
        radius = 1.0 - margin
        n += int(math.ceil(1.5 * math.log(_TAIL) / math.log(radius))) if radius > 0 else 0
    for design in chain:
        n += len(design.fir) if design.fir is not None else 0
        n += int(design.delay_samples)
    return min(n, _MAX_SAMPLES)


def run_linear(designs: StageDesign | Sequence[StageDesign], x: np.ndarray) -> np.ndarray:
    """The chain's linear model applied to x (n,) from zero state (median: delay, gain: |scale|)."""
    from scipy import signal

    y = np.asarray(x, dtype=float)
    for design in _as_chain(designs):
        if design.sos is not None:
            y = signal.sosfilt(design.sos, y)
        elif design.fir is not None:
            y = signal.lfilter(design.fir, [1.0], y)
        elif design.kind == "median":
            d = int(design.delay_samples)
            y = np.concatenate([np.zeros(d), y[:len(y) - d]]) if d else y
        else:
            y = y * abs(float(design.params["scale"]))
    return y


def impulse_response(designs: StageDesign | Sequence[StageDesign], n: int | None = None
                     ) -> np.ndarray:
    """h[0..n) of the chain's linear model; n defaults to response_length."""
    n = response_length(designs) if n is None else n
    x = np.zeros(n)
    x[0] = 1.0
    return run_linear(designs, x)


def step_response(designs: StageDesign | Sequence[StageDesign], n: int | None = None
                  ) -> np.ndarray:
    """The chain's linear model's response to a unit step, from zero state."""
    n = response_length(designs) if n is None else n
    return run_linear(designs, np.ones(n))


def settling_time_s(designs: StageDesign | Sequence[StageDesign],
                    fraction: float = SETTLE_FRACTION) -> float:
    """Time (s) after a unit step until the output stays within `fraction` of its final value.

    The band is 2 % of the final value by default (common practice); when the final
    value is zero (high-pass, band-pass, DC block) it is 2 % of the peak excursion.
    math.inf when the response is still outside the band after the longest simulation.
    """
    chain = _as_chain(designs)
    if not chain:
        return 0.0
    y = step_response(chain)
    final = dc_gain(chain)
    scale = abs(final) if abs(final) > 1e-9 * max(np.abs(y).max(), 1e-300) else np.abs(y).max()
    if scale == 0:
        return 0.0
    outside = np.nonzero(np.abs(y - final) > fraction * scale)[0]
    if outside.size == 0:
        return 0.0
    if outside[-1] == len(y) - 1:
        return math.inf
    return (int(outside[-1]) + 1) / chain[0].rate_hz


def noise_gain(designs: StageDesign | Sequence[StageDesign]) -> float:
    """White-noise power gain sum(h[n]^2) of the chain's linear model (1 for an empty chain)."""
    return float(np.sum(impulse_response(designs) ** 2))


def noise_gain_db(designs: StageDesign | Sequence[StageDesign]) -> float:
    """noise_gain in dB (10 log10); -inf when the chain passes no noise at all."""
    gain = noise_gain(designs)
    return 10 * math.log10(gain) if gain > 0 else -math.inf


def default_analysis_hz(designs: StageDesign | Sequence[StageDesign], rate_hz: float) -> float:
    """Where lag is quoted by default: the chain's first cutoff, else the centre of its
    first band-pass, else 1 Hz (never at or above a quarter of the rate)."""
    for design in _as_chain(designs):
        if "cutoff_hz" in design.derived:
            return min(float(design.derived["cutoff_hz"]), rate_hz / 4)
        if design.kind == "rlc-bandpass" or design.params.get("band") == "bandpass":
            return min(float(design.derived["centre_hz"]), rate_hz / 4)
    return min(1.0, rate_hz / 4)


def reference_hz(designs: StageDesign | Sequence[StageDesign]) -> float | None:
    """The chain's reference frequency: its first cutoff, else its first centre or null."""
    chain = _as_chain(designs)
    for key in ("cutoff_hz", "centre_hz", "first_null_hz"):
        for design in chain:
            if key in design.derived:
                return float(design.derived[key])
    return None


def table_points_hz(designs: StageDesign | Sequence[StageDesign], rate_hz: float) -> list[float]:
    """Standard points for a response table, ascending and all below Nyquist.

    0.1, 0.5, 1, 2 and 5 times the chain's reference frequency (reference_hz), plus
    every band edge and centre of its stages; a chain with none (median, gain) gets
    0.1 %, 1 %, 5 %, 10 %, 20 % and 40 % of the rate.
    """
    chain = _as_chain(designs)
    ref = reference_hz(chain)
    if ref is None:
        points = {m * rate_hz for m in (0.001, 0.01, 0.05, 0.1, 0.2, 0.4)}
    else:
        points = {m * ref for m in (0.1, 0.5, 1.0, 2.0, 5.0)}
        for design in chain:
            points |= {float(design.derived[key]) for key in
                       ("cutoff_hz", "centre_hz", "low_hz", "high_hz") if key in design.derived}
    return sorted(round(p, 9) for p in points if p < rate_hz / 2)
