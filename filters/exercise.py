"""The export's exercise signal: a deterministic test input with the hard parts of a sensor.

Seeded, so every export of the same chain gets the same input, and the quantization report
judges a target on exactly the samples the exported test vectors carry.
"""

from __future__ import annotations

import numpy as np

SEED = 20261201


def exercise_signal(n: int, rate_hz: float, amplitude: float, seed: int, saturate: bool
                    ) -> np.ndarray:
    """(n,) float64 test input in units, peak <= 0.7 * amplitude (+ a full-scale tail).

    A non-zero starting level (the steady start), level steps like parcels, a linear chirp
    from 0.5 Hz to 0.45 x rate_hz, white noise and three single-sample spikes; with
    `saturate` the last tenth is a full-scale square wave (fixed point: drives saturation).
    """
    from scipy.signal import chirp

    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate_hz
    edges = np.sort(rng.integers(1, max(2, n), size=4))
    levels = np.concatenate(([0.3], rng.uniform(-0.25, 0.25, size=4)))
    level = levels[np.searchsorted(edges, np.arange(n), side="right")]
    sweep = 0.15 * chirp(t, f0=0.5, t1=max(t[-1], 1e-9), f1=0.45 * rate_hz, method="linear")
    x = level + sweep + 0.03 * rng.standard_normal(n)
    spikes = rng.integers(0, n, size=3)
    x[spikes] += rng.choice([-0.15, 0.15], size=3)
    x = np.clip(x, -0.7, 0.7)
    if saturate and n >= 20:
        tail = n - n // 10
        period = max(2, int(rate_hz / 5))
        x[tail:] = np.where((np.arange(n - tail) // (period // 2)) % 2 == 0, 1.0, -1.0)
    return x * amplitude


def vector_rows(seconds: float, rate_hz: float) -> int:
    """Rows of the test vectors for `seconds` at `rate_hz` (at least 16)."""
    return max(16, int(round(seconds * rate_hz)))


def channel_input(k: int, seconds: float, rate_hz: float, amplitude: float, saturate: bool
                  ) -> np.ndarray:
    """(n,) float64: the exercise input of the k-th exported channel (seed SEED + k)."""
    return exercise_signal(vector_rows(seconds, rate_hz), rate_hz, amplitude, SEED + k,
                           saturate)
