"""The plot window opens for real under Xvfb (glfw), draws a live pipeline, and closes cleanly.

The window runs in a child process (vispy allows one backend per process and
the render tests of this process use EGL). Xvfb picks a free display itself
(-displayfd).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import need

from monitor.canvas.layout import LEFT_PX, RIGHT_PX

HERE = Path(__file__).parent
CHILD = HERE / "live_window_child.py"


@pytest.fixture()
def xvfb():
    """DISPLAY of a fresh Xvfb server, stopped afterwards."""
    need("Xvfb", shutil.which("Xvfb") is not None)
    read_fd, write_fd = os.pipe()
    server = subprocess.Popen(["Xvfb", "-displayfd", str(write_fd), "-screen", "0",
                               "1280x900x24", "-nolisten", "tcp"],
                              pass_fds=(write_fd,), stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)
    os.close(write_fd)
    try:
        with os.fdopen(read_fd) as pipe:
            number = pipe.readline().strip()
        if not number:
            pytest.fail("Xvfb did not report a display number")
        yield f":{number}"
    finally:
        server.terminate()
        server.wait(timeout=10)


def run_child(env: dict[str, str], *args: str) -> dict:
    root = HERE.parents[2]
    env = dict(env, PYTHONPATH=os.pathsep.join([str(HERE), str(root),
                                                env.get("PYTHONPATH", "")]))
    done = subprocess.run([sys.executable, str(CHILD), *args], env=env, capture_output=True,
                          text=True, timeout=90)
    lines = done.stdout.strip().splitlines()
    assert lines, done.stderr[-2000:]
    report = json.loads(lines[-1])
    assert done.returncode == 0, (report, done.stderr[-2000:])
    return report


@pytest.mark.slow
def test_window_draws_a_live_pipeline_and_survives_close_and_errors(xvfb):
    env = {k: v for k, v in os.environ.items() if k not in ("EGL_PLATFORM", "WAYLAND_DISPLAY")}
    env["DISPLAY"] = xvfb
    report = run_child(env)
    assert report["open"] is None, report
    # frames keep coming while the UI pumps (a frame at most every 1/60 s)
    assert report["frames"] >= 30, report
    assert report["lane0_raw_px"] > 100 and report["lane0_filtered_px"] > 100, report
    assert report["shows_running_chain"], report
    assert report["retune_applied"] and report["response_follows_retune"], report
    assert report["marker_after_retune"] == [3.0], report
    assert report["response_title_after_select"].startswith("response of vib"), report
    assert report["frozen_holds_view"] and report["unfrozen_moves_on"], report
    assert report["window_after_double"] == 4.0, report
    assert report["lanes_in_overlay"] == 1 and report["lanes_after_overlay"] == 3, report
    assert report["size_after_resize"] == [1100, 720], report
    assert report["lane_width_after_resize"] == 1100 - LEFT_PX - RIGHT_PX, report
    assert report["lane0_filtered_px_after_resize"] > 100, report
    assert report["closed_by_user"] and report["close_reason"] == "the plot window was closed"
    assert report["samples_while_closed"] > 50, report           # 250 Hz for 0.5 s
    assert report["reopen"] is None and report["frames_after_reopen"] >= 5, report
    assert report["open_after_error"] is False, report
    assert "selection failed" in report["error_reason"], report
    assert report["samples_after_error"] > 30 and report["pipeline_alive"], report
    assert report["reopen_after_error"] is None and report["closed"], report
    assert "shader trouble" in report["draw_error_reason"], report
    assert report["reopen_after_draw_error"] is None, report
    assert "already draws through glfw" in report["second_backend"], report


def test_without_a_display_open_says_why_in_one_sentence():
    env = {k: v for k, v in os.environ.items()
           if k not in ("DISPLAY", "WAYLAND_DISPLAY", "EGL_PLATFORM")}
    report = run_child(env, "--no-display")
    assert report["is_open"] is False
    assert report["open"].startswith("no display for the plot window"), report
