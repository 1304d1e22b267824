"""Shared helpers for the replay tests: recordings written by the real writer, chains,
and a board on the far end of a real pseudo-terminal."""

from __future__ import annotations

import os
import sys
import threading
import time
import tty
from pathlib import Path

import numpy as np

from monitor.bench import BENCH_CHAIN_TEXT
from monitor.block import Block, Schema

SCHEMA = Schema(("load", "current", "vib"), ("kg", "A", "g"))
RATE_HZ = 250.0

# median(5) + notch + 4th-order Butterworth low-pass: the bench chain, and a
# good chain for the weigh station's load cell.
CHAIN_TEXT = BENCH_CHAIN_TEXT


def weigh_station(n: int, seed: int = 1) -> np.ndarray:
    """(n, 3) load [kg], current [A], vib [g] at 250 Hz: parcels as steps, mains, belt, noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / RATE_HZ
    load = 2.0 + 15.0 * ((t % 2.0) > 1.0) + 0.3 * np.sin(2 * np.pi * 50 * t)
    current = 1.2 + 0.05 * np.sin(2 * np.pi * 18 * t) + 0.01 * rng.normal(size=n)
    vib = 0.02 * np.sin(2 * np.pi * 18 * t) + 0.005 * rng.normal(size=n)
    values = np.column_stack([load + 0.05 * rng.normal(size=n), current, vib])
    values[rng.integers(0, n, size=max(1, n // 500))] += 5.0          # rare spikes
    return values


def write_recording(path: Path, values: np.ndarray, block_rows: int = 37,
                    gaps_at: tuple[int, ...] = (), chain_text: str | None = CHAIN_TEXT,
                    **options) -> np.ndarray:
    """Write `values` with RecordingWriter in blocks at 250 Hz; returns the t_host given."""
    from replay.writer import RecordingWriter

    schema = options.pop("schema", SCHEMA)
    writer = RecordingWriter(path, schema, "/dev/ttyACM0 @ 115200", RATE_HZ, "declared",
                             chain_text, **options)
    t = time.monotonic() + np.arange(len(values)) / RATE_HZ
    cuts = sorted({*range(0, len(values), block_rows), *gaps_at, len(values)})
    for start, stop in zip(cuts[:-1], cuts[1:], strict=True):
        if start in gaps_at:
            writer.write_gap(f"reconnected at row {start}")
        writer.write_block(Block(t[start:stop], values[start:stop]))
    writer.close()
    return t


def data_lines(path: Path) -> list[str]:
    """The lines of a file that are not comments, header row included."""
    return [line for line in path.read_text().splitlines() if not line.startswith("#")]


def tunetrace_cmd(*args: str) -> list[str]:
    """argv running the CLI with this interpreter (no PATH lookup)."""
    return [sys.executable, "-m", "monitor", *args]


class PtySender:
    """A board on a real pty: the test writes lines to the master side from a thread."""

    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            view = view[os.write(self.master, view):]

    def run(self, target, *args) -> None:
        self._thread = threading.Thread(target=target, args=(self, *args), daemon=True)
        self._thread.start()

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def join(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5)

    def drain(self) -> None:
        """Read what the far end echoed or sent back, so the master never fills."""
        os.set_blocking(self.master, False)
        try:
            while os.read(self.master, 65536):
                pass
        except (BlockingIOError, OSError):
            pass

    def close(self) -> None:
        self.join()
        os.close(self.master)
        os.close(self.slave)


def wait_until(predicate, timeout: float = 10.0, step: float = 0.02) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(step)
    return predicate()
