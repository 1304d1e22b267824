"""Fixed-point export model: Q15/Q31 quantization and the exact integer arithmetic of the C.

The generated fixed-point C (monitor.export) and this module compute the same integers,
sample for sample, so test vectors written from here are bit-exact on the board.

Arithmetic (the contract with the generated C):
- Data are Q15 in int16 (Q31 in int32): value / full_scale * 2**15, saturated.
- A biquad section is direct form I with coefficients in Q(F - shift), F = 15 (31), where
  `shift` is the smallest k >= 0 that makes every coefficient of the section fit the data
  width (so |coefficient| >= 1 is held by a per-section scale shift):
      acc = 2**(r-1) + b0*x + b1*x1 + b2*x2 - a1*y1 - a2*y2      r = F - shift
  summed modulo 2**32 (Q15) or 2**64 (Q31), as unsigned C arithmetic does; intermediate
  wrap-around is harmless because the true sum of a section whose output stays within
  2**(1+shift) full scale fits; y = saturate(acc >> r) (arithmetic shift: round half up).
- Coefficients round half up: floor(c * 2**r + 0.5).
- Cascades are rescaled before quantization so that each section's running response peaks
  at 1 (peak-magnitude section scaling, common practice); the product is unchanged.
- Steady-state start of a section at input u: x1 = x2 = u, y1 = y2 = saturate((u*g + 2**(rg-1))
  >> rg) with g the section's DC gain from its quantized coefficients, held like a coefficient.
- Moving average: exact running sum in a 32-bit (Q15) or 64-bit (Q31) accumulator, output
  sum / window rounded half away from zero. Median: exact. Gain: scale held with a shift,
  y = saturate(((x*s + 2**(r-1)) >> r) + offset), offset = offset_units / full_scale in Q.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

# Frequencies (Hz) of a design's `derived` or `params` that the report checks the response at.
CHARACTERISTIC_KEYS: tuple[str, ...] = ("cutoff_hz", "centre_hz", "low_hz", "high_hz", "freq_hz")
MAX_MEDIAN_WINDOW = 255


@dataclass(frozen=True)
class QFormat:
    """A fixed-point data format: `bits`-wide signed data with F = bits - 1 fraction bits."""

    name: str
    bits: int
    acc_bits: int

    @property
    def frac(self) -> int:
        return self.bits - 1

    @property
    def max_int(self) -> int:
        return (1 << (self.bits - 1)) - 1

    @property
    def min_int(self) -> int:
        return -(1 << (self.bits - 1))

    def saturate(self, value: int) -> int:
        """Clamp an integer to the data range."""
        return self.max_int if value > self.max_int else self.min_int if value < self.min_int \
            else value

    def wrap(self, value: int) -> int:
        """Reduce an integer modulo 2**acc_bits into the signed accumulator range."""
        half = 1 << (self.acc_bits - 1)
        return ((value + half) & ((1 << self.acc_bits) - 1)) - half


Q15 = QFormat("q15", 16, 32)
Q31 = QFormat("q31", 32, 64)
FORMATS: dict[str, QFormat] = {"q15": Q15, "q31": Q31}


def q_format(name: str) -> QFormat:
    """The QFormat for "q15"/"q31" (also accepts the export targets "c-q15"/"c-q31")."""
    key = name.removeprefix("c-")
    if key not in FORMATS:
        raise ValueError(f"target = {name!r} is not a fixed-point format; use q15 or q31")
    return FORMATS[key]


def quantize_group(values: Sequence[float], fmt: QFormat, what: str = "coefficient"
                   ) -> tuple[tuple[int, ...], int]:
    """Round `values` to integers in Q(F - shift) with the smallest shift that fits them all.

    Returns (integers, shift). Raises ValueError when even shift F - 1 cannot hold them.
    """
    for shift in range(fmt.frac):
        scale = float(1 << (fmt.frac - shift))
        ints = tuple(math.floor(float(v) * scale + 0.5) for v in values)
        if all(fmt.min_int <= i <= fmt.max_int for i in ints):
            return ints, shift
    biggest = max(abs(float(v)) for v in values)
    raise ValueError(f"{what} magnitude {biggest:.6g} does not fit {fmt.name.upper()} "
                     f"(allowed below {2 ** (fmt.frac - 1)})")


@dataclass(frozen=True)
class StagePlan:
    """One stage of a channel chain as the exporter sees it (target-independent).

    form:     "biquads" (sos set), "moving-average" / "median" (window), "gain" (scale, offset).
    sos:      (m, 6) float64 scipy layout, for "biquads".
    label:    e.g. "stage 2: butterworth" for reports and C comments.
    start:    "steady" or "zero" (the stage's start policy).
    freqs_hz: characteristic frequencies (cutoff, centre, band edges) for the report.
    """

    form: str
    label: str
    start: str = "steady"
    sos: np.ndarray | None = None
    window: int = 0
    scale: float = 1.0
    offset: float = 0.0
    kind: str = ""
    rate_hz: float = 0.0
    freqs_hz: tuple[float, ...] = ()


def plan_stage(design: Any, start: str = "steady", label: str = "") -> StagePlan:
    """The StagePlan of a filters.design.StageDesign (kind, sos, fir, params, derived, rate_hz)."""
    kind = str(design.kind)
    params = dict(getattr(design, "params", {}) or {})
    derived = dict(getattr(design, "derived", {}) or {})
    rate = float(getattr(design, "rate_hz", 0.0) or 0.0)
    label = label or kind
    freqs = []
    for key in CHARACTERISTIC_KEYS:
        f = derived.get(key, params.get(key))
        if isinstance(f, int | float) and 0.0 < float(f) and (rate == 0 or f < rate / 2):
            freqs.append(float(f))
    common = dict(label=label, start=start, kind=kind, rate_hz=rate, freqs_hz=tuple(freqs))
    if getattr(design, "sos", None) is not None:
        sos = np.asarray(design.sos, dtype=np.float64).reshape(-1, 6)
        return StagePlan("biquads", sos=sos, **common)
    if kind == "moving-average" or getattr(design, "fir", None) is not None:
        window = int(params.get("window") or len(design.fir))
        return StagePlan("moving-average", window=window, **common)
    if kind == "median":
        window = int(params["window"])
        if not (1 <= window <= MAX_MEDIAN_WINDOW and window % 2 == 1):
            raise ValueError(f"median window = {window} cannot be exported; "
                             f"allowed: odd, 1 to {MAX_MEDIAN_WINDOW}")
        return StagePlan("median", window=window, **common)
    if kind == "gain":
        return StagePlan("gain", scale=float(params.get("scale", 1.0)),
                         offset=float(params.get("offset", 0.0)), **common)
    raise ValueError(f"stage kind {kind!r} has no coefficients to export")


def balance_sections(sos: np.ndarray, points: int = 2048) -> np.ndarray:
    """Rescale section numerators so each running product peaks at |H| = 1 (overall unchanged).

    sos: (m, 6). Peak of the magnitude over `points` frequencies from DC to Nyquist.
    """
    from scipy.signal import freqz_sos

    out = np.array(sos, dtype=np.float64, copy=True)
    for i in range(len(out) - 1):
        _, h = freqz_sos(out[: i + 1], worN=np.linspace(0, np.pi, points))
        peak = float(np.max(np.abs(h)))
        if peak > 0 and np.isfinite(peak):
            out[i, :3] /= peak
            out[i + 1, :3] *= peak
    return out


@dataclass(frozen=True)
class FixedBiquad:
    """One quantized direct form I section: integers in Q(F - shift), DC gain in Q(F - dc_shift)."""

    b: tuple[int, int, int]
    a: tuple[int, int]
    shift: int
    dc_gain: int
    dc_shift: int

    def sos_row(self, fmt: QFormat) -> np.ndarray:
        """(6,) float64: the coefficients the integers stand for, scipy layout."""
        s = float(1 << (fmt.frac - self.shift))
        return np.array([self.b[0] / s, self.b[1] / s, self.b[2] / s, 1.0,
                         self.a[0] / s, self.a[1] / s])


def quantize_sos(sos: np.ndarray, fmt: QFormat, balance: bool = True) -> tuple[FixedBiquad, ...]:
    """Quantize a cascade (m, 6) for `fmt`, balanced first unless `balance` is False."""
    rows = balance_sections(sos) if balance and len(sos) > 1 else np.asarray(sos, dtype=float)
    sections = []
    for i, row in enumerate(rows):
        b0, b1, b2, a0, a1, a2 = (float(v) for v in row)
        if a0 != 1.0:
            b0, b1, b2, a1, a2 = b0 / a0, b1 / a0, b2 / a0, a1 / a0, a2 / a0
        ints, shift = quantize_group((b0, b1, b2, a1, a2), fmt, f"section {i + 1} coefficient")
        s = float(1 << (fmt.frac - shift))
        den = s + ints[3] + ints[4]
        gain = (ints[0] + ints[1] + ints[2]) / den if den != 0 else 0.0
        (g,), g_shift = quantize_group((gain,), fmt, f"section {i + 1} DC gain")
        sections.append(FixedBiquad(ints[:3], ints[3:], shift, g, g_shift))
    return tuple(sections)


@dataclass(frozen=True)
class FixedStage:
    """A StagePlan in integers for one QFormat and one channel full scale (units)."""

    plan: StagePlan
    fmt: QFormat
    sections: tuple[FixedBiquad, ...] = ()
    scale: int = 0
    scale_shift: int = 0
    offset: int = 0


def fix_stage(plan: StagePlan, fmt: QFormat, full_scale: float) -> FixedStage:
    """Quantize one stage; full_scale (units, > 0) maps the offset of a gain stage into Q."""
    if not full_scale > 0:
        raise ValueError(f"full_scale = {full_scale!r} must be a positive number of units")
    if plan.form == "biquads":
        return FixedStage(plan, fmt, sections=quantize_sos(plan.sos, fmt))
    if plan.form == "gain":
        (scale,), shift = quantize_group((plan.scale,), fmt, f"{plan.label} scale")
        offset = math.floor(plan.offset / full_scale * (1 << fmt.frac) + 0.5)
        if not fmt.min_int <= offset <= fmt.max_int:
            raise ValueError(f"{plan.label} offset = {plan.offset:g} is outside the full scale "
                             f"+-{full_scale:g}; raise the full scale")
        return FixedStage(plan, fmt, scale=scale, scale_shift=shift, offset=offset)
    if plan.form == "moving-average":
        limit = 1 << (fmt.acc_bits - fmt.bits)
        if not 1 <= plan.window < limit:
            raise ValueError(f"{plan.label} window = {plan.window} does not fit the "
                             f"{fmt.acc_bits}-bit sum; allowed 1 to {limit - 1}")
    return FixedStage(plan, fmt)


def to_fixed(values: np.ndarray, full_scale: float, fmt: QFormat) -> np.ndarray:
    """Physical values (any shape, units) -> int64 Q integers, rounded half up and saturated."""
    scaled = np.floor(np.asarray(values, dtype=np.float64) / full_scale * (1 << fmt.frac) + 0.5)
    return np.clip(scaled, fmt.min_int, fmt.max_int).astype(np.int64)


def from_fixed(ints: np.ndarray, full_scale: float, fmt: QFormat) -> np.ndarray:
    """Q integers -> physical values (float64, units)."""
    return np.asarray(ints, dtype=np.float64) * (full_scale / (1 << fmt.frac))


def _div_round(num: int, den: int) -> int:
    """num / den rounded half away from zero, as the generated C computes it."""
    q = (abs(num) + den // 2) // den
    return q if num >= 0 else -q


@dataclass
class _Runner:
    """The state of one FixedStage while it runs (the Python twin of the C state)."""

    stage: FixedStage
    state: list[Any] = field(default_factory=list)
    pos: int = 0
    acc: int = 0

    def prime(self, u: int) -> None:
        st, form = self.stage, self.stage.plan.form
        u = u if st.plan.start == "steady" else 0
        fmt = st.fmt
        if form == "biquads":
            self.state = []
            for sec in st.sections:
                r = fmt.frac - sec.dc_shift
                y0 = fmt.saturate((u * sec.dc_gain + (1 << (r - 1))) >> r)
                self.state.append([u, u, y0, y0])
                u = y0
        elif form == "moving-average":
            self.state, self.pos, self.acc = [u] * st.plan.window, 0, u * st.plan.window
        elif form == "median":
            self.state, self.pos = [[u] * st.plan.window, [u] * st.plan.window], 0

    def step(self, x: int) -> int:
        st, fmt = self.stage, self.stage.fmt
        form = st.plan.form
        if form == "biquads":
            for sec, s in zip(st.sections, self.state, strict=True):
                r = fmt.frac - sec.shift
                acc = ((1 << (r - 1)) + sec.b[0] * x + sec.b[1] * s[0] + sec.b[2] * s[1]
                       - sec.a[0] * s[2] - sec.a[1] * s[3])
                y = fmt.saturate(fmt.wrap(acc) >> r)
                s[1], s[0], s[3], s[2] = s[0], x, s[2], y
                x = y
            return x
        if form == "moving-average":
            n = st.plan.window
            self.acc += x - self.state[self.pos]
            self.state[self.pos] = x
            self.pos = (self.pos + 1) % n
            return fmt.saturate(_div_round(self.acc, n))
        if form == "median":
            hist, ordered = self.state
            ordered.remove(hist[self.pos])
            hist[self.pos] = x
            self.pos = (self.pos + 1) % len(hist)
            lo = 0
            while lo < len(ordered) and ordered[lo] <= x:
                lo += 1
            ordered.insert(lo, x)
            return ordered[len(ordered) // 2]
        r = fmt.frac - st.scale_shift
        return fmt.saturate(((x * st.scale + (1 << (r - 1))) >> r) + st.offset)


class FixedChainModel:
    """The exact integer model of one exported fixed-point channel chain.

    Each stage starts at its own first input sample by its start policy, like the
    Python streaming stages and the generated C.
    """

    def __init__(self, stages: Sequence[FixedStage]) -> None:
        self.stages = tuple(stages)
        self.reset()

    def reset(self) -> None:
        """Forget state; the next sample starts every stage by its start policy."""
        self._runners = [_Runner(s) for s in self.stages]
        self._started = False

    def process(self, x: np.ndarray) -> np.ndarray:
        """x: (n,) Q integers (already saturated) -> (n,) int64 Q integers."""
        out = np.empty(len(x), dtype=np.int64)
        for n, v in enumerate(np.asarray(x, dtype=np.int64).tolist()):
            for runner in self._runners:
                if not self._started:
                    runner.prime(v)
                v = runner.step(v)
            self._started = True
            out[n] = v
        return out


def quantization_report(designs: Any, rate_hz: float, target: str, full_scale: float = 1.0
                        ) -> Any:
    """The quantization report of StageDesigns for a C target (c-float, c-double, c-q15,
    c-q31), with `format_text()`; it lives in filters.fixedreport, this is the short way in."""
    from filters.fixedreport import quantization_report as build

    return build(designs, rate_hz, target, full_scale)
