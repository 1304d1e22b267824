"""C99 source of an ExportPlan: NAME.h and NAME.c (no heap, no libm, no library calls).

Float targets run transposed direct form II biquads, or the delta form where the
quantization report chose it for a channel (filters.float32model models both operation for
operation); Q15/Q31 run direct form I with the integer arithmetic that filters.fixedpoint
models exactly (see its module docstring).
Every channel gets a state struct NAME_<ch>_chain and NAME_<ch>_init/_reset/_step.
A chain starts at its first sample: each stage is primed at its own first input by its
start policy (steady: as if that input had held forever; zero: from rest), then stepped.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from filters.fixedpoint import FixedStage, QFormat, StagePlan, fix_stage, q_format
from filters.float32model import section_rows
from monitor.export.chelpers import DELTA_HELPERS, FIXED_HELPERS, FLOAT_HELPERS, MEDIAN_HELPERS
from monitor.export.plan import ExportChannel, ExportPlan


@dataclass(frozen=True)
class CTypes:
    """C spellings for one target: sample, accumulator and literal formatting."""

    sample: str
    acc: str = ""
    uacc: str = ""
    limit: str = ""        # INT16 / INT32 for the saturation limits
    literal_digits: int = 9
    literal_suffix: str = "f"

    def literal(self, value: float) -> str:
        if self.literal_suffix == "f":
            value = float(np.float32(value))
        text = f"{value:.{self.literal_digits}g}"
        if "." not in text and "e" not in text:
            text += ".0"
        return text + self.literal_suffix


def c_types(plan: ExportPlan) -> CTypes:
    """The CTypes of the plan's target."""
    if plan.target == "c-q15":
        return CTypes("int16_t", "int32_t", "uint32_t", "INT16")
    if plan.target == "c-q31":
        return CTypes("int32_t", "int64_t", "uint64_t", "INT32")
    if plan.double:
        return CTypes("double", literal_digits=17, literal_suffix="")
    return CTypes("float")


def _uses_delta(plan: ExportPlan) -> bool:
    return not plan.fixed and any(ch.structure == "delta" and any(p.form == "biquads"
                                                                  for p in ch.plans)
                                  for ch in plan.channels)


def _member(plan: StagePlan, j: int, t: str, fixed: bool, structure: str = "tdf2") -> str:
    if plan.form == "biquads":
        kind = "df1" if fixed else structure
        return f"    PFX_{kind} s{j}[{len(plan.sos)}];"
    if plan.form == "moving-average":
        extra = "PFX_acc sum;" if fixed else f"{t} sum, fresh;"
        return f"    struct {{ {t} buf[{plan.window}]; uint32_t pos; {extra} }} s{j};"
    if plan.form == "median":
        return (f"    struct {{ {t} hist[{plan.window}]; {t} sorted[{plan.window}]; "
                f"uint32_t pos; }} s{j};")
    return ""


def header(plan: ExportPlan) -> str:
    """The text of NAME.h."""
    t = c_types(plan)
    guard = plan.prefix.upper() + "_H"
    lines = [
        f"/* {plan.prefix}.h: filter chains exported by tunetrace, target {plan.target}"
        f"{' (double)' if plan.double else ''}, {plan.rate_hz:g} Hz.",
        " * Generated: re-export from the chain file instead of editing. See README.md.",
        " * A filtered signal that feeds a control loop or a safety function adds lag and",
        " * can hide faults: validate on the real system under the applicable standards. */",
        f"#ifndef {guard}", f"#define {guard}", "", "#include <stdint.h>", "",
        f"#define {plan.prefix.upper()}_RATE_HZ {plan.rate_hz!r}",
        f"#define {plan.prefix.upper()}_CHANNELS {len(plan.channels)}", "",
        f"typedef {t.sample} PFX_sample;  /* every input and output sample */",
    ]
    if plan.fixed:
        fmt = q_format(plan.target)
        lines += [
            f"typedef {t.acc} PFX_acc;      /* accumulator */",
            f"/* {fmt.name.upper()}: sample = value / full_scale * 2^{fmt.frac}, saturated. */",
            "typedef struct { PFX_sample x1, x2, y1, y2; } PFX_df1;",
        ]
    else:
        lines.append("typedef struct { PFX_sample s1, s2; } PFX_tdf2;")
        if _uses_delta(plan):
            lines.append("typedef struct { PFX_sample s1, s2, e1, e2; } PFX_delta;"
                         "  /* delta form: states and their compensations */")
    for ch in plan.channels:
        scale = f", full scale +-{ch.full_scale:g}" if plan.fixed else ""
        if plan.fixed:  # sample = round(reading / FULL_SCALE * 2^F), saturated
            lines += ["", f"#define {plan.prefix.upper()}_{ch.ident.upper()}_FULL_SCALE "
                      f"{ch.full_scale!r}  /* units per +-1.0 */"]
        lines += ["", f"/* channel {ch.name}{scale}: "
                  + (", ".join(p.label for p in ch.plans) or "no stages (passes through)")
                  + " */", "typedef struct {", "    int started;"]
        if not plan.fixed:
            lines.append("    PFX_sample last;  /* last finite input */")
        lines += [m for j, p in enumerate(ch.plans)
                  if (m := _member(p, j, "PFX_sample", plan.fixed, ch.structure))]
        lines += [f"}} PFX_{ch.ident}_chain;", "",
                  "/* Prepare a new state: the next step starts every stage at its input. */",
                  f"void PFX_{ch.ident}_init(PFX_{ch.ident}_chain *c);",
                  "/* Forget the state (after a fault, say): restart at the next step. */",
                  f"void PFX_{ch.ident}_reset(PFX_{ch.ident}_chain *c);",
                  f"/* Filter one sample of channel {ch.name}. */",
                  f"PFX_sample PFX_{ch.ident}_step(PFX_{ch.ident}_chain *c, PFX_sample x);"]
    lines += ["", f"#endif /* {guard} */", ""]
    return "\n".join(lines).replace("PFX_", plan.prefix + "_")


def _coef_table(ch: ExportChannel, j: int, plan: StagePlan, fixed: FixedStage | None,
                t: CTypes) -> str:
    name = f"PFX_{ch.ident}_c{j}"
    if fixed is None:  # the table filters.float32model runs: tdf2 or delta layout
        rows = ["    {" + ", ".join(t.literal(v) for v in vals) + "}"
                for vals in section_rows(plan.sos, ch.structure)]
        return (f"static const PFX_sample {name}[{len(rows)}][6] = {{\n"
                + ",\n".join(rows) + "\n};")
    fmt = fixed.fmt
    rows = []
    for sec in fixed.sections:
        vals = [*sec.b, *sec.a, sec.dc_gain, fmt.frac - sec.shift, fmt.frac - sec.dc_shift]
        rows.append("    {" + ", ".join(_int_literal(v, fmt) for v in vals[:6]) + ", "
                    + ", ".join(str(v) for v in vals[6:]) + "}")
    return (f"static const PFX_df1_coef {name}[{len(rows)}] = {{\n"
            + ",\n".join(rows) + "\n};")


def _int_literal(value: int, fmt: QFormat) -> str:
    # INT32_MIN cannot be written as a plain literal: spell it as an expression.
    if value == fmt.min_int:
        return f"({value + 1} - 1)"
    return str(value)


def _stage_step(ch: ExportChannel, j: int, plan: StagePlan, fixed: FixedStage | None,
                t: CTypes) -> str:
    s = f"c->s{j}"
    if plan.form == "biquads":  # one call per section: constant coefficients fold in
        one = "PFX_df1_step" if fixed is not None else f"PFX_{ch.structure}_step"
        ref = "&" if fixed is not None else ""
        return "\n    ".join(f"v = {one}(&{s}[{i}], {ref}PFX_{ch.ident}_c{j}[{i}], v);"
                              for i in range(len(plan.sos)))
    if plan.form == "moving-average":
        if fixed is not None:
            return f"v = PFX_mavg_step({s}.buf, {plan.window}u, &{s}.pos, &{s}.sum, v);"
        inv = t.literal(1.0 / plan.window)
        return (f"v = PFX_mavg_step({s}.buf, {plan.window}u, &{s}.pos, &{s}.sum, "
                f"&{s}.fresh, {inv}, v);")
    if plan.form == "median":
        return f"v = PFX_median_step({s}.hist, {s}.sorted, {plan.window}u, &{s}.pos, v);"
    if fixed is not None:
        r = fixed.fmt.frac - fixed.scale_shift
        return (f"v = PFX_gain(v, {_int_literal(fixed.scale, fixed.fmt)}, {r}u, "
                f"{_int_literal(fixed.offset, fixed.fmt)});")
    return f"v = v * {t.literal(plan.scale)} + {t.literal(plan.offset)};"


def _stage_prime(ch: ExportChannel, j: int, plan: StagePlan, fixed: FixedStage | None) -> str:
    s = f"c->s{j}"
    u = "v" if plan.start == "steady" else "0"
    if plan.form == "biquads":
        prime = "PFX_delta_prime" if fixed is None and ch.structure == "delta" \
            else "PFX_cascade_prime"
        return f"{prime}({s}, PFX_{ch.ident}_c{j}, {len(plan.sos)}u, {u});"
    if plan.form == "moving-average":
        extra = "" if fixed is not None else f", &{s}.fresh"
        return f"PFX_mavg_prime({s}.buf, {plan.window}u, &{s}.pos, &{s}.sum{extra}, {u});"
    if plan.form == "median":
        return f"PFX_median_prime({s}.hist, {s}.sorted, {plan.window}u, &{s}.pos, {u});"
    return ""


def fixed_stages(ch: ExportChannel, target: str) -> list[FixedStage]:
    """The channel's stages quantized for a fixed-point target."""
    fmt = q_format(target)
    return [fix_stage(p, fmt, ch.full_scale) for p in ch.plans]


def source(plan: ExportPlan) -> str:
    """The text of NAME.c."""
    t = c_types(plan)
    forms = {p.form for ch in plan.channels for p in ch.plans}
    contract = "" if plan.fixed else (
        "\n * Build with -ffp-contract=off (or -std=c99): a fused multiply-add (vfma on a "
        "Cortex-M4F or M7)\n * rounds differently from what the test vectors were checked "
        "against.")
    parts = [f"/* {plan.prefix}.c: generated by tunetrace export ({plan.target}). "
             f"See README.md.{contract} */", f'#include "{plan.prefix}.h"', ""]
    if plan.fixed:
        fmt = q_format(plan.target)
        helpers = (FIXED_HELPERS.replace("LIMIT_MAX", f"{t.limit}_MAX")
                   .replace("LIMIT_MIN", f"{t.limit}_MIN")
                   .replace("ACC_MAX", f"INT{fmt.acc_bits}_MAX").replace("UACC", t.uacc))
    else:
        helpers = FLOAT_HELPERS + ("\n" + DELTA_HELPERS if _uses_delta(plan) else "")
    parts.append(helpers)
    if "median" in forms:
        parts.append(MEDIAN_HELPERS)
    for ch in plan.channels:
        fixed = fixed_stages(ch, plan.target) if plan.fixed else [None] * len(ch.plans)
        parts.append(f"/* ---- channel {ch.name} ---- */")
        for b in ch.bypassed:
            parts.append(f"/* {b}: bypassed in the chain file, not exported */")
        for j, (p, f) in enumerate(zip(ch.plans, fixed, strict=True)):
            if p.form == "biquads":
                form = "" if plan.fixed else f", {ch.structure}"
                parts.append(f"/* {p.label}, start {p.start}{form} */\n"
                             + _coef_table(ch, j, p, f, t))
        steps = [(p, _stage_step(ch, j, p, f, t)) for j, (p, f)
                 in enumerate(zip(ch.plans, fixed, strict=True))]
        primes = [_stage_prime(ch, j, p, f) for j, (p, f)
                  in enumerate(zip(ch.plans, fixed, strict=True))]
        pfx = f"PFX_{ch.ident}"
        first = []
        for (p, step), prime in zip(steps, primes, strict=True):
            first += [f"    /* {p.label}, start {p.start} */"]
            first += [f"    {prime}"] if prime else []
            first += [f"    {step}"]
        stateless = all(p.form == "gain" for p in ch.plans)
        missing = [] if plan.fixed else [
            "    if (!(x - x == 0)) {  /* NaN or infinity: a missing sample, as on the host: */",
            "        if (c->started)   /* the stages see the last finite input instead */",
            f"            (void){pfx}_run(c, c->last);",
            "        return x;", "    }", "    c->last = x;"]
        parts.append("\n".join([
            f"static PFX_sample {pfx}_first({pfx}_chain *c, PFX_sample v)", "{",
            *first, "    c->started = 1;", "    return v;", "}", "",
            f"static inline PFX_sample {pfx}_run({pfx}_chain *c, PFX_sample v)", "{",
            *(["    (void)c;"] if stateless else []), *[f"    {step}" for _, step in steps],
            "    return v;", "}", "",
            f"PFX_sample {pfx}_step({pfx}_chain *c, PFX_sample x)", "{", *missing,
            "    if (!c->started)", f"        return {pfx}_first(c, x);",
            f"    return {pfx}_run(c, x);", "}", "",
            f"void {pfx}_reset({pfx}_chain *c)", "{", "    c->started = 0;", "}", "",
            f"void {pfx}_init({pfx}_chain *c)", "{",
            "    /* the first step primes every state field, so marking is enough */",
            "    c->started = 0;", "}", ""]))
    return "\n".join(parts).replace("PFX_", plan.prefix + "_")
