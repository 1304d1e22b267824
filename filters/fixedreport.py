"""Quantization report: what exporting a chain to float32, Q15 or Q31 costs and risks.

For each stage: poles of the quantized coefficients (stability), response error at the
characteristic frequencies (cutoff, centre, band edges, DC) in dB, overflow headroom (the
L1 norm of the impulse response from the stage input to each section output bounds that
section's peak for any input within full scale), and for fixed point a worst-case error
bound at the channel output against the exact float64 chain, for inputs within full scale
that do not saturate. The bound adds, stage by stage: input rounding (0.5 LSB), rounding at
every section output through its noise gain, coefficient error (L1 of the impulse response
difference), the steady-start rounding, and upstream error through the stage's L1 gain.

Limits below are this project's choices (common practice for sensor filtering), not a standard.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from filters.fixedpoint import QFormat, StagePlan, fix_stage, plan_stage, q_format

TARGETS: tuple[str, ...] = ("c-float", "c-double", "c-q15", "c-q31")
RESPONSE_ERROR_LIMIT_DB = 0.5      # largest response error at a characteristic frequency
ERROR_BOUND_LIMIT = 0.01           # largest output error bound, as a fraction of full scale
SIGNIFICANT_GAIN = 0.01            # response points below -40 dB are not compared
_MAX_IMPULSE = 1 << 17


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

    @property
    def ok(self) -> bool:
        return not self.fatal and not self.problems

    def to_dict(self) -> dict[str, object]:
        """A JSON-ready summary: target, ok, fatal, problems, warnings, per-channel bounds."""
        return {"target": self.target, "ok": self.ok, "fatal": list(self.fatal),
                "problems": list(self.problems), "warnings": list(self.warnings),
                "suggestion": "" if self.ok else self.suggestion,
                "channels": {c.channel: {"error_bound_full_scale": c.error_bound,
                                         "worst_response_error_db":
                                             max((s.worst_error_db for s in c.stages),
                                                 default=0.0)}
                             for c in self.channels},
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
                    lines.append(f"    section {i}:{shift} b0 b1 b2 a1 a2 = {coefs}; "
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
        for title, items in (("REFUSED", self.fatal), ("PROBLEM", self.problems),
                             ("warning", self.warnings)):
            lines.extend(f"{title}: {text}" for text in items)
        if self.ok:
            lines.append(f"{self.target} holds this chain.")
        else:
            lines.append(f"suggested fix: {self.suggestion}")
        return "\n".join(lines)


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


def _response_errors(plan: StagePlan, quantized: np.ndarray) -> tuple[tuple[float, float], ...]:
    from scipy.signal import freqz_sos

    freqs = np.array((0.0, *plan.freqs_hz))
    with np.errstate(divide="ignore", invalid="ignore"):
        _, exact = freqz_sos(plan.sos, worN=freqs, fs=plan.rate_hz or 1.0)
        _, got = freqz_sos(quantized, worN=freqs, fs=plan.rate_hz or 1.0)
    out = []
    for f, e, g in zip(freqs, np.abs(exact), np.abs(got), strict=True):
        if np.isfinite(e) and np.isfinite(g) and e > SIGNIFICANT_GAIN:
            out.append((float(f), float(20 * np.log10(max(g, 1e-300) / e))))
    return tuple(out)


def _biquad_stage(plan: StagePlan, fmt: QFormat | None, dtype: type, err_in: float
                  ) -> StageQuantization:
    """Quantization facts of a biquad cascade; err_in and the result are in LSB (fixed)."""
    from filters.fixedpoint import balance_sections

    if fmt is None:
        rows = plan.sos.astype(dtype).astype(np.float64)
        stored = [tuple(float(v) for v in r[[0, 1, 2, 4, 5]]) for r in rows]
        shifts = [0] * len(rows)
        fixed = None
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
    return StageQuantization(plan.label, plan.form, sections, _response_errors(plan, rows),
                             max(l1s, default=1.0), bound)


def _channel(channel: str, plans: Sequence[StagePlan], target: str, full_scale: float
             ) -> ChannelQuantization:
    fmt = q_format(target) if target in ("c-q15", "c-q31") else None
    dtype = np.float64 if target == "c-double" else np.float32
    err = 0.5  # LSB: rounding the input into Q
    stages = []
    for plan in plans:
        try:
            st = _stage(plan, fmt, dtype, err, full_scale)
        except ValueError as exc:
            st = StageQuantization(plan.label, plan.form, (), (), 1.0, err, str(exc))
        err = st.error_bound
        stages.append(st)
    if fmt is not None:
        lsb = float(1 << fmt.frac)
        stages = [StageQuantization(s.label, s.form, s.sections, s.response_error_db,
                                    s.peak_gain, s.error_bound / lsb, s.failure)
                  for s in stages]
    return ChannelQuantization(channel, full_scale, tuple(stages))


def _stage(plan: StagePlan, fmt: QFormat | None, dtype: type, err: float, full_scale: float
           ) -> StageQuantization:
    """One stage's facts; err (LSB) is the error bound at the stage input."""
    if plan.form == "biquads":
        return _biquad_stage(plan, fmt, dtype, err)
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
                     full_scales: Mapping[str, float] | None = None) -> QuantizationReport:
    """The report for stage plans per channel; full_scales: channel -> units (default 1.0)."""
    if target not in TARGETS:
        raise ValueError(f"target = {target!r} is not one of {', '.join(TARGETS)}")
    full_scales = full_scales or {}
    channels = tuple(_channel(name, p, target, float(full_scales.get(name, 1.0)))
                     for name, p in plans.items())
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
    return QuantizationReport(target, float(rate_hz), channels, tuple(fatal), tuple(problems),
                              tuple(warnings), _suggestion(plans, rate_hz, target))


def _suggestion(plans: Mapping[str, Sequence[StagePlan]], rate_hz: float, target: str) -> str:
    freqs = [f for p in plans.values() for s in p for f in s.freqs_hz]
    ratio = f" (lowest now {min(freqs) / rate_hz * 100:.2g} % of the rate)" if freqs else ""
    better = {"c-q15": "use --target c-q31", "c-q31": "use --target c-float",
              "c-float": "use --double"}.get(target, "use another target")
    return (f"{better}, or raise the cutoff-to-rate ratio{ratio}, e.g. by lowering the "
            "sample rate before the filter")


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
