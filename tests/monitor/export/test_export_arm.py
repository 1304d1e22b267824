"""The exported C built by the ARM toolchain for Cortex-M cores and run on qemu's models of them.

How the self-test runs: arm-none-eabi-gcc builds NAME_selftest.c and NAME.c for the core
with newlib's semihosting library (--specs=rdimon.specs), and qemu-system-arm runs the ELF
on a board with that core (-semihosting-config enable=on,target=native): stdin, stdout,
stderr and the exit status go through semihosting calls, the way the same binary talks to
a host over a debug probe. The vectors go in on stdin, exactly as for the host build (see
Built.run_command), and the README's own check judges the output.

Why the system emulator and not qemu-arm (user mode): Debian's qemu-arm 7.2 aborts on an
assertion before the first instruction of any Cortex-M ELF (-cpu cortex-m0/m4/m7: its
guest address setup places the Linux commpage at 0xffff0000, beyond the 2 GiB it reserves
for an M-profile guest), and its A-profile CPUs would run M-profile code but also accept
instructions a Cortex-M lacks (double-precision VFP on an M4F, Thumb-2 on an M0), and
they know the semihosting call as SVC, not as the BKPT 0xAB that newlib's M-profile
library issues. qemu-system-arm's mps2-an386 (Cortex-M4 with FPv4-SP),
mps2-an500 (Cortex-M7 with FPv5-D16) and microbit (nRF51, Cortex-M0) model the cores
themselves: an instruction the core lacks faults, the FPU is off until the startup code
enables it, code sits in flash and data in RAM on the M0 board, as on a part.
"""

from __future__ import annotations

import re
import shlex
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from monitor.bench import BENCH_CHAIN_TEXT
from monitor.export.readme import CORTEX_M, CORTEX_M_COMMON

# Hand-written because a bare-metal image needs a vector table and reset code, which come
# from each vendor's startup file, not from gcc or newlib: these are the few lines of one
# that the self-test needs on qemu's boards.
BOOT_C = r"""
/* Vector table and reset for the self-test on a Cortex-M board, then newlib's crt0. */
#include <stdint.h>

extern void _start(void);  /* newlib crt0 (rdimon): stack and heap, .bss, stdio, main, exit */

static void boot_reset(void)
{
#if defined(__ARM_FP)
    /* every Cortex-M FPU is off out of reset: CPACR full access for CP10 and CP11 */
    *(volatile uint32_t *)0xE000ED88u |= 0xFu << 20;
    __asm volatile ("dsb\n\tisb" ::: "memory");
#endif
    _start();
}

__attribute__((used)) const char boot_fault_text[] = "boot: fault (an instruction this core "
    "lacks, the FPU off, or a bad address)\n";

/* Any fault: print the text (semihosting SYS_WRITE0) and stop with SYS_EXIT, reason
 * ADP_Stopped_RunTimeErrorUnknown (0x20023), so the emulator exits with status 1 instead
 * of spinning. ARMv6-M encodings only, so it runs on every core. */
__attribute__((naked)) static void boot_fault(void)
{
    __asm volatile (
        "movs r0, #0x04\n\t"
        "ldr r1, 1f\n\t"
        "bkpt 0xab\n\t"
        "movs r0, #0x18\n\t"
        "ldr r1, 2f\n\t"
        "bkpt 0xab\n\t"
        "b .\n\t"
        ".align 2\n"
        "1: .word boot_fault_text\n"
        "2: .word 0x20023\n\t");
}

/* initial stack pointer, reset, NMI, HardFault, MemManage, BusFault, UsageFault */
__attribute__((section(".vectors"), used)) void (*const boot_vectors[])(void) = {
    (void (*)(void))BOOT_STACK_TOP, boot_reset, boot_fault, boot_fault, boot_fault,
    boot_fault, boot_fault,
};
"""


@dataclass(frozen=True)
class Core:
    """A Cortex-M core: gcc's flags for it (the README's) and the qemu board that has it."""

    name: str
    board: str               # qemu-system-arm -M
    stack_top: int           # initial stack pointer: the top of the board's RAM
    ram: int | None = None   # RAM for .data/.bss when code sits in flash (None: RAM at 0)

    @property
    def flags(self) -> tuple[str, ...]:
        return tuple(next(f for name, f, _ in CORTEX_M if name == self.name).split())


M4F = Core("Cortex-M4F", "mps2-an386", 0x00400000)
M7 = Core("Cortex-M7", "mps2-an500", 0x00400000)
M0 = Core("Cortex-M0", "microbit", 0x20004000, ram=0x20000000)  # nRF51: 16 KiB RAM
WARNINGS = ("-Wall", "-Wextra", "-Werror", "-pedantic")
DIALECTS = {
    "readme": tuple(CORTEX_M_COMMON.split()),                 # -std=c99 -O2 -ffp-contract=off
    "gnu-off": ("-std=gnu99", "-O2", "-ffp-contract=off"),    # the flag alone is enough
    "fused": ("-std=gnu99", "-O2", "-ffp-contract=fast"),     # gcc's default: a*b + c fused
}
BUILDS = [(M4F, "readme"), (M4F, "fused"), (M7, "readme"), (M7, "fused"), (M0, "readme")]
BUILD_IDS = [f"{core.name}-{dialect}" for core, dialect in BUILDS]
VECTORS_SECONDS = 4.0    # tunetrace export's default


def butterworth(order: int, cutoff: float) -> str:
    return f'[[stage]]\nkind = "butterworth"\norder = {order}\ncutoff_hz = {cutoff}\n'


@pytest.fixture(scope="module")
def arm_build(arm_tools, tmp_path_factory):
    """arm_build(built, core, dialect="readme") -> the ELF of built's self-test for core.
    Each (export, core, dialect) is built once per module."""
    boot = tmp_path_factory.mktemp("arm-boot") / "boot.c"
    boot.write_text(BOOT_C)
    cache: dict[tuple, Path] = {}

    def make(built, core: Core, dialect: str = "readme") -> Path:
        key = (built.directory, core, dialect)
        if key not in cache:
            p = built.plan.prefix
            elf = built.directory / f"{p}_selftest-{core.name.lower()}-{dialect}.elf"
            ram = [f"-Wl,-Tdata={core.ram:#x}"] if core.ram is not None else []
            done = subprocess.run(
                [arm_tools["arm-none-eabi-gcc"], *DIALECTS[dialect], *WARNINGS, *core.flags,
                 "--specs=rdimon.specs", f"-DBOOT_STACK_TOP={core.stack_top:#x}u",
                 "-Wl,--section-start=.vectors=0", *ram, "-o", str(elf),
                 str(built.directory / f"{p}_selftest.c"), str(built.directory / f"{p}.c"),
                 str(boot)], capture_output=True, text=True, timeout=120)
            assert done.returncode == 0, done.stderr
            cache[key] = elf
        return cache[key]

    return make


@pytest.fixture(scope="module")
def on_board(arm_tools):
    """on_board(core, elf) -> the command that runs elf on qemu's board with that core."""

    def command(core: Core, elf: Path) -> list[str]:
        return [arm_tools["qemu-system-arm"], "-M", core.board, "-nographic", "-monitor",
                "none", "-serial", "none", "-semihosting-config", "enable=on,target=native",
                "-kernel", str(elf)]

    return command


def vectors(built) -> tuple[np.ndarray, np.ndarray]:
    """The export's vectors file: (input, expected), each (n, channels)."""
    dtype = np.int64 if built.plan.fixed else np.float64
    table = np.loadtxt(built.directory / f"{built.plan.prefix}_vectors.csv", delimiter=",",
                       skiprows=1, dtype=dtype, ndmin=2)
    k = len(built.plan.channels)
    return table[:, :k], table[:, k:]


def readme_check(built, command: list[str]) -> tuple[subprocess.CompletedProcess, list[float]]:
    """The README's check with its host build line dropped and the self-test started by
    `command`: the process and each column's max error as a fraction of its peak."""
    recipe = re.search(r"```sh\n(.*?)```", built.texts["README.md"], re.S).group(1)
    lines = recipe.splitlines()
    run = f"./{built.plan.prefix}_selftest"
    assert lines[0].startswith("gcc ") and run in lines[1], recipe   # the recipe's shape
    script = "\n".join([lines[1].replace(run, shlex.join(command)), *lines[2:]])
    done = subprocess.run(["bash", "-e", "-o", "pipefail", "-c", script],
                          cwd=built.directory, capture_output=True, text=True, timeout=120)
    return done, [float(v) for v in re.findall(r"max error (\S+) of peak", done.stdout)]


def readme_build_line(core: Core, prefix: str) -> str:
    """The line of the README's Cortex-M block that builds NAME.c for core."""
    return f"arm-none-eabi-gcc {CORTEX_M_COMMON} {' '.join(core.flags)} -c {prefix}.c"


def fused_ops(arm_tools, elf: Path, prefix: str) -> int:
    """Fused multiply-add instructions (vfma/vfms/vfnma/vfnms) in the chain's functions."""
    text = subprocess.run([arm_tools["arm-none-eabi-objdump"], "-d", str(elf)],
                          capture_output=True, text=True, check=True, timeout=60).stdout
    ours = re.findall(rf"^[0-9a-f]+ <{prefix}_(?!selftest)\w*>:\n(.*?)(?:\n\n|\Z)", text,
                      re.S | re.M)
    return sum(len(re.findall(r"\tvfn?m[as]\.f(?:32|64)\s", body)) for body in ours)


FLOAT_CHAINS = {
    # the weigh station's bench chain: median, 50 Hz notch, Butterworth-4 10 Hz (tdf2)
    "bench-250Hz": ("rate_hz = 250.0\n" + BENCH_CHAIN_TEXT, 250.0),
    # poles crowd z = 1: the delta form with its compensated states
    "butter4-1Hz-1000Hz": (butterworth(4, 1.0), 1000.0),
}


@pytest.mark.parametrize("core,dialect", BUILDS, ids=BUILD_IDS)
@pytest.mark.parametrize("name", list(FLOAT_CHAINS))
def test_float_export_passes_its_readme_check_on_cortex_m(export_build, arm_build, on_board,
                                                           arm_tools, name, core, dialect):
    chain, rate = FLOAT_CHAINS[name]
    built = export_build(chain, "c-float", rate=rate, seconds=VECTORS_SECONDS)
    assert built.report.ok, built.report.format_text()
    structure = "delta" if name.startswith("butter4-1Hz") else "tdf2"
    assert built.plan.channels[0].structure == structure
    # the README gives this very build line for the core
    assert readme_build_line(core, built.plan.prefix) in built.texts["README.md"].splitlines()
    elf = arm_build(built, core, dialect)
    done, errors = readme_check(built, on_board(core, elf))
    assert done.returncode == 0 and errors, done.stdout + done.stderr
    assert max(errors) <= built.report.tolerance == 1e-5       # FLOAT_TOLERANCE["c-float"]
    x, want = vectors(built)
    got = built.run_command(on_board(core, elf), x)
    assert np.max(np.abs(got - want)) / np.max(np.abs(want)) == pytest.approx(max(errors),
                                                                                rel=1e-3)
    if dialect == "readme":
        # IEEE single precision, no contraction: every core computes what the host does
        assert np.array_equal(got, built.run(x))
        assert fused_ops(arm_tools, elf, built.plan.prefix) == 0
    else:
        # the fused build really fused (otherwise this would repeat the README build); far
        # from the limit it still passes
        assert fused_ops(arm_tools, elf, built.plan.prefix) > 0


@pytest.mark.parametrize("core,dialect", [(M4F, "readme"), (M7, "readme"), (M7, "fused"),
                                          (M0, "readme")],
                         ids=["Cortex-M4F-soft-double", "Cortex-M7-readme", "Cortex-M7-fused",
                              "Cortex-M0-readme"])
def test_double_export_passes_its_readme_check_on_cortex_m(export_build, arm_build, on_board,
                                                            arm_tools, core, dialect):
    # double is 64-bit everywhere: in software on the M4F and M0 (libgcc's __aeabi_d*), on
    # the M7's FPv5-D16 in hardware, fused there in the gnu dialect
    built = export_build(butterworth(4, 1.0), "c-float", rate=1000.0, double=True,
                         seconds=VECTORS_SECONDS)
    assert built.report.ok, built.report.format_text()
    elf = arm_build(built, core, dialect)
    done, errors = readme_check(built, on_board(core, elf))
    assert done.returncode == 0 and errors, done.stdout + done.stderr
    assert max(errors) <= built.report.tolerance == 1e-12     # FLOAT_TOLERANCE["c-double"]
    x, _ = vectors(built)
    got = built.run_command(on_board(core, elf), x)
    fused = fused_ops(arm_tools, elf, built.plan.prefix)
    if dialect == "readme":
        assert np.array_equal(got, built.run(x)) and fused == 0
    else:
        assert fused > 0


# Plain transposed direct form II chains near what float32 holds: the report's figure is
# within 1.3e-6 of the 1e-5 tolerance. gcc's fused multiply-adds move it by about 20
# float32 steps of the peak and the check fails, so the report keeps a margin of
# FLOAT_MARGIN_EPS = 32 steps and does not call these held (once it kept 8 and did).
NEAR_LIMIT = {
    "butter5-10.4Hz-1000Hz": (butterworth(5, 10.4), 1000.0),
    "butter6-23.2Hz-1000Hz": (butterworth(6, 23.2), 1000.0),
}


@pytest.mark.parametrize("name", list(NEAR_LIMIT))
def test_fused_multiply_add_fails_near_the_limit_and_the_readme_flag_prevents_it(
        export_build, arm_build, on_board, name):
    chain, rate = NEAR_LIMIT[name]
    # left to itself the export takes the delta form for these (tested in the sweep below)
    auto = export_build(chain, "c-float", rate=rate, seconds=VECTORS_SECONDS)
    assert auto.report.ok and auto.plan.channels[0].structure == "delta"
    built = export_build(chain, "c-float", rate=rate, seconds=VECTORS_SECONDS,
                         structure="tdf2")
    assert built.plan.channels[0].structure == "tdf2"
    assert 8.5e-6 < max(c.figures.vector_error for c in built.report.channels) < 1e-5
    assert not built.report.ok, built.report.format_text()      # a fused build would fail
    x, _ = vectors(built)
    host = built.run(x)
    for core in (M4F, M7):
        # -ffp-contract=off, in ISO C or a GNU dialect: the host's output, the check passes
        for dialect in ("readme", "gnu-off"):
            elf = arm_build(built, core, dialect)
            done, errors = readme_check(built, on_board(core, elf))
            assert done.returncode == 0 and max(errors) <= built.report.tolerance
            assert np.array_equal(built.run_command(on_board(core, elf), x), host)
        # gcc's default dialect fuses the biquads' multiply-adds and the check fails: this
        # is why the README (and NAME.c's first comment) ask for -ffp-contract=off
        done, errors = readme_check(built, on_board(core, arm_build(built, core, "fused")))
        assert done.returncode == 1 and max(errors) > built.report.tolerance, done.stdout


# Chains near what float32 holds (the report's figure within a factor of a few of the
# tolerance, or poles very near z = 1) and ordinary weigh-station chains, at the CLI's
# default 4 s of vectors: "holds" must mean the README's build passes on every core.
HOLDS_SWEEP = {
    **NEAR_LIMIT,
    "bessel6-10Hz-1000Hz": ('[[stage]]\nkind = "bessel"\norder = 6\ncutoff_hz = 10.0\n',
                            1000.0),
    "bessel6-3Hz-250Hz": ('[[stage]]\nkind = "bessel"\norder = 6\ncutoff_hz = 3.0\n', 250.0),
    "butter2-3Hz-250Hz": (butterworth(2, 3.0), 250.0),
    "butter6-0.1Hz-1000Hz": (butterworth(6, 0.1), 1000.0),
    "rc-tustin-0.5Hz-1000Hz": ('[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 0.5\n'
                               'method = "tustin"\n', 1000.0),
    "dc-block-0.05Hz-1000Hz": ('[[stage]]\nkind = "dc-block"\ncutoff_hz = 0.05\n', 1000.0),
    "notch-50Hz-q30-250Hz": ('[[stage]]\nkind = "notch"\nfreq_hz = 50.0\nq = 30.0\n', 250.0),
    "weigh-median-mavg-gain-250Hz": ('[[stage]]\nkind = "median"\nwindow = 5\n'
                                     '[[stage]]\nkind = "moving-average"\nwindow = 25\n'
                                     '[[stage]]\nkind = "gain"\nscale = 1.25\noffset = -0.5\n',
                                     250.0),
    # a 0.2 Hz wide band-pass at 100 Hz: poles hug the unit circle away from z = 1
    "narrow-bandpass-1000Hz": ('[[stage]]\nkind = "chebyshev1"\nband = "bandpass"\n'
                               'order = 4\nlow_hz = 100.0\nhigh_hz = 100.2\nripple_db = 0.5\n',
                               1000.0),
}
NOT_HELD = {"narrow-bandpass-1000Hz"}     # float32 cannot: export refuses it (use --double)


@pytest.mark.parametrize("name", list(HOLDS_SWEEP))
def test_holds_means_the_readme_build_passes_on_every_core(export_build, arm_build, on_board,
                                                            name):
    chain, rate = HOLDS_SWEEP[name]
    built = export_build(chain, "c-float", rate=rate, seconds=VECTORS_SECONDS)
    assert built.report.ok == (name not in NOT_HELD), built.report.format_text()
    if not built.report.ok:
        return
    stated = max(c.figures.vector_error for c in built.report.channels)
    for core in (M4F, M0):      # hardware and software single precision
        done, errors = readme_check(built, on_board(core, arm_build(built, core)))
        assert done.returncode == 0 and errors, (core.name, done.stdout + done.stderr)
        # the report ran the same operations: its figure is the core's
        assert max(errors) == pytest.approx(stated, rel=0.05, abs=1e-7)
        assert max(errors) <= built.report.tolerance
    # "holds" also for gcc's default dialect, which fuses multiply-adds on the M4F
    done, errors = readme_check(built, on_board(M4F, arm_build(built, M4F, "fused")))
    assert done.returncode == 0 and max(errors) <= built.report.tolerance, done.stdout


FIXED_CHAIN = """
[[stage]]
kind = "median"
window = 5
channels = ["load"]
[[stage]]
kind = "notch"
freq_hz = 50.0
q = 5.0
channels = ["load"]
[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 8.0
channels = ["load"]
[[stage]]
kind = "gain"
scale = -1.5
offset = 0.05
channels = ["load"]
[[stage]]
kind = "moving-average"
window = 10
channels = ["vib"]
[[stage]]
kind = "dc-block"
cutoff_hz = 0.5
channels = ["vib"]
[[stage]]
kind = "ema"
alpha = 0.2
start = "zero"
channels = ["vib"]
"""


@pytest.mark.parametrize("target", ["c-q15", "c-q31"])
@pytest.mark.parametrize("core", [M4F, M0], ids=["Cortex-M4F", "Cortex-M0"])
def test_fixed_point_is_bit_identical_to_the_host_and_the_vectors(export_build, arm_build,
                                                                   on_board, arm_tools,
                                                                   core, target):
    built = export_build(FIXED_CHAIN, target, ["load", "vib"], full_scale=2.0,
                         seconds=VECTORS_SECONDS)
    x, want = vectors(built)
    lo, hi = (-(1 << 15), (1 << 15) - 1) if target == "c-q15" else (-(1 << 31), (1 << 31) - 1)
    # negative samples (arithmetic right shift of negative sums) and both ends of the range
    assert (x < 0).any() and (x == lo).any() and (x == hi).any()
    assert (want == lo).any() and (want == hi).any()         # the outputs saturate too
    assert readme_build_line(core, built.plan.prefix) in built.texts["README.md"].splitlines()
    elf = arm_build(built, core)
    done, _ = readme_check(built, on_board(core, elf))
    assert done.returncode == 0 and "bit-exact" in done.stdout, done.stdout + done.stderr
    got = built.run_command(on_board(core, elf), x)
    assert np.array_equal(got, want) and np.array_equal(got, built.run(x))
    if target == "c-q31":
        # the 64-bit products: one instruction on the M4, a libgcc call on the M0
        text = subprocess.run([arm_tools["arm-none-eabi-objdump"], "-d", str(elf)],
                              capture_output=True, text=True, check=True, timeout=60).stdout
        step = re.search(r"<weigh_load_step>:\n(.*?)\n\n", text, re.S).group(1)
        assert ("__aeabi_lmul" in step) == (core is M0)
        assert bool(re.search(r"\tsmlal|\tsmull", step)) == (core is M4F)


def test_the_cortex_m0_board_faults_on_code_for_another_core(export_build, arm_build,
                                                             on_board):
    # what makes the M0 runs above worth having: qemu's M0 refuses Thumb-2 and FPU code
    chain, rate = FLOAT_CHAINS["bench-250Hz"]
    built = export_build(chain, "c-float", rate=rate, seconds=VECTORS_SECONDS)
    done = subprocess.run(on_board(M0, arm_build(built, M4F)), input="0.5\n",
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 1 and "boot: fault" in done.stdout + done.stderr
    assert not re.search(r"^[-0-9]", done.stdout, re.M)          # no output row
