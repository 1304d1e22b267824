"""NAME_vectors.csv: a deterministic input that exercises the chain and the expected output.

Input per channel (filters.exercise, seeded, so every export of the same chain gives the
same file and the quantization report judges the same samples): a non-zero starting level
(the steady start), parcel-like level steps, a linear chirp from 0.5 Hz to 0.45 x rate,
white noise and a few single-sample spikes, all within 0.7 of the channel's full scale; for
fixed point the last tenth is a full-scale square wave that drives saturation. Expected
output: the float64 chain (filters.float32model.reference_output: scipy.signal per stage,
the numbers the quantization report judges the float model against) for float targets, the
exact integer model (filters.fixedpoint) for Q15/Q31.
"""

from __future__ import annotations

import io

import numpy as np

from filters.exercise import channel_input
from filters.spec import ChainSpec
from monitor.export.plan import ExportPlan


def inputs(plan: ExportPlan, seconds: float) -> np.ndarray:
    """(n, channels) float64 input in units (float32-exact for the float target)."""
    cols = [channel_input(k, seconds, plan.rate_hz, ch.full_scale, plan.fixed)
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
    # the float64 chain the quantization report judged the model against (scipy.signal's
    # sosfilt per stage, each started at its own first input): the README check compares
    # the compiled code with the very numbers the report's "holds" was decided on
    from filters.float32model import reference_output

    return np.column_stack([reference_output(ch.plans, x[:, k])
                            for k, ch in enumerate(plan.channels)])


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
