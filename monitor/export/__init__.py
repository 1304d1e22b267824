"""Firmware export: a chain as C99 (float, Q15, Q31) with a self-test main and test vectors.

`export_texts(spec, plan, report, chain_path, vectors_seconds, forced)` returns the file
texts; `write_files(directory, texts, replace)` writes them, only inside `directory` and
never through a link (replay.outputfile). The command-line side (options, refusals) is
monitor.commands.export.
"""

from __future__ import annotations

import os
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
    """The names among `names` already taken in `directory`: files, folders and symbolic
    links (a dangling link included)."""
    return [directory / n for n in names if os.path.lexists(directory / n)]


def write_files(directory: Path, texts: dict[str, str], replace: bool = True) -> list[Path]:
    """Write every text (UTF-8) into `directory`, created if missing; returns the paths.

    Each file is first written whole to a temporary file created exclusively beside it
    (a link planted at that name is never followed), then renamed over its name, so a
    failed export leaves no half file and the previous files as they were. A symbolic
    link at a file's name is replaced itself; its target is never written.
    replace=False: a name already taken raises FileExistsError before anything is written.
    """
    from replay.outputfile import OutputFolder

    with OutputFolder(directory, create=True) as folder:
        if not replace:
            for name in texts:
                folder.reserve(name)
        temps: dict[str, str] = {}
        try:
            for name, text in texts.items():
                temp, handle = folder.open_temp(name)
                temps[name] = temp
                with handle:
                    handle.write(text.encode("utf-8"))
            for name, temp in temps.items():
                folder.commit(temp, name, replace)
        except BaseException:
            for temp in temps.values():
                folder.discard(temp)
            raise
    return [directory / name for name in texts]
