"""`tunetrace demo` in a real terminal (tmux): live values on screen, the quit key exits 0."""

from __future__ import annotations

import os
import shutil
import subprocess
import time

import pytest

CHANNELS = ("load", "current", "vib")


def _tmux() -> str:
    tmux = shutil.which("tmux")
    if tmux is None:
        if os.environ.get("CI"):
            pytest.fail("tmux is required under CI")
        pytest.skip("tmux is not installed")
    return tmux


def _table_rows(screen: str) -> dict[str, list[str]]:
    """Channel name -> the cells of its row in the channel table."""
    rows = {}
    for line in screen.splitlines():
        cells = line.strip("│ ").split()
        if cells and cells[0] in CHANNELS and cells[0] not in rows and len(cells) >= 5:
            rows[cells[0]] = cells
    return rows


def _wait(predicate, timeout: float) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.2)
    return bool(predicate())


def test_demo_in_tmux_shows_changing_values_and_quits_with_status_0(tmp_path):
    tmux = _tmux()
    socket = f"tunetrace-test-{os.getpid()}"
    exit_file = tmp_path / "exit.txt"
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "TMUX")}
    command = f"cd {tmp_path} && tunetrace demo; echo EXIT=$? > {exit_file}"
    base = [tmux, "-L", socket, "-f", os.devnull]
    subprocess.run([*base, "new-session", "-d", "-s", "demo", "-x", "160", "-y", "48", command],
                   check=True, env=env, timeout=20)

    def capture() -> str:
        return subprocess.run([*base, "capture-pane", "-p", "-t", "demo"], capture_output=True,
                              text=True, timeout=10).stdout

    try:
        assert _wait(lambda: len(_table_rows(capture())) == 3, 30), capture()
        first = _table_rows(capture())
        # a "last" value that changes: the board streams at 250 Hz, the table redraws at 4 Hz
        last_load = first["load"][2]
        assert _wait(lambda: _table_rows(capture()).get("load", first["load"])[2] != last_load,
                     15)
        second = capture()
        for channel in CHANNELS:
            assert channel in second
        assert "sim://" in second and "250 Hz" in second       # the status line
        assert "no display" in second                          # said once, in the status
        subprocess.run([*base, "send-keys", "-t", "demo", "q"], check=True, timeout=10)
        assert _wait(exit_file.exists, 20), capture()
        assert exit_file.read_text().strip() == "EXIT=0"
    finally:
        subprocess.run([*base, "kill-server"], capture_output=True, timeout=10)


def test_without_a_terminal_the_ui_says_to_use_plain():
    done = subprocess.run(["tunetrace", "demo"], stdin=subprocess.DEVNULL, capture_output=True,
                          text=True, timeout=30)
    assert done.returncode == 2
    assert "needs a terminal" in done.stderr and "--plain" in done.stderr
    assert "Traceback" not in done.stderr
    done = subprocess.run(["tunetrace", "live", "-"], input="load[kg]\n1.0\n",
                          capture_output=True, text=True, timeout=30)
    assert done.returncode == 2 and "stdin" in done.stderr and "--plain" in done.stderr
