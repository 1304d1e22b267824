"""`tunetrace bench`: each part measures itself against a reference in the same run.

A part is a module `monitor.bench.<name>` with
    def run(quick: bool) -> dict[str, float | int | str | bool]
returning flat metrics (names with units, e.g. `pipeline_lines_per_s`, and the
target checks as booleans, e.g. `ratio_ok`). `quick=True` shrinks the data so
the test suite can smoke-test the bench; targets are judged on full runs only.
"""

import time
from collections.abc import Callable

PARTS: tuple[str, ...] = ("core", "filters", "replay", "binary", "export", "ui", "render")
DEFAULT_PARTS: tuple[str, ...] = ("core", "filters", "replay", "binary", "export", "ui")

# The chain of the issue targets, shared by the core, replay and ui parts: median(5) +
# notch (50 Hz, q 30) + Butterworth low-pass of order 4 at BENCH_LOWPASS_HZ.
BENCH_LOWPASS_HZ = 10.0
BENCH_CHAIN_TEXT = f"""\
[[stage]]
kind = "median"
window = 5

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0

[[stage]]
kind = "butterworth"
band = "lowpass"
order = 4
cutoff_hz = {BENCH_LOWPASS_HZ}
"""


def best_of(repeats: int, work: Callable[[], object]) -> float:
    """Shortest wall time of `repeats` runs of work() (s): the least disturbed run."""
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        work()
        best = min(best, time.perf_counter() - start)
    return best
