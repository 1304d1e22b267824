"""Plain per-sample reference loops and test data for the streaming tests.

They share nothing with filters.stages: each stage is a loop over samples with
its own state, as firmware would run it.
"""

from __future__ import annotations

import statistics

import numpy as np

from filters.design import design_stage
from filters.spec import StageSpec


def _sos_loop(sos: np.ndarray, x: np.ndarray, start: str) -> np.ndarray:
    """Transposed direct form II per section, per sample."""
    sections = [list(row) for row in sos]
    state = []
    u = x[0] if start == "steady" else 0.0
    for b0, b1, b2, _, a1, a2 in sections:
        # steady state at a constant input u: output v = u * DC gain of the section
        v = u * (b0 + b1 + b2) / (1.0 + a1 + a2)
        z1 = b2 * u - a2 * v
        state.append([b1 * u - a1 * v + z1, z1])
        u = v
    y = np.empty(len(x))
    for t, sample in enumerate(x):
        value = float(sample)
        for (b0, b1, b2, _, a1, a2), z in zip(sections, state, strict=True):
            out = b0 * value + z[0]
            z[0] = b1 * value - a1 * out + z[1]
            z[1] = b2 * value - a2 * out
            value = out
        y[t] = value
    return y


def _history_loop(x: np.ndarray, width: int, start: str, reduce) -> np.ndarray:
    pad = x[0] if start == "steady" else 0.0
    history = [float(pad)] * (width - 1)
    y = np.empty(len(x))
    for t, sample in enumerate(x):
        history.append(float(sample))
        window = history[-width:]
        y[t] = reduce(window)
        history = window[1:]
    return y


def loop_stage(design, x: np.ndarray, start: str = "steady", bypass: bool = False) -> np.ndarray:
    """One stage over a single channel x (n,), one sample at a time."""
    if bypass:
        return np.array(x, dtype=float)
    if design.sos is not None:
        return _sos_loop(design.sos, x, start)
    if design.fir is not None:
        taps = list(design.fir)
        return _history_loop(x, len(taps), start,
                             lambda w: sum(b * v for b, v in zip(taps, reversed(w), strict=True)))
    if design.kind == "median":
        return _history_loop(x, int(design.params["window"]), start, statistics.median)
    if design.kind == "gain":
        return np.array([design.params.get("scale", 1.0) * v + design.params.get("offset", 0.0)
                         for v in x])
    raise AssertionError(design.kind)


# One stage of every kind with parameters a weigh-station user might pick at 250 Hz.
EVERY_KIND: list[StageSpec] = [
    StageSpec("rc-lowpass", {"cutoff_hz": 8.0}),
    StageSpec("rc-highpass", {"r_ohm": 10e3, "c_farad": 10e-6, "method": "backward-euler"}),
    StageSpec("rl-lowpass", {"cutoff_hz": 20.0, "method": "zoh"}),
    StageSpec("rl-highpass", {"cutoff_hz": 2.0, "method": "matched"}),
    StageSpec("rlc-bandpass", {"centre_hz": 18.0, "q": 4.0}),
    StageSpec("rlc-notch", {"centre_hz": 50.0, "q": 10.0, "method": "tustin"}),
    StageSpec("second-order-lowpass", {"cutoff_hz": 10.0, "q": 0.707}),
    StageSpec("butterworth", {"order": 4, "cutoff_hz": 8.0}),
    StageSpec("bessel", {"order": 3, "band": "highpass", "cutoff_hz": 1.0}),
    StageSpec("chebyshev1", {"order": 4, "band": "bandpass", "low_hz": 10.0, "high_hz": 25.0,
                             "ripple_db": 1.0}),
    StageSpec("notch", {"freq_hz": 50.0, "q": 30.0}),
    StageSpec("moving-average", {"window": 7}),
    StageSpec("ema", {"time_constant_s": 0.05}),
    StageSpec("median", {"window": 5}),
    StageSpec("dc-block", {"cutoff_hz": 0.5}),
    StageSpec("gain", {"scale": 9.81, "offset": -0.2}),
]
RATE_HZ = 250.0


def design(spec: StageSpec, rate_hz: float = RATE_HZ):
    return design_stage(spec, rate_hz)


def weigh_signal(n: int, channels: int, seed: int = 0) -> np.ndarray:
    """Load-cell-like test data: an offset, parcel steps, 50 Hz pickup, noise, spikes (kg)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / RATE_HZ
    steps = np.cumsum(rng.random((n, channels)) < 0.01, axis=0) * 2.5
    x = 12.0 + steps + 0.3 * np.sin(2 * np.pi * 50 * t)[:, None] \
        + 0.05 * rng.standard_normal((n, channels))
    x[rng.random((n, channels)) < 0.005] += 8.0
    return x
