"""Fixtures for the export tests: export a chain into a temporary directory and build it
with the real gcc (skipped only outside CI when gcc is absent)."""

from __future__ import annotations

import os
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

CFLAGS = ["-std=c99", "-O2", "-Wall", "-Wextra", "-Werror", "-pedantic"]


def need(program: str) -> str:
    """Path of `program`; skip when absent, unless CI is set (then fail)."""
    path = shutil.which(program)
    if path is None:
        if os.environ.get("CI"):
            pytest.fail(f"{program} is required under CI")
        pytest.skip(f"{program} is not installed")
    return path


@dataclass
class Built:
    """An exported and compiled chain: `run(rows)` feeds the self-test."""

    directory: Path
    spec: object
    plan: object
    report: object
    texts: dict[str, str]
    selftest: Path

    def run(self, rows: np.ndarray) -> np.ndarray:
        """rows: (n, channels) floats or ints -> the self-test's (n, channels) output."""
        return self.run_command([str(self.selftest)], rows)

    def run_command(self, command: list[str], rows: np.ndarray) -> np.ndarray:
        """Like run, with the self-test started by `command` (another build of it, or an
        emulator running one)."""
        rows = np.asarray(rows)
        fmt = "%d" if self.plan.fixed else "%.17g"
        text = "\n".join(",".join(fmt % v for v in row) for row in rows) + "\n"
        done = subprocess.run(command, input=text, capture_output=True, text=True,
                              check=True, timeout=60)
        dtype = np.int64 if self.plan.fixed else np.float64
        return np.loadtxt(done.stdout.splitlines(), delimiter=",", dtype=dtype, ndmin=2)

    def compile_main(self, main_c: str, name: str = "harness") -> Path:
        """Compile an extra main against NAME.c; returns the executable."""
        src = self.directory / f"{name}.c"
        src.write_text(main_c)
        exe = self.directory / name
        subprocess.run(["gcc", *CFLAGS, "-o", str(exe), str(src),
                        str(self.directory / f"{self.plan.prefix}.c")], check=True,
                       capture_output=True, timeout=120)
        return exe


@pytest.fixture(scope="module")
def export_build(tmp_path_factory):
    """export_build(chain_text, target, channels=None, full_scale=1.0, double=False,
    rate=250.0, seconds=2.0, structure="auto") -> Built (files written and the self-test
    compiled; `structure` forces the float biquad structure as the report allows).
    Identical requests within a test module share one build (each takes a gcc run)."""
    gcc = need("gcc")
    cache: dict[tuple, Built] = {}

    def make(chain_text: str, target: str, channels=None, full_scale=1.0, double=False,
             rate: float = 250.0, seconds: float = 2.0, name: str = "weigh",
             structure: str = "auto") -> Built:
        key = (chain_text, target, tuple(channels or ()), full_scale, double, rate, seconds,
               name, structure)
        if key not in cache:
            cache[key] = build(chain_text, target, channels, full_scale, double, rate,
                               seconds, name, structure)
        return cache[key]

    def build(chain_text, target, channels, full_scale, double, rate, seconds, name,
              structure) -> Built:
        from filters.chainfile import parse_chain
        from filters.fixedreport import report_for_plans
        from monitor.export import export_texts, write_files
        from monitor.export.plan import build_plan, default_channels

        spec = parse_chain(chain_text)
        channels = channels or default_channels(spec)
        scales = {c: full_scale for c in channels}
        plan = build_plan(spec, channels, rate, target, name, scales, double)
        report = report_for_plans({c.name: c.plans for c in plan.channels}, rate,
                                  plan.report_target, scales, seconds, structure)
        texts = export_texts(spec, plan, report, "test.toml", seconds)
        plan = plan.with_structures({c.channel: c.structure for c in report.channels})
        directory = tmp_path_factory.mktemp(f"{target}{'-double' if double else ''}-{structure}")
        write_files(directory, texts)
        exe = directory / f"{name}_selftest"
        done = subprocess.run([gcc, *CFLAGS, "-o", str(exe), str(directory / f"{name}_selftest.c"),
                               str(directory / f"{name}.c")], capture_output=True, text=True,
                              timeout=120)
        assert done.returncode == 0, done.stderr
        return Built(directory, spec, plan, report, texts, exe)

    return make


@pytest.fixture
def gcc() -> str:
    """Path of gcc (skipped outside CI when absent)."""
    return need("gcc")


@pytest.fixture
def valgrind() -> str:
    """Path of valgrind (skipped outside CI when absent)."""
    return need("valgrind")


@pytest.fixture(scope="module")
def arm_tools() -> dict[str, str]:
    """Paths of arm-none-eabi-gcc (with newlib's semihosting specs), arm-none-eabi-objdump
    and qemu-system-arm, by name (skipped outside CI when absent)."""
    tools = {name: need(name) for name in ("arm-none-eabi-gcc", "arm-none-eabi-objdump",
                                           "qemu-system-arm")}
    # gcc prints the bare name back when no multilib has the file: newlib is missing
    specs = subprocess.run([tools["arm-none-eabi-gcc"], "-print-file-name=rdimon.specs"],
                           capture_output=True, text=True, timeout=30).stdout.strip()
    if not os.path.isabs(specs):
        if os.environ.get("CI"):
            pytest.fail("libnewlib-arm-none-eabi (rdimon.specs) is required under CI")
        pytest.skip("libnewlib-arm-none-eabi is not installed")
    return tools
