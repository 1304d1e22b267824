"""Bench part `replay`: offline apply against numpy + scipy, and replay at max speed.

apply: `tunetrace apply` runs in a child process on a recording of N lines and
8 channels with the median(5) + notch + 4th-order Butterworth chain. The
reference, in a child process too, is the offline upper bound of DESIGN.md:
numpy.loadtxt of the whole file, one scipy.signal.sosfilt over the whole
array (the chain's linear stages; a median has no one-call equivalent) and
numpy.savetxt of the same output table ('%.17g', round-trip exact like ours).
Peak memory is each child's own high-water mark (VmHWM of /proc/self/status,
printed by the child as it ends). ru_maxrss from wait4 would not do: Linux
carries the parent's high-water mark across fork and exec into the child's
figure, so a large bench process made every child look as large as itself.

replay: a ReplaySource at speed max feeding a Pipeline (no chain); lines per
second counted as samples reaching the ring, best of REPLAY_REPEATS runs.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

from monitor.bench import BENCH_CHAIN_TEXT, BENCH_LOWPASS_HZ

CHANNELS = 8
RATE_HZ = 1000.0
FULL_LINES = 1_000_000
QUICK_LINES = 20_000
APPLY_RATIO_TARGET = 0.5
APPLY_MEMORY_TARGET_MB = 200.0
REPLAY_TARGET_LINES_PER_S = 200_000.0
REPLAY_REPEATS = 3


REFERENCE = """\
import sys
import numpy as np
import scipy.signal as signal
src, out, skip, rate = sys.argv[1], sys.argv[2], int(sys.argv[3]), float(sys.argv[4])
data = np.loadtxt(src, delimiter=",", skiprows=skip, comments="#")
b, a = signal.iirnotch(50.0, 30.0, fs=rate)
sos = np.vstack([signal.tf2sos(b, a), signal.butter(4, float(sys.argv[5]), fs=rate, output="sos")])
filtered = signal.sosfilt(sos, data[:, 1:], axis=0)
np.savetxt(out, np.hstack([data, filtered]), delimiter=",", fmt="%.17g")
"""

# Appended to each child's code: report this process's own peak resident memory.
PEAK_REPORT = """
for _line in open("/proc/self/status"):
    if _line.startswith("VmHWM:"):
        sys.stderr.write("peak_kb %s\\n" % _line.split()[1])
"""

APPLY_CHILD = """\
import sys
from monitor.cli import main
code = main(sys.argv[1:])
""" + PEAK_REPORT + "sys.exit(code)\n"


def write_bench_recording(path: str, lines: int, channels: int = CHANNELS) -> int:
    """A weigh-station-like recording (our format) of `lines` rows; returns its header lines."""
    import numpy as np

    from monitor.block import Schema
    from replay.writer import header_text

    names = tuple(f"ch{k}" for k in range(channels))
    header = header_text(Schema(names), "bench", RATE_HZ, "declared", BENCH_CHAIN_TEXT, False)
    rng = np.random.default_rng(7)
    with open(path, "w", encoding="utf-8") as f:
        f.write(header)
        for start in range(0, lines, 100_000):
            n = min(100_000, lines - start)
            t = (start + np.arange(n)) / RATE_HZ
            values = (10.0 + 5.0 * ((t % 2.0) > 1.0)[:, None]
                      + 0.3 * np.sin(2 * np.pi * 50.0 * t)[:, None]
                      + 0.05 * rng.normal(size=(n, channels)))
            table = np.column_stack([t, np.round(values, 4)])
            row = "%.6f" + ",%.4f" * channels + "\n"
            f.write((row * n) % tuple(table.ravel().tolist()))
    return header.count("\n")


def run_child(argv: list[str]) -> tuple[float, float]:
    """(wall seconds, peak RSS in MB) of a child process; raises OSError if it fails."""
    began = time.perf_counter()
    proc = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - began
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise OSError(f"{' '.join(argv[:4])} failed: {err.strip()[-300:]}")
    reported = [line.split()[1] for line in err.splitlines() if line.startswith("peak_kb ")]
    peak_kb = float(reported[-1]) if reported else float(usage.ru_maxrss)  # both kilobytes
    return seconds, peak_kb / 1024.0


def measure_replay(path: str, lines: int) -> float:
    """Lines per second from a ReplaySource at max speed into the ring of a Pipeline."""
    from monitor.pipeline import Pipeline
    from replay.player import ReplaySource

    pipeline = Pipeline(ReplaySource(path, speed=None), ring_capacity=min(lines, 1 << 20))
    began = time.perf_counter()
    pipeline.start()
    try:
        while pipeline.status().running and pipeline.status().samples_total < lines:
            time.sleep(0.005)
        seconds = time.perf_counter() - began
        total = pipeline.status().samples_total
    finally:
        pipeline.stop()
    if total < lines:
        raise OSError(f"replay delivered {total} of {lines} lines")
    return total / seconds


def run(quick: bool) -> dict[str, float | int | bool]:
    lines = QUICK_LINES if quick else FULL_LINES
    with tempfile.TemporaryDirectory(prefix="tunetrace-bench-") as tmp:
        src = os.path.join(tmp, "weigh.csv")
        chain = os.path.join(tmp, "chain.toml")
        with open(chain, "w", encoding="utf-8") as f:
            f.write(BENCH_CHAIN_TEXT)
        skip = write_bench_recording(src, lines)
        apply_s, apply_rss = run_child([sys.executable, "-c", APPLY_CHILD, "apply", src,
                                        "--chain", chain, "-o", os.path.join(tmp, "out.csv")])
        ref_s, ref_rss = run_child([sys.executable, "-c", REFERENCE + PEAK_REPORT, src,
                                    os.path.join(tmp, "ref.csv"), str(skip), str(RATE_HZ),
                                    str(BENCH_LOWPASS_HZ)])
        # the least disturbed of a few runs: other processes share this machine
        replay_rate = max(measure_replay(src, lines) for _ in range(REPLAY_REPEATS))
    ratio = ref_s / apply_s
    return {
        "replay_file_lines": lines,
        "apply_lines_per_s": lines / apply_s,
        "apply_reference_lines_per_s": lines / ref_s,
        "apply_ratio": ratio,
        "apply_ratio_ok": ratio >= APPLY_RATIO_TARGET,
        "apply_peak_rss_mb": apply_rss,
        "apply_reference_peak_rss_mb": ref_rss,
        "apply_memory_ok": apply_rss < APPLY_MEMORY_TARGET_MB,
        "replay_max_lines_per_s": replay_rate,
        "replay_ok": replay_rate >= REPLAY_TARGET_LINES_PER_S,
    }
