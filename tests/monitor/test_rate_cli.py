"""The rate and gap lines as the commands write them: sim:// declares its rate, stdin's end
of input comes after the rows, and the stats line says when the rate moved."""

from __future__ import annotations

import subprocess
import sys
import time

import pytest

from monitor.commands.live import rate_text
from monitor.pipeline import PipelineStatus
from monitor.tui.status_bar import UiState, status_lines


def tunetrace(*args: str, **kwargs) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "monitor", *args], capture_output=True,
                          text=True, timeout=60, **kwargs)


def test_short_sim_recording_has_its_declared_rate(tmp_path):
    out = tmp_path / "sim.csv"
    result = tunetrace("record", "sim://?rate=100", "-o", str(out), "--duration", "0.6")
    assert result.returncode == 0, result.stderr
    assert "# rate_hz: 100.0 (declared)\n" in out.read_text()


def test_sim_that_does_not_declare_is_measured(tmp_path):
    out = tmp_path / "sim.csv"
    result = tunetrace("record", "sim://?rate=400&declare=0", "-o", str(out),
                       "--duration", "3.5")
    assert result.returncode == 0, result.stderr
    text = out.read_text()
    assert "(estimated)\n" in text
    from replay.reader import read_recording

    rec = read_recording(out)
    assert rec.rate_origin == "trailer"
    # the sim paces on its own monotonic schedule: that is the reference
    assert rec.rate_hz == pytest.approx(400.0, rel=5e-4)


def test_stdin_end_of_input_comes_after_every_row(tmp_path):
    out = tmp_path / "stdin.csv"
    lines = "load[kg],current[A]\n" + "".join(f"{2 + i / 100:.2f},{i}\n" for i in range(500))
    result = tunetrace("record", "-", "-o", str(out), "--rate", "250", input=lines)
    assert result.returncode == 0, result.stderr
    body = [line for line in out.read_text().splitlines()
            if not line.startswith("# ") or line.startswith("# gap")]
    gap = body.index("# gap: end of input")
    rows = body[1:gap]                                  # after the CSV header row
    assert len(rows) == 500 and gap == len(body) - 1
    assert float(rows[-1].split(",")[2]) == 499


def test_rate_move_is_said_in_the_stats_line_and_status_bar():
    status = PipelineStatus(rate_hz=1010.2, rate_origin="estimated", source_state="connected",
                            rate_moved_from=1000.0, rate_moved_at=time.monotonic())
    assert rate_text(status) == "~1010.2 Hz estimated (moved from 1000 Hz, redesigned)"
    line1, _ = status_lines(status, UiState())
    assert "1010 Hz (estimated) moved from 1000 Hz, chain redesigned" in line1
    status.rate_moved_at -= 60.0                        # shown for a while, then dropped
    assert rate_text(status) == "~1010.2 Hz estimated"
    assert "moved" not in status_lines(status, UiState())[0]
