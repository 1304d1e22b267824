"""Memory that grows with what the input claims: each attack under a 1.5 GB address limit.

Every input-sized allocation has a budget (README, "Memory budgets"). Here each attack
runs as a real `tunetrace` process whose address space is capped with RLIMIT_AS (set in
preexec_fn): a 2000-column text stream on stdin to `live - --plain` and to `record -`,
a binary layout of 1e8 floats, chains with a window of 1e9 samples or 100 000 stages.
Beyond its budget an input gets one sentence naming the limit (and the option that
changes it, where there is one), never a MemoryError or a traceback, and `record` keeps
every row it received. Without the budgets each of these allocates gigabytes: the ring
of 600 s at 1 kHz of 2000 channels alone is 19 GB.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import threading
from pathlib import Path

import pytest

ADDRESS_LIMIT = 1536 << 20       # bytes of address space each attacked process may take
COLUMNS = 2000
TIMEOUT_S = 120


def _limit_address_space() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (ADDRESS_LIMIT, ADDRESS_LIMIT))


def _tunetrace(*args: str, rows: int | None = 0) -> tuple[int, str]:
    """Run `tunetrace args` under ADDRESS_LIMIT -> (exit status, stderr). rows: wide lines
    written to its stdin (None: until it stops reading; 0: none, stdin closed)."""
    with tempfile.TemporaryFile() as err:
        process = subprocess.Popen([sys.executable, "-m", "monitor.cli", *args],
                                   stdin=subprocess.PIPE if rows != 0 else subprocess.DEVNULL,
                                   stdout=subprocess.DEVNULL, stderr=err,
                                   preexec_fn=_limit_address_space,
                                   env={**os.environ, "PYTHONWARNINGS": "default"})
        feeder = _feed(process, rows) if rows != 0 else None
        try:
            code = process.wait(timeout=TIMEOUT_S)
        finally:
            process.kill()
        if feeder is not None:
            feeder.join(5)
        err.seek(0)
        return code, err.read().decode(errors="replace")


def _row(number: int) -> bytes:
    """One line of the wide stream: COLUMNS one-digit values (3999 bytes, inside the
    4096-byte line limit), the first column counting rows so the file can be checked."""
    return (f"{number % 10}," + ",".join(str((number + i) % 10) for i in range(1, COLUMNS))
            + "\n").encode()


def _feed(process: subprocess.Popen, rows: int | None) -> threading.Thread:
    """Write `rows` wide lines to the process's stdin (None: until it stops reading)."""
    def write() -> None:
        try:
            number = 0
            while rows is None or number < rows:
                end = number + 50 if rows is None else min(rows, number + 50)
                process.stdin.write(b"".join(_row(n) for n in range(number, end)))
                number = end
            process.stdin.close()
        except (BrokenPipeError, ValueError, OSError):
            pass
    thread = threading.Thread(target=write, daemon=True)
    thread.start()
    return thread


def _one_sentence(stderr: str) -> None:
    assert "Traceback" not in stderr and "MemoryError" not in stderr, stderr[-3000:]


def test_live_on_a_2000_column_stream_keeps_fewer_seconds_not_more_memory():
    code, stderr = _tunetrace("live", "-", "--plain", "--duration", "3", rows=None)
    _one_sentence(stderr)
    assert code == 0, stderr[-3000:]
    notices = [line for line in stderr.splitlines() if "channels keep" in line]
    assert len(notices) == 1, stderr[-3000:]
    # 256 MiB / ((2 * 2000 + 1) * 8 bytes per sample) = 8386 samples (monitor.ring)
    assert f"{COLUMNS} channels keep 8386 samples" in notices[0]
    assert "--ring-memory" in notices[0]


def test_record_of_a_2000_column_stream_keeps_every_row(tmp_path: Path):
    # 10 s of history at a declared 5 kHz would be 1.6 GB of ring for 2000 channels
    out = tmp_path / "wide.csv"
    rows = 1500
    code, stderr = _tunetrace("record", "-", "-o", str(out), "--rate", "5000", rows=rows)
    _one_sentence(stderr)
    assert code == 0, stderr[-3000:]
    lines = [line for line in out.read_text().splitlines() if line and not line.startswith("#")]
    header, data = lines[0], lines[1:]
    assert header.count(",") == COLUMNS        # t_host and the stream's columns
    assert len(data) == rows
    # every row in order, exactly as sent: the first column counts rows modulo 10
    assert [float(line.split(",")[1]) for line in data] == [n % 10 for n in range(rows)]
    last = [float(v) for v in data[-1].split(",")[1:]]
    assert last == [float(v) for v in _row(rows - 1).decode().split(",")]


@pytest.mark.parametrize(("layout", "fragment"), [
    ("<99999999f", "makes frames of 399999996 bytes, more than the 65536 allowed"),
    ("<99999999999999999999f", "makes frames of over 10^12 bytes"),
    ("<16000f", "more than the 4096 channels"),
])
def test_a_huge_binary_layout_is_refused_in_one_sentence(layout, fragment, tmp_path):
    fields = ",".join(f"c{i}" for i in range(16000)) if layout == "<16000f" else "a"
    code, stderr = _tunetrace("record", "-", "-o", str(tmp_path / "x.csv"), "--framing",
                              "cobs", "--layout", layout, "--fields", fields)
    _one_sentence(stderr)
    assert code == 2 and len(stderr.splitlines()) == 1, stderr[-3000:]
    assert fragment in stderr


_AVERAGE = '[[stage]]\nkind = "moving-average"\nwindow = 1000000000\n'


@pytest.mark.parametrize(("verb", "chain", "fragment"), [
    ("design", _AVERAGE, "window = 1000000000"),
    ("apply", _AVERAGE, "window = 1000000000"),
    ("design", '[[stage]]\nkind = "median"\nwindow = 1000000001\n', "window = 1000000001"),
    ("design", '[[stage]]\nkind = "ema"\nalpha = 0.5\n' * 100_000, "characters"),
    ("apply", '[[stage]]\nkind = "gain"\n' * 1000, "1000 stages, more than the 256 allowed"),
], ids=["design-average-window", "apply-average-window", "design-median-window",
        "design-100k-stages", "apply-1000-stages"])
def test_a_huge_window_or_stage_count_is_refused_in_one_sentence(chain, fragment, verb,
                                                                 tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text(chain)
    recording = tmp_path / "in.csv"
    recording.write_text("t,x\n0,1\n0.004,2\n0.008,3\n")
    args = (["design", str(path), "--rate", "250"] if verb == "design" else
            ["apply", str(recording), "--chain", str(path), "-o", str(tmp_path / "o.csv")])
    code, stderr = _tunetrace(*args)
    _one_sentence(stderr)
    assert code == 2 and len(stderr.splitlines()) == 1, stderr[-3000:]
    assert fragment in stderr
