"""`tunetrace demo` in a real terminal (tmux): what a user sees and types, as fast as a paste.

Keys go in with `tmux send-keys`, several in one call: they reach the program in one
write, as a paste or a fast typist's keys do. Esc is sent on its own: in a terminal an
Esc followed at once by another key reads as Alt+key (common practice of terminal
input, not ours to change). Every wait is on what the screen or a file shows.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import time
from pathlib import Path

import pytest

from filters.chainfile import parse_chain

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
        cells = line.strip("│┃ ").split()
        if cells and cells[0] in CHANNELS and cells[0] not in rows and len(cells) >= 5:
            rows[cells[0]] = cells
    return rows


def _wait(predicate, timeout: float) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.1)
    return bool(predicate())


class DemoTerminal:
    """`tunetrace demo` running in a detached tmux session of `size` cells."""

    def __init__(self, folder: Path, size: tuple[int, int] = (160, 48)) -> None:
        self.folder = folder
        self.exit_file = folder / "exit.txt"
        self.base = [_tmux(), "-L", f"tunetrace-test-{os.getpid()}-{id(self)}", "-f",
                     os.devnull]
        env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "TMUX")}
        command = f"cd {folder} && tunetrace demo; echo EXIT=$? > {self.exit_file}"
        subprocess.run([*self.base, "new-session", "-d", "-s", "demo", "-x", str(size[0]),
                        "-y", str(size[1]), command], check=True, env=env, timeout=20)

    def screen(self) -> str:
        return subprocess.run([*self.base, "capture-pane", "-p", "-t", "demo"],
                              capture_output=True, text=True, timeout=10).stdout

    def keys(self, *keys: str) -> None:
        """Send `keys` (tmux key names or literal characters) in one write."""
        subprocess.run([*self.base, "send-keys", "-t", "demo", *keys], check=True, timeout=10)

    def shows(self, text: str, timeout: float = 10.0) -> bool:
        return _wait(lambda: text in self.screen(), timeout)

    def close(self) -> None:
        subprocess.run([*self.base, "kill-server"], capture_output=True, timeout=10)


@pytest.fixture
def demo(tmp_path):
    terminal = DemoTerminal(tmp_path)
    yield terminal
    terminal.close()


def test_demo_in_tmux_shows_changing_values_and_quits_with_status_0(demo):
    assert demo.shows("no display", 30), demo.screen()        # said once, in the status
    assert _wait(lambda: len(_table_rows(demo.screen())) == 3, 30), demo.screen()
    first = _table_rows(demo.screen())
    # a "last" value that changes: the board streams at 250 Hz, the table redraws at 2 Hz
    last_load = first["load"][2]
    assert _wait(lambda: _table_rows(demo.screen()).get("load", first["load"])[2] != last_load,
                 15)
    second = demo.screen()
    for channel in CHANNELS:
        assert channel in second
    assert "sim://" in second and "250 Hz" in second       # the status line
    demo.keys("q")
    assert _wait(demo.exit_file.exists, 20), demo.screen()
    assert demo.exit_file.read_text().strip() == "EXIT=0"


def _saved_chain(demo: DemoTerminal, name: str) -> object:
    """Save the running chain with `s` under `name` (typed in one burst) and parse it."""
    path = demo.folder / name
    demo.keys("s", "C-u", name, "Enter")           # ctrl+u clears the proposed name
    assert _wait(path.exists, 10), demo.screen()
    return parse_chain(path.read_text())


def test_the_key_path_and_a_burst_typed_value_reach_the_running_chain(demo):
    assert _wait(lambda: len(_table_rows(demo.screen())) == 3, 30), demo.screen()
    assert demo.shows("3. butterworth"), demo.screen()           # load's chain is listed
    # Enter on the table: into load's chain; Down Down: stage 3; Enter: its first field;
    # Tab Tab: band -> order -> cutoff_hz. One burst.
    demo.keys("Enter", "Down", "Down", "Enter", "Tab", "Tab")
    assert demo.shows("keys to: field cutoff_hz"), demo.screen()
    assert demo.shows("stage 3 of load: butterworth")
    # the whole value in one burst, through an invalid state ("2..") and back
    demo.keys("End", *["BSpace"] * 6, "2", ".", ".", "BSpace", "7", "5", "Enter")
    assert demo.shows("applied cutoff_hz=2.75 to stage 3 (butterworth) of load"), demo.screen()
    demo.keys("Escape")
    assert demo.shows("keys to: stage list")
    demo.keys("Escape")
    assert demo.shows("keys to: channel table")
    chain = _saved_chain(demo, "after-retune.toml")
    butterworth = [s for _, s in chain.stages_for("load") if s.kind == "butterworth"]
    assert butterworth[0].params["cutoff_hz"] == 2.75               # exactly what was typed

    # (the stage list remembers stage 3 and its Down wraps round: Home first)
    # digits typed in a field are text, never channel keys: order "12" is refused beside
    # its field (order runs 1 to 10) and the running chain keeps order 4
    demo.keys("Enter", "Home", "Down", "Down", "Enter", "Tab", "End", "BSpace", "BSpace", "1",
              "2", "Enter")
    assert demo.shows("refused"), demo.screen()
    assert "there is no channel" not in demo.screen()
    assert demo.shows("keys to: field order")

    # remove a stage, take it back, make it again: each answered in the status
    demo.keys("Escape")
    assert demo.shows("keys to: stage list")
    demo.keys("Up", "Up", "d")
    assert demo.shows("removed stage 1 (median) of load (u undoes)"), demo.screen()
    assert "1. notch" in demo.screen()                              # per-channel numbers
    demo.keys("u")
    assert demo.shows("undone: removed stage 1 (median) of load"), demo.screen()
    assert "1. median" in demo.screen()
    demo.keys("Escape")
    assert demo.shows("keys to: channel table")
    kinds = [s.kind for _, s in _saved_chain(demo, "after-undo.toml").stages_for("load")]
    assert kinds == ["median", "notch", "butterworth"]
    demo.keys("q")
    assert _wait(demo.exit_file.exists, 20), demo.screen()
    assert demo.exit_file.read_text().strip() == "EXIT=0"


def test_without_a_terminal_the_ui_says_to_use_plain():
    done = subprocess.run(["tunetrace", "demo"], stdin=subprocess.DEVNULL, capture_output=True,
                          text=True, timeout=30)
    assert done.returncode == 2
    assert "needs a terminal" in done.stderr and "--plain" in done.stderr
    assert "Traceback" not in done.stderr
    done = subprocess.run(["tunetrace", "live", "-"], input="load[kg]\n1.0\n",
                          capture_output=True, text=True, timeout=30)
    assert done.returncode == 2 and "stdin" in done.stderr and "--plain" in done.stderr
