"""Firmware export: a chain as C99 (float, Q15, Q31) with a self-test main and test vectors.

`export_texts(spec, plan, report, chain_path, vectors_seconds, forced)` returns the file
texts; `write_files(directory, texts, force)` writes them. The command-line side (options,
refusals) is monitor.commands.export.
"""

from __future__ import annotations

from pathlib import Path

from filters.fixedreport import QuantizationReport
from filters.spec import ChainSpec
from monitor.export.plan import ExportPlan


def export_texts(spec: ChainSpec, plan: ExportPlan, report: QuantizationReport,
                 chain_path: str, vectors_seconds: float = 4.0, forced: bool = False
                 ) -> dict[str, str]:
    """File name -> text of NAME.h, NAME.c, NAME_selftest.c, NAME_vectors.csv, README.md.

    Float channels get the biquad structure the report chose; the report must have judged
    the same vectors_seconds (ValueError otherwise)."""
    from monitor.export.ccode import header, source
    from monitor.export.readme import readme_text
    from monitor.export.selftest import selftest_source
    from monitor.export.vectors import vectors_csv

    if not plan.fixed and abs(report.vectors_seconds - vectors_seconds) > 1e-12:
        raise ValueError(f"the report judged {report.vectors_seconds:g} s of test vectors, "
                         f"the export writes {vectors_seconds:g} s; give both the same")
    plan = plan.with_structures({c.channel: c.structure for c in report.channels})
    p = plan.prefix
    return {
        f"{p}.h": header(plan),
        f"{p}.c": source(plan),
        f"{p}_selftest.c": selftest_source(plan),
        f"{p}_vectors.csv": vectors_csv(plan, spec, vectors_seconds),
        "README.md": readme_text(plan, report, chain_path, forced),
    }


def existing_files(directory: Path, names: list[str]) -> list[Path]:
    """The files among `names` that already exist in `directory`."""
    return [directory / n for n in names if (directory / n).exists()]


def write_files(directory: Path, texts: dict[str, str]) -> list[Path]:
    """Write every text into `directory` (created if missing); each file is replaced whole
    (written beside it, then renamed) so a failed export never leaves half a file."""
    directory.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in texts.items():
        path = directory / name
        tmp = path.with_name(path.name + ".part")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(path)
        written.append(path)
    return written
