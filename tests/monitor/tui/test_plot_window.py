"""With a display (Xvfb), the UI opens the plot window and pumps it; it closes on quit."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).parent


@pytest.fixture
def xvfb_display():
    """DISPLAY of a private Xvfb server (it picks a free number: -displayfd)."""
    xvfb = shutil.which("Xvfb")
    if xvfb is None:
        if os.environ.get("CI"):
            pytest.fail("Xvfb is required under CI")
        pytest.skip("Xvfb is not installed")
    read_fd, write_fd = os.pipe()
    server = subprocess.Popen([xvfb, "-displayfd", str(write_fd), "-screen", "0", "1280x1024x24",
                               "-nolisten", "tcp"], pass_fds=[write_fd],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    os.close(write_fd)
    try:
        with os.fdopen(read_fd) as pipe:
            number = pipe.readline().strip()      # written once the server is ready
        if not number:
            pytest.fail("Xvfb did not report a display number")
        yield f":{number}"
    finally:
        server.terminate()
        server.wait(10)


def test_plot_window_opens_with_a_display_and_closes_on_quit(xvfb_display):
    env = {k: v for k, v in os.environ.items() if k not in ("EGL_PLATFORM", "WAYLAND_DISPLAY")}
    env["DISPLAY"] = xvfb_display
    root = HERE.parents[2]
    env["PYTHONPATH"] = os.pathsep.join([str(HERE), str(root), env.get("PYTHONPATH", "")])
    done = subprocess.run([sys.executable, str(HERE / "plot_window_child.py")], env=env,
                          capture_output=True, text=True, timeout=90)
    lines = done.stdout.strip().splitlines()
    assert lines, done.stderr[-2000:]
    report = json.loads(lines[-1])
    assert report["opened"], report
    assert report["pumped"] and report["frames"] >= 3, report     # pumped from set_interval
    assert "no display" not in report["status"], report
    assert report["closed_on_quit"] and report["exit"] == 0, report
