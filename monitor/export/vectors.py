"""NAME_vectors.csv: a deterministic input that exercises the chain and the expected output.

Input per channel (seeded, so every export of the same chain gives the same file): a
non-zero starting level (the steady start), parcel-like level steps, a linear chirp from
0.5 Hz to 0.45 x rate, white noise and a few single-sample spikes, all within 0.7 of the
channel's full scale; for fixed point the last tenth is a full-scale square wave that
drives saturation. Expected output: the Python streaming chain (float64) for float targets,
the exact integer model (filters.fixedpoint) for Q15/Q31.
"""

from __future__ import annotations

import io

import numpy as np

from filters.spec import ChainSpec
from monitor.export.plan import ExportPlan

SEED = 20261201


def exercise_signal(n: int, rate_hz: float, amplitude: float, seed: int, saturate: bool
                ) -> np.ndarray:
    """(n,) float64 test input in units, peak <= 0.7 * amplitude (+ a full-scale tail)."""
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


def inputs(plan: ExportPlan, seconds: float) -> np.ndarray:
    """(n, channels) float64 input in units (float32-exact for the float target)."""
    n = max(16, int(round(seconds * plan.rate_hz)))
    cols = [exercise_signal(n, plan.rate_hz, ch.full_scale, SEED + k, plan.fixed)
            for k, ch in enumerate(plan.channels)]
    x = np.column_stack(cols)
    if plan.target == "c-float" and not plan.double:
        x = x.astype(np.float32).astype(np.float64)
    return x


def expected(plan: ExportPlan, spec: ChainSpec, x: np.ndarray) -> np.ndarray:
    """Expected outputs for input x (n, channels): float64 units, or int64 Q integers."""
    if plan.fixed:
        from filters.fixedpoint import FixedChainModel, q_format, to_fixed
        from monitor.export.ccode import fixed_stages

        fmt = q_format(plan.target)
        out = np.empty(x.shape, dtype=np.int64)
        for k, ch in enumerate(plan.channels):
            model = FixedChainModel(fixed_stages(ch, plan.target))
            out[:, k] = model.process(to_fixed(x[:, k], ch.full_scale, fmt))
        return out
    from filters.chainset import ChainSet

    chain = ChainSet(spec, [ch.name for ch in plan.channels], plan.rate_hz)
    return chain.process(x)


def vectors_csv(plan: ExportPlan, spec: ChainSpec, seconds: float) -> str:
    """The text of NAME_vectors.csv: header `<ch>,...,<ch>_filtered,...`, then rows."""
    x = inputs(plan, seconds)
    y = expected(plan, spec, x)
    names = [ch.name for ch in plan.channels]
    buf = io.StringIO()
    buf.write(",".join(names + [f"{n}_filtered" for n in names]) + "\n")
    if plan.fixed:
        from filters.fixedpoint import q_format, to_fixed

        fmt = q_format(plan.target)
        xin = np.column_stack([to_fixed(x[:, k], ch.full_scale, fmt)
                               for k, ch in enumerate(plan.channels)])
        np.savetxt(buf, np.hstack([xin, y]), fmt="%d", delimiter=",")
    else:
        digits = "%.17g" if plan.double else "%.9g"
        np.savetxt(buf, np.hstack([x, y]), fmt=digits, delimiter=",")
    return buf.getvalue()
