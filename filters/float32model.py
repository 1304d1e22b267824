"""Floating-point export model: the generated float (or double) C, operation for operation.

The C of the c-float target (monitor.export) and this module compute the same numbers:
every product, sum and difference is rounded to the sample type in the same order as the C
expression (C99 evaluates left to right, FLT_EVAL_METHOD 0, no fused multiply-add), so the
model agrees with the compiled code to within a few rounding steps and the quantization
report can state what the firmware will do before any compiler runs.

Biquad section structures (coefficients of one section in the C table, a0 = 1):
- "tdf2": transposed direct form II, table b0 b1 b2 a1 a2 dc:
      y = b0 x + s1;  s1 = (b1 x - a1 y) + s2;  s2 = b2 x - a2 y
- "delta": the same transposed form with every delay z^-1 replaced by the delayed
  accumulator r^-1 = z^-1 / (1 - z^-1) (the delta operator with a unit step size).
  Substituting z^-1 = r^-1 / (1 + r^-1) gives the table
      B0 = b0, B1 = 2 b0 + b1, B2 = b0 + b1 + b2, A1 = 2 + a1, A2 = 1 + a1 + a2, dc
  i.e. the offsets of the coefficients from their values at z = 1, computed in float64.
      y = B0 x + s1;  s1 += (B1 x - A1 y) + s2;  s2 += B2 x - A2 y
  Each state accumulates its increment with Kahan's compensated sum (the lost low part is
  kept in e1, e2 and fed back), so small increments are never rounded away.
  Why: with poles near z = 1 (a cutoff far below the rate) 1 + a1 + a2 is tiny, and float32
  cannot hold a1 ~ -2 and a2 ~ 1 finely enough for it (the DC gain is B2 / A2): stored as
  offsets, A2 and B2 keep full relative precision. Without the compensation a state could
  not move by less than half its last bit, a dead band of about 2^-24 A1 / A2 of the level.
Steady start at input u (u = 0: rest): y = dc u, then the states that make the next
increments zero. Moving average, median and gain follow monitor/export/chelpers.py.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from filters.fixedpoint import StagePlan

STRUCTURES: tuple[str, ...] = ("tdf2", "delta")
DC_LEVEL = 0.5            # the DC check's input, as a fraction of the channel's full scale
MAX_DC_SAMPLES = 1 << 16  # longest step the DC check simulates
SIGNIFICANT_DC = 0.01     # a designed DC gain below this is checked as an absolute error


def _normalized(row: np.ndarray) -> tuple[float, float, float, float, float]:
    b0, b1, b2, a0, a1, a2 = (float(v) for v in row)
    return b0 / a0, b1 / a0, b2 / a0, a1 / a0, a2 / a0


def section_rows(sos: np.ndarray, structure: str) -> np.ndarray:
    """(m, 6) float64: the C coefficient table of a cascade (m, 6) in `structure`, before
    rounding to the sample type (see the module docstring for both layouts)."""
    if structure not in STRUCTURES:
        raise ValueError(f"structure = {structure!r} is not one of {', '.join(STRUCTURES)}")
    rows = []
    for row in np.asarray(sos, dtype=np.float64).reshape(-1, 6):
        b0, b1, b2, a1, a2 = _normalized(row)
        den = 1.0 + a1 + a2
        dc = (b0 + b1 + b2) / den if den else 0.0
        if structure == "tdf2":
            rows.append((b0, b1, b2, a1, a2, dc))
        else:
            rows.append((b0, 2.0 * b0 + b1, b0 + b1 + b2, 2.0 + a1, den, dc))
    return np.array(rows, dtype=np.float64).reshape(-1, 6)


def stored_rows(sos: np.ndarray, structure: str, dtype: type = np.float32) -> np.ndarray:
    """(m, 6) float64 holding exactly the values the C table stores in `dtype`."""
    return section_rows(sos, structure).astype(dtype).astype(np.float64)


def section_poles(row: np.ndarray, structure: str) -> np.ndarray:
    """The poles (complex, z plane) of one stored row. The delta form solves for z - 1
    (delta^2 + A1 delta + A2 = 0), which keeps the digits of poles near z = 1."""
    if structure == "delta":
        return 1.0 + np.roots([1.0, row[3], row[4]])
    return np.roots([1.0, row[3], row[4]]) if row[3] != 0 or row[4] != 0 else np.zeros(0)


def rows_response(rows: np.ndarray, structure: str, freqs_hz: np.ndarray, rate_hz: float
                  ) -> np.ndarray:
    """Complex response of a stored cascade at freqs_hz (float64 arithmetic)."""
    w = 2 * np.pi * np.asarray(freqs_hz, dtype=np.float64) / rate_hz
    h = np.ones(len(w), dtype=complex)
    zi = np.exp(-1j * w)
    for row in rows:
        if structure == "tdf2":
            h *= (row[0] + row[1] * zi + row[2] * zi ** 2) / (1 + row[3] * zi + row[4] * zi ** 2)
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            r = zi / (1 - zi)                       # r^-1 = z^-1 / (1 - z^-1)
            sec = (row[0] + row[1] * r + row[2] * r ** 2) / (1 + row[3] * r + row[4] * r ** 2)
        dc = row[2] / row[4] if row[4] else 0.0     # the limit r^-1 -> infinity
        h *= np.where(w == 0, dc, sec)
    return h


def _biquad_runner(rows: np.ndarray, structure: str, f: Callable
                   ) -> tuple[Callable, Callable]:
    coefs = [tuple(f(v) for v in row) for row in rows]
    zero = f(0.0)
    state: list[list] = []

    def prime(u):
        state.clear()
        for c in coefs:
            y = c[5] * u
            if structure == "tdf2":
                s2 = c[2] * u - c[4] * y
                state.append([c[1] * u - c[3] * y + s2, s2])
            else:
                state.append([y - c[0] * u, c[3] * y - c[1] * u, zero, zero])
            u = y
        return None

    def step_tdf2(x):
        for c, s in zip(coefs, state, strict=True):
            y = c[0] * x + s[0]
            s[0] = c[1] * x - c[3] * y + s[1]
            s[1] = c[2] * x - c[4] * y
            x = y
        return x

    def step_delta(x):
        for c, s in zip(coefs, state, strict=True):
            y = c[0] * x + s[0]
            d1 = c[1] * x - c[3] * y + s[1]
            d2 = c[2] * x - c[4] * y
            t = d1 - s[2]
            u = s[0] + t
            s[2] = (u - s[0]) - t
            s[0] = u
            t = d2 - s[3]
            u = s[1] + t
            s[3] = (u - s[1]) - t
            s[1] = u
            x = y
        return x

    return prime, step_tdf2 if structure == "tdf2" else step_delta


def _mavg_runner(n: int, f: Callable) -> tuple[Callable, Callable]:
    inv, zero, st = f(1.0 / n), f(0.0), {}

    def prime(u):
        st.update(buf=[u] * n, pos=0, sum=u * f(n), fresh=zero)

    def step(x):
        pos = st["pos"]
        old = st["buf"][pos]
        st["buf"][pos] = x
        st["sum"] = st["sum"] + (x - old)
        st["fresh"] = st["fresh"] + x
        st["pos"] = pos + 1
        if st["pos"] == n:
            st.update(pos=0, sum=st["fresh"], fresh=zero)
        return st["sum"] * inv

    return prime, step


def _median_runner(n: int) -> tuple[Callable, Callable]:
    st: dict = {}

    def prime(u):
        st.update(hist=[u] * n, sorted=[u] * n, pos=0)

    def step(x):
        hist, ordered = st["hist"], st["sorted"]
        ordered.remove(hist[st["pos"]])
        hist[st["pos"]] = x
        st["pos"] = (st["pos"] + 1) % n
        lo = 0
        while lo < len(ordered) and ordered[lo] < x:
            lo += 1
        ordered.insert(lo, x)
        return ordered[n // 2]

    return prime, step


class FloatChainModel:
    """The generated float C of one channel chain, in `dtype` (np.float32 or np.float64).

    plans: the channel's StagePlans; structure: "tdf2" or "delta" for every biquad stage.
    process(x (n,) float64 units) -> (n,) float64, what NAME_<ch>_step returns sample by
    sample (non-finite inputs pass through while the stages see the last finite input).
    """

    def __init__(self, plans: Sequence[StagePlan], structure: str = "tdf2",
                 dtype: type = np.float32) -> None:
        if structure not in STRUCTURES:
            raise ValueError(f"structure = {structure!r} is not one of {', '.join(STRUCTURES)}")
        # Python floats are IEEE doubles: the same arithmetic as C double, and faster
        self._f = float if dtype is np.float64 else np.float32
        self.plans = tuple(plans)
        self.structure = structure
        self._runners = []
        for plan in self.plans:
            if plan.form == "biquads":
                runner = _biquad_runner(section_rows(plan.sos, structure), structure, self._f)
            elif plan.form == "moving-average":
                runner = _mavg_runner(plan.window, self._f)
            elif plan.form == "median":
                runner = _median_runner(plan.window)
            else:
                scale, offset = self._f(plan.scale), self._f(plan.offset)
                runner = (lambda u: None, lambda x, s=scale, o=offset: x * s + o)
            self._runners.append((plan.start == "steady", *runner))
        self.reset()

    def reset(self) -> None:
        """Forget state; the next sample starts every stage by its start policy."""
        self._started = False
        self._last = self._f(0.0)

    def _run(self, v):
        for _, _, step in self._runners:
            v = step(v)
        return v

    def process(self, x: np.ndarray) -> np.ndarray:
        """x: (n,) float64 -> (n,) float64 outputs of the C step function."""
        f, zero = self._f, self._f(0.0)
        out = np.empty(len(x), dtype=np.float64)
        with np.errstate(all="ignore"):
            for n, value in enumerate(np.asarray(x, dtype=np.float64).tolist()):
                v = f(value)
                if not math.isfinite(v):
                    if self._started:
                        self._run(self._last)
                    out[n] = v
                    continue
                self._last = v
                if self._started:
                    v = self._run(v)
                else:
                    for steady, prime, step in self._runners:
                        prime(v if steady else zero)
                        v = step(v)
                    self._started = True
                out[n] = v
        return out


def reference_output(plans: Sequence[StagePlan], x: np.ndarray) -> np.ndarray:
    """(n,) float64: the designed chain in float64 (scipy.signal.sosfilt, numpy), each stage
    started at its own first input by its start policy, as the host's streaming chain."""
    from scipy.signal import sosfilt, sosfilt_zi

    v = np.asarray(x, dtype=np.float64).copy()
    for plan in plans:
        u = v[0] if plan.start == "steady" else 0.0
        if plan.form == "biquads":
            v = sosfilt(plan.sos, v, zi=sosfilt_zi(plan.sos) * u)[0]
        elif plan.form == "moving-average":
            pad = np.concatenate([np.full(plan.window - 1, u), v])
            v = np.convolve(pad, np.full(plan.window, 1.0 / plan.window), mode="valid")
        elif plan.form == "median":
            pad = np.concatenate([np.full(plan.window - 1, u), v])
            v = np.median(np.lib.stride_tricks.sliding_window_view(pad, plan.window), axis=1)
        else:
            v = v * plan.scale + plan.offset
    return v


def designed_dc_gain(plans: Sequence[StagePlan]) -> float:
    """The chain's DC gain as designed (float64 sos; median and moving average pass DC)."""
    from scipy.signal import sosfreqz

    gain = 1.0
    for plan in plans:
        if plan.form == "biquads":
            gain *= float(np.real(sosfreqz(plan.sos, worN=[0.0])[1][0]))
        elif plan.form == "gain":
            gain *= plan.scale
    return gain


@dataclass(frozen=True)
class FloatFigures:
    """What the float C of one channel does, from the model.

    vector_error: max |model - float64 chain| / max |float64 chain| over the test vectors.
    dc_gain_model: the model's output / input after a step of dc_samples samples from rest.
    dc_gain_design: the designed DC gain; dc_settled: False when the float64 chain itself
    is still more than 1e-9 away from it after dc_samples.
    dc_error: |dc_gain_model - the float64 chain's at the same sample|, relative to the
    designed DC gain (absolute when that is below SIGNIFICANT_DC).
    """

    structure: str
    vector_error: float
    dc_gain_model: float
    dc_gain_design: float
    dc_samples: int
    dc_settled: bool
    dc_error: float

    def holds(self, tolerance: float) -> bool:
        return self.vector_error <= tolerance and self.dc_error <= tolerance


def _dc_samples(plans: Sequence[StagePlan]) -> int:
    n = 16
    for plan in plans:
        if plan.form == "biquads":
            radius = max((float(np.max(np.abs(np.roots(r[3:])))) for r in plan.sos
                          if r[4] != 0 or r[5] != 0), default=0.0)
            if radius >= 1.0:
                return MAX_DC_SAMPLES
            n += 16 if radius < 1e-3 else int(math.log(1e-12) / math.log(radius))
        elif plan.form in ("moving-average", "median"):
            n += plan.window
    return min(n, MAX_DC_SAMPLES)


def float_figures(plans: Sequence[StagePlan], x: np.ndarray, structure: str,
                  dtype: type = np.float32, full_scale: float = 1.0,
                  reference: np.ndarray | None = None) -> FloatFigures:
    """FloatFigures of one channel: x (n,) are the test vectors' inputs (already exact in
    dtype), reference the float64 chain's output on them (computed when None)."""
    ref = reference_output(plans, x) if reference is None else reference
    got = FloatChainModel(plans, structure, dtype).process(x)
    peak = float(np.max(np.abs(ref))) if len(ref) else 0.0
    err = float(np.max(np.abs(got - ref))) / peak if peak > 0 else float(np.max(np.abs(got)))
    n = _dc_samples(plans)
    level = float(np.asarray(DC_LEVEL * full_scale, dtype=dtype))
    step = np.full(n, level)
    step[0] = 0.0          # rest at the first sample, then the step: a zero start
    model_dc = FloatChainModel(plans, structure, dtype).process(step)[-1] / level
    design = designed_dc_gain(plans)
    at_n = reference_output(plans, step)[-1] / level
    # judged against the float64 chain at the same sample: equal to the designed DC gain
    # once settled, and free of the transient left over when the poles are very slow
    settled = abs(at_n - design) <= 1e-9 * max(abs(design), 1.0)
    target = at_n
    scale = abs(design) if abs(design) >= SIGNIFICANT_DC else 1.0
    return FloatFigures(structure, err, float(model_dc), design, n, bool(settled),
                        float(abs(model_dc - target) / scale))
