"""Bench part `export`: instructions per sample of the generated C step, by callgrind.

The chain is a 4th-order Butterworth low-pass (20 Hz at 250 Hz), exported for c-float and
c-q15. Each is compiled with gcc -O2 beside a plain hand-written reference in its own
translation unit: for float a transposed direct form II loop over the sections, for Q15 a
direct form I loop with a 32-bit accumulator, rounding and saturation. Both get the same
seeded input; valgrind's callgrind counts only the instructions executed inside the step
function (--toggle-collect), which is deterministic. Target: generated <= 1.2 x reference.
The float chain is also exported in the delta form (what c-float uses when plain transposed
direct form II would not hold) and counted against the same reference: its price for
keeping low cutoffs accurate, reported without a target.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

CHAIN = 'rate_hz = 250.0\n[[stage]]\nkind = "butterworth"\norder = 4\ncutoff_hz = 20.0\n'
RATIO_TARGET = 1.2

_MAIN = """\
#include <stdio.h>
#include <string.h>
#include "bench.h"
#include "ref.h"
#define N {n}
static bench_sample input[N];
int main(int argc, char **argv)
{{
    static bench_signal_chain chain;
    static ref_state ref;
    volatile double sink = 0;
    unsigned long lcg = 12345u;
    long i;
    for (i = 0; i < N; i++) {{
        lcg = (lcg * 1103515245ul + 12345ul) & 0x7ffffffful;
        input[i] = (bench_sample)({scale} * ((double)(lcg >> 8) / 8388608.0 - 0.5));
    }}
    if (argc > 1 && strcmp(argv[1], "ref") == 0) {{
        ref_start(&ref, input[0]);
        for (i = 0; i < N; i++) sink += ref_step(&ref, input[i]);
    }} else {{
        for (i = 0; i < N; i++) sink += bench_signal_step(&chain, input[i]);
    }}
    printf("%g\\n", (double)sink);
    return 0;
}}
"""

_REF_FLOAT = """\
#include "ref.h"
/* A plain transposed direct form II cascade: the textbook loop. */
static const float coef[SECTIONS][5] = {{ {rows} }};
void ref_start(ref_state *r, float x0) {{ int i; (void)x0;
    for (i = 0; i < SECTIONS; i++) r->s1[i] = r->s2[i] = 0.0f; }}
float ref_step(ref_state *r, float x)
{{
    int i;
    for (i = 0; i < SECTIONS; i++) {{
        const float *c = coef[i];
        float y = c[0] * x + r->s1[i];
        r->s1[i] = c[1] * x - c[3] * y + r->s2[i];
        r->s2[i] = c[2] * x - c[4] * y;
        x = y;
    }}
    return x;
}}
"""

_REF_Q15 = """\
#include "ref.h"
/* A plain Q15 direct form I cascade: 32-bit accumulator, round, saturate. */
static const int16_t coef[SECTIONS][5] = {{ {rows} }};
static const int shift[SECTIONS] = {{ {shifts} }};
void ref_start(ref_state *r, int16_t x0) {{ int i; (void)x0;
    for (i = 0; i < SECTIONS; i++) r->x1[i] = r->x2[i] = r->y1[i] = r->y2[i] = 0; }}
int16_t ref_step(ref_state *r, int16_t x)
{{
    int i;
    for (i = 0; i < SECTIONS; i++) {{
        const int16_t *c = coef[i];
        int32_t acc = 1 << (shift[i] - 1);
        int16_t y;
        acc += c[0] * x + c[1] * r->x1[i] + c[2] * r->x2[i] - c[3] * r->y1[i] - c[4] * r->y2[i];
        acc >>= shift[i];
        y = (int16_t)(acc > 32767 ? 32767 : acc < -32768 ? -32768 : acc);
        r->x2[i] = r->x1[i]; r->x1[i] = x; r->y2[i] = r->y1[i]; r->y1[i] = y;
        x = y;
    }}
    return x;
}}
"""

_REF_H = """\
#include <stdint.h>
#define SECTIONS {m}
typedef struct {{ {fields} }} ref_state;
void ref_start(ref_state *r, {t} x0);
{t} ref_step(ref_state *r, {t} x);
"""


def _tool(name: str) -> str:
    path = shutil.which(name)
    if path is None:
        raise OSError(f"{name} is not installed (the export bench compiles and counts with it)")
    return path


def _sources(target: str, directory: Path, n: int, structure: str = "auto") -> None:
    from filters.chainfile import parse_chain
    from filters.fixedreport import report_for_plans
    from monitor.export import export_texts, write_files
    from monitor.export.ccode import CTypes, fixed_stages
    from monitor.export.plan import build_plan

    spec = parse_chain(CHAIN)
    plan = build_plan(spec, ["signal"], 250.0, target, "bench", {"signal": 1.0})
    report = report_for_plans({"signal": plan.channels[0].plans}, 250.0, target,
                              vectors_seconds=0.1, structure=structure)
    texts = export_texts(spec, plan, report, "bench.toml", 0.1)
    write_files(directory, {k: v for k, v in texts.items() if k in ("bench.h", "bench.c")})
    if target == "c-float":
        sos = plan.channels[0].plans[0].sos
        literal = CTypes("float").literal
        rows = ", ".join("{" + ", ".join(literal(v) for v in r[[0, 1, 2, 4, 5]]) + "}"
                         for r in sos)
        ref = _REF_FLOAT.format(rows=rows)
        head = _REF_H.format(m=len(sos), fields="float s1[SECTIONS], s2[SECTIONS];", t="float")
        scale = "1.0"
    else:
        secs = fixed_stages(plan.channels[0], target)[0].sections
        rows = ", ".join("{" + ", ".join(str(v) for v in (*s.b, *s.a)) + "}" for s in secs)
        ref = _REF_Q15.format(rows=rows, shifts=", ".join(str(15 - s.shift) for s in secs))
        head = _REF_H.format(m=len(secs), t="int16_t", fields="int16_t x1[SECTIONS], "
                             "x2[SECTIONS], y1[SECTIONS], y2[SECTIONS];")
        scale = "32000.0"
    (directory / "ref.c").write_text(ref)
    (directory / "ref.h").write_text(head)
    (directory / "main.c").write_text(_MAIN.format(n=n, scale=scale))


def _count(exe: Path, function: str, mode: str, directory: Path) -> int:
    out = directory / f"callgrind.{function}.out"
    subprocess.run([_tool("valgrind"), "--tool=callgrind", f"--callgrind-out-file={out}",
                    f"--toggle-collect={function}", str(exe), mode],
                   check=True, capture_output=True, timeout=600)
    text = out.read_text()
    match = re.search(r"^(?:summary|totals):\s+(\d+)", text, re.MULTILINE)
    if match is None:
        raise OSError(f"callgrind wrote no instruction total for {function}")
    return int(match.group(1))


def measure(target: str, n: int, structure: str = "auto") -> tuple[float, float]:
    """(generated, reference) instructions per sample for one target (and float structure)."""
    gcc = _tool("gcc")
    _tool("valgrind")
    with tempfile.TemporaryDirectory(prefix="tunetrace-bench-") as tmp:
        d = Path(tmp)
        _sources(target, d, n, structure)
        exe = d / "bench"
        try:
            subprocess.run([gcc, "-std=c99", "-O2", "-o", str(exe), str(d / "main.c"),
                            str(d / "bench.c"), str(d / "ref.c")], check=True,
                           capture_output=True, timeout=120)
            generated = _count(exe, "bench_signal_step", "gen", d)
            reference = _count(exe, "ref_step", "ref", d)
        except subprocess.CalledProcessError as exc:
            detail = (exc.stderr or b"").decode(errors="replace").strip().splitlines()[:1]
            raise OSError(f"{Path(exc.cmd[0]).name} failed: {' '.join(detail)}") from None
    return generated / n, reference / n


def run(quick: bool) -> dict[str, float | int | str | bool]:
    """Metrics: export_<float|q15>_step_instr_per_sample, _reference_instr_per_sample,
    _instr_ratio, _instr_ok (ratio <= 1.2), export_instr_ok for both, and
    export_float_delta_step_instr_per_sample / _instr_ratio (the delta form against the
    same float reference; no target)."""
    n = 2000 if quick else 50000
    metrics: dict[str, float | int | str | bool] = {}
    for key, target in (("float", "c-float"), ("q15", "c-q15")):
        generated, reference = measure(target, n)
        ratio = generated / reference
        metrics[f"export_{key}_step_instr_per_sample"] = generated
        metrics[f"export_{key}_reference_instr_per_sample"] = reference
        metrics[f"export_{key}_instr_ratio"] = ratio
        metrics[f"export_{key}_instr_ok"] = ratio <= RATIO_TARGET
    metrics["export_instr_ok"] = bool(metrics["export_float_instr_ok"]
                                      and metrics["export_q15_instr_ok"])
    generated, reference = measure("c-float", n, "delta")
    metrics["export_float_delta_step_instr_per_sample"] = generated
    metrics["export_float_delta_instr_ratio"] = generated / reference
    return metrics
