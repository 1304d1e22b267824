"""DIR/README.md of an export: API, scaling, headroom, how to build and check the port."""

from __future__ import annotations

from filters.fixedreport import QuantizationReport
from monitor.export.plan import GENERIC_CHANNEL, ExportPlan

CAUTION = (
    "**Caution.** A filter adds lag and can hide faults. If this code feeds a control loop "
    "or a safety function, validate it on the real system under the standards and local "
    "practice that apply to it: the added lag (group delay) changes loop stability and "
    "response times, and a filter can smooth away the very fault a protection function "
    "must see. The test vectors prove the port matches the host model, not that the "
    "filter is right for the machine."
)


# gcc's flags per Cortex-M core, as the README prints them (the ARM tests build with these
# and run the self-test on qemu's model of each core): (core, flags, what its FPU does)
CORTEX_M: tuple[tuple[str, str, str], ...] = (
    ("Cortex-M4F", "-mcpu=cortex-m4 -mthumb -mfloat-abi=hard -mfpu=fpv4-sp-d16",
     "single-precision FPU with fused multiply-add, double in software"),
    ("Cortex-M7", "-mcpu=cortex-m7 -mthumb -mfloat-abi=hard -mfpu=fpv5-d16",
     "double-precision FPU with fused multiply-add"),
    ("Cortex-M0", "-mcpu=cortex-m0 -mthumb", "no FPU, float and double in software"),
)
CORTEX_M_COMMON = "-std=c99 -O2 -ffp-contract=off"


def _lag(designs: tuple, rate_hz: float) -> str:
    """'; lag ...' : the chain's group delay where tunetrace design quotes it."""
    if not designs:
        return ""
    from filters.analysis import default_analysis_hz, group_delay_s

    at = default_analysis_hz(list(designs), rate_hz)
    delay = group_delay_s(list(designs), at)
    return f"; lag (group delay) at {at:g} Hz: {delay * 1e3:.3g} ms = {delay * rate_hz:.3g} samples"


def _api(plan: ExportPlan) -> list[str]:
    p = plan.prefix
    ch = plan.channels[0].ident
    return [
        "## API", "",
        f"`{p}.h` declares, for every channel `<ch>`:", "",
        "```c",
        f"typedef ... {p}_sample;                       /* every input and output sample */",
        f"typedef struct {{ ... }} {p}_<ch>_chain;       /* the state of one channel chain */",
        f"void        {p}_<ch>_init({p}_<ch>_chain *c);  /* clear; start at the next sample */",
        f"void        {p}_<ch>_reset({p}_<ch>_chain *c); /* restart at the next sample */",
        f"{p}_sample {p}_<ch>_step({p}_<ch>_chain *c, {p}_sample x); /* one sample */",
        "```", "",
        "No heap, no libm, no library calls (beyond the compiler's arithmetic helpers on "
        "a core that lacks an instruction, see the Cortex-M build below): the state lives "
        "in the struct you provide "
        "(a zero-initialised static struct is ready to use). A chain starts at its first "
        "sample: each stage with start `steady` begins as if its first input had held "
        "forever (no start-up ramp from zero); a stage with start `zero` begins from rest. "
        "`reset` restarts the same way at the next sample (after a sensor fault, say). "
        "Call `step` once per sample at the rate the chain was designed for "
        f"({plan.rate_hz:g} Hz, `{p.upper()}_RATE_HZ`); at another rate the cutoffs move.", "",
        "```c",
        f'#include "{p}.h"',
        f"static {p}_{ch}_chain {ch}_filter;             /* zero-initialised: ready */",
        "/* in the sampling interrupt or task: */",
        f"{p}_sample y = {p}_{ch}_step(&{ch}_filter, x);",
        "```", "",
    ]


def _structures(plan: ExportPlan, report: QuantizationReport) -> list[str]:
    """One line per float channel with biquads: its structure and why."""
    by_name = {c.channel: c for c in report.channels}
    lines = []
    for ch in plan.channels:
        if not any(p.form == "biquads" for p in ch.plans):
            continue
        q = by_name.get(ch.name)
        if ch.structure == "delta":
            plain = q.plain if q is not None else None
            why = (f"plain transposed direct form II would be off by "
                   f"{max(plain.vector_error, plain.dc_error):.2g}" if plain is not None
                   else "chosen for this export")
            lines.append(f"- `{ch.name}`: delta form ({why}).")
        else:
            lines.append(f"- `{ch.name}`: transposed direct form II (it holds the chain, "
                         "at the lower cost).")
    if not lines:
        return []
    return ["Biquad structure per channel:", "", *lines, ""]


def _scaling(plan: ExportPlan, report: QuantizationReport) -> list[str]:
    if not plan.fixed:
        kind = "double" if plan.double else "single precision (float)"
        return ["## Arithmetic", "",
                f"Samples are in the channel's own units, {kind}. IIR stages run as cascades "
                "of biquads in one of two structures. Transposed direct form II "
                "(`_tdf2_step`, table b0 b1 b2 a1 a2 dc_gain as designed, a0 = 1) is the "
                "cheaper. The delta form (`_delta_step`, table b0, 2b0+b1, b0+b1+b2, 2+a1, "
                "1+a1+a2, dc_gain) replaces each delay by a delayed accumulator, so the "
                "table holds the coefficients as offsets from their values at z = 1: when "
                "the cutoff is far below the rate the poles crowd z = 1, 1 + a1 + a2 is "
                "tiny, and float cannot hold a1 and a2 finely enough for it (the DC gain "
                "drifts), while the offsets keep every digit. Its states add their "
                "increments with Kahan's compensated sum, so small increments are not "
                "rounded away; it costs about twice the instructions. tunetrace runs the "
                "exact operations of this C on the test vectors and picks transposed "
                "direct form II when that holds the chain, else the delta form.", "",
                *_structures(plan, report),
                "Moving averages keep a running sum over a circular "
                "buffer, refreshed at every lap so rounding does not accumulate. Medians "
                "insert each sample into a sorted window (no heap, no sort call). A NaN or "
                "infinite input counts as a missing sample, as on the host: it passes "
                "through to the output and the stages see the last finite input instead. "
                "Build with strict IEEE arithmetic: never -ffast-math (it removes that "
                "check and the delta form's compensation); -std=c99 (or "
                "-ffp-contract=off) keeps gcc from fusing multiply-adds, so the code "
                "computes exactly what tunetrace modelled.", ""]
    q = plan.target[2:].upper()
    f, acc = (15, 32) if q == "Q15" else (31, 64)
    lines = ["## Q format and scaling", "",
             f"Samples are {q}: `int{f + 1}_t`, value = sample / 2^{f} x full scale. "
             f"Convert a reading in units with `floor(reading / full_scale * 2^{f} + 0.5)` "
             "(round half up, as the vectors were made; C's `round()` takes negative ties "
             "away from zero and differs there by one LSB), saturated to the type's range; "
             "the output uses the same scaling. "
             f"`{plan.prefix.upper()}_<CH>_FULL_SCALE` in `{plan.prefix}.h` holds each "
             "channel's full scale.", "",
             "| channel | full scale (units per +-1.0) | one LSB |", "|---|---|---|"]
    lines += [f"| {ch.name} | +-{ch.full_scale:g} | {ch.full_scale / 2 ** f:.6g} |"
              for ch in plan.channels]
    lines += ["",
              f"Biquad sections run in direct form I with {q} coefficients and a {acc}-bit "
              "accumulator. A section whose coefficients reach magnitude 1 or more holds "
              f"them in Q(F - shift) (F = {f}); the product sum is then shifted right by "
              "F - shift. Sums wrap modulo 2^N in unsigned arithmetic (harmless in between: "
              "only the final sum matters), are rounded half up by adding 2^(r-1) before an "
              "arithmetic right shift by r, and saturate to the sample range. The right "
              "shift of a negative value is arithmetic on gcc, clang and the usual embedded "
              "compilers (C leaves it to the implementation); check yours if unsure. "
              "Cascades are rescaled so each section's running response peaks at 1. "
              "Steady start uses each section's DC gain, held like a coefficient. Moving "
              "averages keep an exact sum in the accumulator type and round half away from "
              "zero when dividing; a gain stage holds its scale with a shift and its offset "
              "in the channel's scaling. The coefficient tables in "
              f"`{plan.prefix}.c` list b0 b1 b2 a1 a2 dc_gain, rshift, dc_rshift per section.",
              "",
              "**Headroom.** The peak gain (L1 norm of the impulse response from the stage "
              "input to a section output) bounds how far a section can go for any input "
              "within full scale; above 1 the section can saturate. Choose the full scale "
              "with margin for the largest reading the board can produce.", ""]
    return lines


def _build(plan: ExportPlan, report: QuantizationReport) -> list[str]:
    p = plan.prefix
    k = len(plan.channels)
    lines = ["## Build and check against the vectors", "",
             f"`{p}_vectors.csv` holds {k} input column(s) then {k} expected output "
             "column(s), from tunetrace's Python model, after a header row. The input "
             "(seeded, the same on every export) starts at a non-zero level, so it checks "
             "the steady start, then has level steps, a chirp from 0.5 Hz to 0.45 x the "
             "rate, noise and single-sample spikes within 0.7 of "
             + ("full scale, in the Q format." if plan.fixed else
                "the channel's --full-scale (1.0 when not given)."), "",
             "```sh",
             f"gcc -std=c99 -O2 -Wall -Wextra -pedantic -o {p}_selftest {p}_selftest.c {p}.c",
             f"tail -n +2 {p}_vectors.csv | cut -d, -f1-{k} | ./{p}_selftest > got.csv",
             f"tail -n +2 {p}_vectors.csv | cut -d, -f{k + 1}-{2 * k} > want.csv"]
    if plan.fixed:
        lines += ["diff got.csv want.csv && echo bit-exact", "```", "",
                  "Fixed point must match bit for bit. The vectors end with a full-scale "
                  "square wave, so they also prove the saturation."]
    else:
        tol = f"{report.tolerance:g}"
        lines += [
            "paste -d, got.csv want.csv | awk -F, -v k=" + str(k) + " -v tol=" + tol + " '"
            "{ for (i = 1; i <= k; i++) { d = $i - $(i + k); if (d < 0) d = -d; "
            "m = $(i + k); if (m < 0) m = -m; if (d > err[i]) err[i] = d; "
            "if (m > peak[i]) peak[i] = m } } "
            "END { bad = 0; for (i = 1; i <= k; i++) { r = err[i] / (peak[i] > 0 ? peak[i] "
            ": 1); print \"column \" i \": max error \" r \" of peak\"; if (r > tol) bad = 1 }"
            " exit bad }'",
            "```", "",
            f"The expected values come from the float64 chain; the check passes when every "
            f"column is within {tol} of its peak. The quantization report below ran the "
            f"exact operations of this C on these vectors: \"{report.target} holds this "
            f"chain\" means its error there and its DC gain error are both within {tol}."]
    lines += ["", "The self-test reads one row of comma-separated inputs per line on stdin "
              "and prints one row of outputs per line; a bad row stops it with the line "
              "number on stderr.", ""]
    return lines + _cortex_m(plan)


def _cortex_m(plan: ExportPlan) -> list[str]:
    """The Cortex-M build: flags per core, why -ffp-contract=off, runtime helpers."""
    p = plan.prefix
    lines = ["### On a Cortex-M part", "", "```sh"]
    for core, flags, fpu in CORTEX_M:
        lines += [f"# {core}: {fpu}",
                  f"arm-none-eabi-gcc {CORTEX_M_COMMON} {flags} -c {p}.c"]
    lines += ["```", ""]
    if plan.fixed:
        lines.append("Fixed point is bit-exact on every core. On the M0, integer division "
                     "and Q31's 64-bit products are libgcc calls (`__aeabi_idiv`, "
                     "`__aeabi_lmul`, `__aeabi_ldivmod`); on the M3, M4 and M7 they are "
                     "instructions (a moving average divides by its constant window).")
    else:
        lines.append("Keep `-ffp-contract=off` in every C dialect. The M4F and M7 FPUs fuse "
                     "a*b + c into one rounding (vfma), and gcc's GNU dialects (its default, "
                     "and many IDE projects') fuse wherever they can: the rounding is then "
                     "no longer the one tunetrace modelled, and the error moves by many "
                     "rounding steps of the peak (twenty, for some Butterworth low-passes), "
                     "enough to fail the check for a chain near the limit. With the flag "
                     "every core computes the host's output bit for bit. Without an FPU "
                     "(and for double on the M4F) the arithmetic is libgcc's software "
                     "floating point (`__aeabi_f*`, `__aeabi_d*`).")
    lines += ["", f"To check the port on the part, link `{p}_selftest.c` and `{p}.c` with "
              "the board's startup code and newlib's semihosting (`--specs=rdimon.specs`): "
              "the self-test then reads the vectors and prints through the debug probe; "
              "compare its output as above.", ""]
    return lines


def readme_text(plan: ExportPlan, report: QuantizationReport, chain_path: str,
                forced: bool) -> str:
    """The text of DIR/README.md."""
    p = plan.prefix
    target = plan.target + (" --double" if plan.double else "")
    lines = [f"# {p}: exported filter chains ({target})", "",
             f"Generated by `tunetrace export` from `{chain_path}` at {plan.rate_hz:g} Hz.", "",
             CAUTION, ""]
    if forced and not report.ok:
        lines += ["**WARNING: exported although the target cannot hold this chain "
                  "(--accept-quantization).** " + " ".join(report.problems)
                  + f" Suggested fix: {report.suggestion}.", ""]
    lines += ["## Files", "",
              f"- `{p}.h`, `{p}.c`: the chains (C99).",
              f"- `{p}_selftest.c`: a main that filters CSV rows from stdin.",
              f"- `{p}_vectors.csv`: test input and the expected output.",
              "- `README.md`: this file.", "",
              "## Channels", ""]
    for ch in plan.channels:
        stages = "; ".join(f"{s.label} ({s.form}, start {s.start})" for s in ch.plans)
        lines.append(f"- `{ch.name}` -> `{p}_{ch.ident}_step`: {stages or 'no stages'}"
                     + (f"; bypassed, not exported: {', '.join(ch.bypassed)}"
                        if ch.bypassed else "") + _lag(ch.designs, plan.rate_hz))
    if any(ch.name == GENERIC_CHANNEL for ch in plan.channels):
        lines += ["", f"`{GENERIC_CHANNEL}` is the chain of every channel the chain file does "
                  "not name (the stages that select every channel): keep one "
                  f"`{p}_{GENERIC_CHANNEL}_chain` per such channel on the board, or export "
                  "with --channels to name them."]
    lines.append("")
    lines += _api(plan) + _scaling(plan, report) + _build(plan, report)
    lines += ["## Quantization report", "", "```", report.format_text(), "```", ""]
    return "\n".join(lines)
