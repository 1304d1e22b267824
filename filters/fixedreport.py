"""Quantization report: what exporting a chain to float32, Q15 or Q31 costs and risks.

For each stage: poles of the quantized coefficients (stability), response error at the
characteristic frequencies (cutoff, centre, band edges, DC) in dB, overflow headroom (the
L1 norm of the impulse response from the stage input to each section output bounds that
section's peak for any input within full scale), and for fixed point a worst-case error
bound at the channel output against the exact float64 chain, for inputs within full scale
that do not saturate. The bound adds, stage by stage: input rounding (0.5 LSB), rounding at
every section output through its noise gain, coefficient error (L1 of the impulse response
difference), the steady-start rounding, and upstream error through the stage's L1 gain.

For the float targets (c-float: float32, c-double) each channel runs through the
operation-exact model of the generated C (filters.float32model) on the export's own test
vectors and on a step from rest: the report states the largest error against the float64
chain (fraction of the output peak) and the DC gain against the designed one, and the target
holds the chain only when both are within FLOAT_TOLERANCE (the number the export's README
check uses) less a margin of a few rounding steps for the compiler. The biquad structure is
chosen per channel: plain transposed direct form II when it holds, else the delta form
(coefficients as offsets from z = 1, compensated states), which keeps low cutoffs at high
rates.

Limits below are this project's choices (common practice for sensor filtering), not a standard.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from filters.fixedpoint import QFormat, StagePlan, fix_stage, plan_stage, q_format
from filters.float32model import (
    STRUCTURES,
    FloatFigures,
    float_figures,
    reference_output,
    rows_response,
    section_poles,
    stored_rows,
)

TARGETS: tuple[str, ...] = ("c-float", "c-double", "c-q15", "c-q31")
RESPONSE_ERROR_LIMIT_DB = 0.5      # largest response error at a characteristic frequency
ERROR_BOUND_LIMIT = 0.01           # largest output error bound, as a fraction of full scale
SIGNIFICANT_GAIN = 0.01            # response points below -40 dB are not compared
_MAX_IMPULSE = 1 << 17
# Float targets: largest error over the test vectors (fraction of each output column's
# peak) and of the DC gain; the export's README check compares the compiled code with the
# same number.
FLOAT_TOLERANCE: dict[str, float] = {"c-float": 1e-5, "c-double": 1e-12}
# Room kept below the tolerance for a compiler whose rounding differs from the model (in
# units of the sample type's machine epsilon, relative to the peak). gcc's default
# -ffp-contract=fast on a Cortex-M4F/M7 fuses multiply-adds, which moved the error by up
# to 20 steps over a scan of 5,000 low-passes (tests/monitor/export/test_export_arm.py);
# 32 keeps "holds" true for such a build too, not only for the README's flags.
FLOAT_MARGIN_EPS = 32
STRUCTURE_NAMES = {"tdf2": "transposed direct form II",
                   "delta": "delta form (offsets from z = 1, compensated states)",
                   "df1": "direct form I"}


@dataclass(frozen=True)
class SectionQuantization:
    """One section: its stored coefficients, shift, pole radius and peak-gain bound (L1)."""

    coefficients: tuple[float | int, ...]   # b0 b1 b2 a1 a2 as stored (ints or floats)
    shift: int
    pole_radius: float
    l1_from_stage_input: float


@dataclass(frozen=True)
class StageQuantization:
    """One stage's quantization facts; error_bound is at the stage output, full-scale fraction."""

    label: str
    form: str
    sections: tuple[SectionQuantization, ...]
    response_error_db: tuple[tuple[float, float], ...]   # (frequency Hz, error dB)
    peak_gain: float
    error_bound: float
    failure: str = ""     # why the target cannot represent the stage at all

    @property
    def stable(self) -> bool:
        return not self.failure and all(s.pole_radius < 1.0 for s in self.sections)

    @property
    def worst_error_db(self) -> float:
        return max((abs(e) for _, e in self.response_error_db), default=0.0)


@dataclass(frozen=True)
class ChannelQuantization:
    """Every stage of one channel chain; full_scale in the channel's units (fixed point)."""

    channel: str
    full_scale: float
    stages: tuple[StageQuantization, ...]
    structure: str = "df1"               # biquad structure: tdf2 / delta (float), df1 (fixed)
    figures: FloatFigures | None = None  # float targets: the model's error and DC gain
    plain: FloatFigures | None = None    # float targets: tdf2's figures when delta was chosen

    @property
    def error_bound(self) -> float:
        return self.stages[-1].error_bound if self.stages else 0.0


@dataclass(frozen=True)
class QuantizationReport:
    """The whole report. `fatal`: unstable, never export; `problems`: the target cannot hold
    the design (export refuses unless forced); `warnings`: saturation risks worth knowing."""

    target: str
    rate_hz: float
    channels: tuple[ChannelQuantization, ...]
    fatal: tuple[str, ...]
    problems: tuple[str, ...]
    warnings: tuple[str, ...]
    suggestion: str = ""     # the fix to try when not ok
    vectors_seconds: float = 4.0

    @property
    def tolerance(self) -> float:
        """Float targets: the stated tolerance (fraction of peak); 0 for fixed point."""
        return FLOAT_TOLERANCE.get(self.target, 0.0)

    @property
    def ok(self) -> bool:
        return not self.fatal and not self.problems

    def to_dict(self) -> dict[str, object]:
        """A JSON-ready summary: target, ok, fatal, problems, warnings, per-channel bounds."""
        return {"target": self.target, "ok": self.ok, "fatal": list(self.fatal),
                "problems": list(self.problems), "warnings": list(self.warnings),
                "suggestion": "" if self.ok else self.suggestion,
                "tolerance": self.tolerance,
                "channels": {c.channel: _channel_dict(c) for c in self.channels},
                "text": self.format_text()}

    def format_text(self) -> str:
        """A readable multi-line report."""
        fixed = self.target in ("c-q15", "c-q31")
        lines = [f"Quantization for {self.target} at {self.rate_hz:g} Hz"]
        for ch in self.channels:
            scale = f" (+-{ch.full_scale:g} units = full scale)" if fixed else ""
            lines.append(f"channel {ch.channel}{scale}:")
            for st in ch.stages:
                lines.append(f"  {st.label} [{st.form}]")
                if st.failure:
                    lines.append(f"    cannot be represented: {st.failure}")
                for i, sec in enumerate(st.sections, 1):
                    if st.form == "gain":
                        lines.append(f"    scale {sec.coefficients[0]} (shift {sec.shift}), "
                                     f"offset {sec.coefficients[1]}")
                        continue
                    coefs = " ".join(str(c) if isinstance(c, int) else f"{c:.9g}"
                                     for c in sec.coefficients)
                    shift = f" shift {sec.shift}" if fixed else ""
                    names = ("b0 2b0+b1 b0+b1+b2 2+a1 1+a1+a2" if ch.structure == "delta"
                             else "b0 b1 b2 a1 a2")
                    lines.append(f"    section {i}:{shift} {names} = {coefs}; "
                                 f"pole radius {sec.pole_radius:.6f}; "
                                 f"peak gain (L1) {sec.l1_from_stage_input:.3f}")
                for f, e in st.response_error_db:
                    where = "DC" if f == 0 else f"{f:g} Hz"
                    lines.append(f"    response error at {where}: {e:+.4f} dB")
                if fixed:
                    headroom = (-20 * math.log10(st.peak_gain) + 0.0 if st.peak_gain > 0
                                else math.inf)
                    lines.append(f"    headroom {headroom:+.2f} dB (peak gain {st.peak_gain:.3f}); "
                                 f"error bound here {st.error_bound * 100:.4f} % of full scale")
            if fixed:
                lines.append(f"  output error bound: {ch.error_bound * 100:.4f} % of full scale "
                             f"= {ch.error_bound * ch.full_scale:.6g} units "
                             "(inputs within full scale, no saturation)")
            if ch.figures is not None:
                lines.extend(_float_lines(ch, self.tolerance))
        for title, items in (("REFUSED", self.fatal), ("PROBLEM", self.problems),
                             ("warning", self.warnings)):
            lines.extend(f"{title}: {text}" for text in items)
        if self.ok:
            lines.append(f"{self.target} holds this chain.")
        else:
            lines.append(f"suggested fix: {self.suggestion}")
        return "\n".join(lines)


def _channel_dict(c: ChannelQuantization) -> dict[str, object]:
    out: dict[str, object] = {
        "error_bound_full_scale": c.error_bound, "structure": c.structure,
        "worst_response_error_db": max((s.worst_error_db for s in c.stages), default=0.0)}
    if c.figures is not None:
        f = c.figures
        out.update(vector_error_of_peak=f.vector_error, dc_gain=f.dc_gain_model,
                   dc_gain_designed=f.dc_gain_design, dc_error=f.dc_error,
                   dc_samples=f.dc_samples, dc_settled=f.dc_settled)
    return out


def _float_lines(ch: ChannelQuantization, tolerance: float) -> list[str]:
    f = ch.figures
    why = ""
    if ch.structure == "delta" and ch.plain is not None:
        why = (f" (plain transposed direct form II would be off by "
               f"{max(ch.plain.vector_error, ch.plain.dc_error):.2g})")
    settled = "" if f.dc_settled else ", not reached yet: compared with the float64 chain"
    return [f"  biquad structure: {STRUCTURE_NAMES[ch.structure]}{why}",
            f"  model of the C on the test vectors: max error {f.vector_error:.3g} of peak "
            f"(tolerance {tolerance:g})",
            f"  DC gain {f.dc_gain_model:.9g} after a {f.dc_samples}-sample step from rest "
            f"(designed {f.dc_gain_design:.9g}{settled}): error {f.dc_error:.3g} "
            f"(tolerance {tolerance:g})"]


def _impulse(sos: np.ndarray, radius: float) -> np.ndarray:
    """Impulse response of a cascade, long enough to decay to 1e-10 (capped)."""
    from scipy.signal import sosfilt

    n = 64 if radius <= 0 else int(min(_MAX_IMPULSE, max(64, math.log(1e-10) / math.log(radius))))
    x = np.zeros(n)
    x[0] = 1.0
    return sosfilt(sos, x) if len(sos) else x


def _pole_radius(row: np.ndarray) -> float:
    roots = np.roots([row[3], row[4], row[5]]) if row[5] != 0 or row[4] != 0 else []
    return float(max((abs(r) for r in roots), default=0.0))


def _response_errors(plan: StagePlan, quantized: np.ndarray, structure: str = "tdf2"
                     ) -> tuple[tuple[float, float], ...]:
    from scipy.signal import freqz_sos

    freqs = np.array((0.0, *plan.freqs_hz))
    rate = plan.rate_hz or 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        _, exact = freqz_sos(plan.sos, worN=freqs, fs=rate)
        got = rows_response(quantized, structure, freqs, rate)
    out = []
    for f, e, g in zip(freqs, np.abs(exact), np.abs(got), strict=True):
        if np.isfinite(e) and np.isfinite(g) and e > SIGNIFICANT_GAIN:
            out.append((float(f), float(20 * np.log10(max(g, 1e-300) / e))))
    return tuple(out)


def _biquad_stage(plan: StagePlan, fmt: QFormat | None, dtype: type, err_in: float,
                  structure: str = "tdf2") -> StageQuantization:
    """Quantization facts of a biquad cascade; err_in and the result are in LSB (fixed)."""
    from filters.fixedpoint import balance_sections

    if fmt is None:
        stored_table = stored_rows(plan.sos, structure, dtype)
        stored = [tuple(float(v) for v in r[:5]) for r in stored_table]
        shifts = [0] * len(stored_table)
        radii = [float(max(np.abs(section_poles(r, structure)), default=0.0))
                 for r in stored_table]
        fixed = None
        # the cascade the stored values stand for, for the L1 gains (float64 arithmetic)
        b0, b1, b2, a1, a2 = (stored_table[:, i] for i in range(5))
        if structure == "delta":
            b1, b2, a1, a2 = b1 - 2 * b0, b2 - b1 + b0, a1 - 2, a2 - a1 + 1
        rows = np.column_stack([b0, b1, b2, np.ones(len(b0)), a1, a2])
    else:
        fixed = fix_stage(plan, fmt, 1.0).sections
        rows = np.array([s.sos_row(fmt) for s in fixed])
        stored = [(*s.b, *s.a) for s in fixed]
        shifts = [s.shift for s in fixed]
        radii = [_pole_radius(r) for r in rows]
    stable = all(r < 1.0 for r in radii)
    r_max = max(radii, default=0.0)
    l1s = [float(np.sum(np.abs(_impulse(rows[: i + 1], r_max)))) if stable else math.inf
           for i in range(len(rows))]
    sections = tuple(SectionQuantization(c, k, r, l1) for c, k, r, l1
                     in zip(stored, shifts, radii, l1s, strict=True))
    bound = 0.0
    if fmt is not None and stable:
        exact = balance_sections(plan.sos) if len(plan.sos) > 1 else plan.sos
        lsb = float(1 << fmt.frac)
        h_q = _impulse(rows, r_max)
        h_x = _impulse(exact, max(_pole_radius(r) for r in exact))
        n = max(len(h_q), len(h_x))
        diff = np.pad(h_q, (0, n - len(h_q))) - np.pad(h_x, (0, n - len(h_x)))
        bound = l1s[-1] * err_in + float(np.sum(np.abs(diff))) * lsb
        for i, (row, sec) in enumerate(zip(rows, fixed, strict=True)):
            noise_path = np.vstack([[1.0, 0.0, 0.0, 1.0, row[4], row[5]], rows[i + 1:]])
            gain = float(np.sum(np.abs(_impulse(noise_path, r_max))))
            den = 1.0 + row[4] + row[5]
            dc_true = (row[0] + row[1] + row[2]) / den if den else 0.0
            dc_held = sec.dc_gain / float(1 << (fmt.frac - sec.dc_shift))
            start = (0.5 + abs(dc_true - dc_held) * lsb) * (abs(row[4]) + 2 * abs(row[5]))
            bound += (0.5 + start) * gain
    if fmt is None:
        errors = _response_errors(plan, stored_table, structure)
    else:  # scipy layout b0 b1 b2 a0 a1 a2 -> table layout b0 b1 b2 a1 a2
        errors = _response_errors(plan, rows[:, [0, 1, 2, 4, 5, 5]])
    return StageQuantization(plan.label, plan.form, sections, errors,
                             max(l1s, default=1.0), bound)


def _channel(channel: str, plans: Sequence[StagePlan], target: str, full_scale: float,
             structure: str = "tdf2") -> ChannelQuantization:
    fmt = q_format(target) if target in ("c-q15", "c-q31") else None
    dtype = np.float64 if target == "c-double" else np.float32
    err = 0.5  # LSB: rounding the input into Q
    stages = []
    for plan in plans:
        try:
            st = _stage(plan, fmt, dtype, err, full_scale, structure)
        except ValueError as exc:
            st = StageQuantization(plan.label, plan.form, (), (), 1.0, err, str(exc))
        err = st.error_bound
        stages.append(st)
    if fmt is not None:
        lsb = float(1 << fmt.frac)
        stages = [StageQuantization(s.label, s.form, s.sections, s.response_error_db,
                                    s.peak_gain, s.error_bound / lsb, s.failure)
                  for s in stages]
    return ChannelQuantization(channel, full_scale, tuple(stages),
                               "df1" if fmt is not None else structure)


def _float_channel(channel: str, index: int, plans: Sequence[StagePlan], target: str,
                   full_scale: float, rate_hz: float, seconds: float, structure: str
                   ) -> ChannelQuantization:
    """A float channel: the model on the test vectors picks (or checks) the structure."""
    from filters.exercise import channel_input

    dtype = np.float64 if target == "c-double" else np.float32
    x = channel_input(index, seconds, rate_hz, full_scale, False).astype(dtype)
    x = x.astype(np.float64)
    ref = reference_output(plans, x)
    limit = _float_limit(target)
    has_biquads = any(p.form == "biquads" for p in plans)
    order = [structure] if structure != "auto" else ["tdf2", "delta"] if has_biquads \
        else ["tdf2"]
    tried: list[FloatFigures] = []
    for name in order:
        try:
            tried.append(float_figures(plans, x, name, dtype, full_scale, ref))
        except (ValueError, np.linalg.LinAlgError):
            break
        if tried[-1].holds(limit):
            break
    if not tried:
        return _channel(channel, plans, target, full_scale, order[0])
    if structure == "auto" and not tried[-1].holds(limit):
        best = min(tried, key=lambda f: max(f.vector_error, f.dc_error))
    else:
        best = tried[-1]
    out = _channel(channel, plans, target, full_scale, best.structure)
    plain = tried[0] if best.structure != tried[0].structure else None
    return ChannelQuantization(out.channel, out.full_scale, out.stages, best.structure,
                               best, plain)


def _float_limit(target: str) -> float:
    """The tolerance less the compiler margin: what the model must meet for "holds"."""
    eps = float(np.finfo(np.float64 if target == "c-double" else np.float32).eps)
    return FLOAT_TOLERANCE[target] - FLOAT_MARGIN_EPS * eps


def _stage(plan: StagePlan, fmt: QFormat | None, dtype: type, err: float, full_scale: float,
           structure: str = "tdf2") -> StageQuantization:
    """One stage's facts; err (LSB) is the error bound at the stage input."""
    if plan.form == "biquads":
        return _biquad_stage(plan, fmt, dtype, err, structure)
    peak, coefs, shift = 1.0, (), 0
    fs = fix_stage(plan, fmt, full_scale) if fmt is not None else None  # ValueError: can't
    if plan.form == "moving-average":
        err += 0.5
    elif plan.form == "gain":
        peak = abs(plan.scale)
        if fmt is not None and fs is not None:
            held = fs.scale / float(1 << (fmt.frac - fs.scale_shift))
            err = abs(held) * err + 1.0 + abs(plan.scale - held) * (1 << fmt.frac)
            coefs, shift = (fs.scale, fs.offset), fs.scale_shift
    sections = (SectionQuantization(coefs, shift, 0.0, peak),) if coefs else ()
    return StageQuantization(plan.label, plan.form, sections, (), peak, err)


def report_for_plans(plans: Mapping[str, Sequence[StagePlan]], rate_hz: float, target: str,
                     full_scales: Mapping[str, float] | None = None,
                     vectors_seconds: float = 4.0, structure: str = "auto"
                     ) -> QuantizationReport:
    """The report for stage plans per channel; full_scales: channel -> units (default 1.0).

    Float targets model the C on the export's test vectors of `vectors_seconds` (channel k
    of `plans` gets the k-th exported column) and choose each channel's biquad structure
    ("auto": tdf2 when it holds, else delta; or force "tdf2" / "delta").
    """
    if target not in TARGETS:
        raise ValueError(f"target = {target!r} is not one of {', '.join(TARGETS)}")
    if structure not in ("auto", *STRUCTURES):
        raise ValueError(f"structure = {structure!r} is not one of auto, "
                         f"{', '.join(STRUCTURES)}")
    if not (math.isfinite(vectors_seconds) and vectors_seconds > 0):
        raise ValueError(f"vectors_seconds = {vectors_seconds!r} must be above 0")
    full_scales = full_scales or {}
    fixed = target in ("c-q15", "c-q31")
    if fixed:
        channels = tuple(_channel(name, p, target, float(full_scales.get(name, 1.0)))
                         for name, p in plans.items())
    else:
        channels = tuple(_float_channel(name, k, p, target, float(full_scales.get(name, 1.0)),
                                        float(rate_hz), vectors_seconds, structure)
                         for k, (name, p) in enumerate(plans.items()))
    fatal, problems, warnings = [], [], []
    fixed = target in ("c-q15", "c-q31")
    for ch in channels:
        for st in ch.stages:
            where = f"channel {ch.channel}, {st.label}"
            if st.failure:
                fatal.append(f"{where}: {st.failure}")
            elif not st.stable:
                radius = max(s.pole_radius for s in st.sections)
                fatal.append(f"{where}: the {target} coefficients put a pole at radius "
                             f"{radius:.6f}, on or outside the unit circle, so it would not settle")
            elif st.worst_error_db > RESPONSE_ERROR_LIMIT_DB:
                problems.append(f"{where}: the {target} coefficients move the response by "
                                f"{st.worst_error_db:.2f} dB (limit {RESPONSE_ERROR_LIMIT_DB} dB)")
            if fixed and st.stable and st.peak_gain > 1.0 + 1e-9:
                warnings.append(f"{where}: a worst-case input can drive a section to "
                                f"{st.peak_gain:.3f} x its input, so inputs above "
                                f"{1 / st.peak_gain:.3f} of full scale can saturate")
        if fixed and all(s.stable for s in ch.stages) and ch.error_bound > ERROR_BOUND_LIMIT:
            problems.append(f"channel {ch.channel}: the {target} rounding error can reach "
                            f"{ch.error_bound * 100:.3f} % of full scale "
                            f"(limit {ERROR_BOUND_LIMIT * 100:g} %)")
        f = ch.figures
        if f is not None and all(s.stable for s in ch.stages) \
                and not f.holds(_float_limit(target)):
            problems.append(f"channel {ch.channel}: the {target} code "
                            f"({STRUCTURE_NAMES[ch.structure]}) is off by "
                            f"{f.vector_error:.2g} of peak on the test vectors and its DC "
                            f"gain by {f.dc_error:.2g} (tolerance "
                            f"{FLOAT_TOLERANCE[target]:g})")
    return QuantizationReport(target, float(rate_hz), channels, tuple(fatal), tuple(problems),
                              tuple(warnings), _suggestion(plans, rate_hz, target),
                              float(vectors_seconds))


def _suggestion(plans: Mapping[str, Sequence[StagePlan]], rate_hz: float, target: str) -> str:
    freqs = [f for p in plans.values() for s in p for f in s.freqs_hz]
    ratio = f" (lowest now {min(freqs) / rate_hz * 100:.2g} % of the rate)" if freqs else ""
    better = {"c-q15": "use --target c-q31", "c-q31": "use --target c-float",
              "c-float": "use --double (C double arithmetic)"}.get(target, "")
    better = f"{better}, or raise" if better else "raise"
    return (f"{better} the cutoff-to-rate ratio{ratio}, e.g. by lowering the sample rate "
            "(decimating) before the filter")


def quantization_report(designs: Sequence[Any] | Mapping[str, Sequence[Any]], rate_hz: float,
                        target: str, full_scale: float = 1.0) -> QuantizationReport:
    """Report for StageDesigns: one chain (a sequence) or per channel (a mapping name -> list).

    Items are StageDesigns or (file index, StageDesign) pairs as ChainSet.designs_for gives;
    full_scale (units per +-1.0) matters only for gain offsets in fixed point.
    """
    per_channel = designs if isinstance(designs, Mapping) else {"chain": designs}
    plans = {}
    for name, items in per_channel.items():
        pairs = [item if isinstance(item, tuple) else (i, item) for i, item in enumerate(items)]
        plans[name] = [plan_stage(d, label=f"stage {i + 1}: {d.kind}") for i, d in pairs]
    return report_for_plans(plans, rate_hz, target, {name: full_scale for name in plans})
