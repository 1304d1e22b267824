"""kill -9 and hangups at random moments of a real recording: a board on a real
pseudo-terminal, `tunetrace record` (and live, demo and the terminal UI) as real processes.

The promises: after kill -9 every row the board wrote more than 100 ms before the kill
is in the file, in order, exactly, and nothing else is; after SIGHUP (a closed terminal,
a dropped SSH session) the process stops as after Ctrl-C: status 0, the summary printed,
every received row written, the closing rate line last. Moments come from a seeded
random.Random; hostile_profile.scaled sets how many.
"""

from __future__ import annotations

import fcntl
import os
import random
import select
import signal
import struct
import subprocess
import sys
import termios
import threading
import time
import tty

import numpy as np
import pytest
from hostile_profile import PROFILE, scaled

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.arrival_rate import SESSION_MIN_SPAN_S
from replay.reader import read_recording

BOARD_HZ = 500.0
BATCH = 10                          # rows per write to the pty: one write every 20 ms
CHANNELS = ("seq", "load", "vib")
PROMPT_S = 0.1                      # the recorder's promise: rows on disk within 100 ms
CHAIN = """
[[stage]]
kind = "median"
window = 3

[[stage]]
kind = "butterworth"
band = "lowpass"
order = 2
cutoff_hz = 8.0
"""
# (declared rate or None, --with-filtered): each combination meets early and late moments
COMBOS = [(None, False), (None, True), (BOARD_HZ, False), (BOARD_HZ, True)]
EARLY_S = (0.3, 1.2)        # before arrival times settle (1.5 to 3 s): rate still unknown
LATE_S = (2.6, 3.6)         # usually after
CONCURRENT = 5              # recorders running at once (each mostly waits on its board)


def tunetrace(*args: str) -> list[str]:
    return [sys.executable, "-m", "monitor", *args]


STARTED: list[subprocess.Popen] = []


def spawn(args: list[str], **popen) -> subprocess.Popen:
    """subprocess.Popen, remembered so that a failing test leaves no recorder running."""
    STARTED.append(subprocess.Popen(args, **popen))
    return STARTED[-1]


def kill_leftovers() -> None:
    while STARTED:
        proc = STARTED.pop()
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)


@pytest.fixture(autouse=True)
def no_process_left():
    yield
    kill_leftovers()


def weigh_rows(n: int, seed: int) -> np.ndarray:
    """(n, 3) seq, load [kg] (parcel steps, mains, spikes), vib [g]: demo numbers."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / BOARD_HZ
    load = 2.0 + 15.0 * ((t % 2.0) > 1.0) + 0.3 * np.sin(2 * np.pi * 50 * t)
    load += 0.05 * rng.normal(size=n)
    load[rng.integers(0, n, size=n // 400)] += 5.0
    vib = 0.02 * np.sin(2 * np.pi * 18 * t) + 0.005 * rng.normal(size=n)
    return np.column_stack([np.arange(n, dtype=float), load.round(4), vib.round(5)])


class Board:
    """A board on the far end of a real pty: a header line, then BATCH rows every
    BATCH / BOARD_HZ s on a monotonic schedule. sent_at[k]: when row k had been written."""

    def __init__(self, values: np.ndarray) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        os.set_blocking(self.master, False)
        self.path = os.ttyname(self.slave)
        self.values = values
        self.sent_at: list[float] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._play, daemon=True)

    def start(self) -> Board:
        self._thread.start()
        return self

    def _play(self) -> None:
        # a line end first: a link may drop the partial line it opened in the middle of
        self._write(b"\nseq,load[kg],vib[g]\n")
        start = time.monotonic()
        for first in range(0, len(self.values), BATCH):
            if self._stop.is_set():
                return
            delay = start + first / BOARD_HZ - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            rows = self.values[first:first + BATCH].tolist()
            self._write(b"".join((",".join(map(repr, row)) + "\n").encode() for row in rows))
            self.sent_at.extend([time.monotonic()] * len(rows))

    def _write(self, data: bytes) -> None:
        """Write all of `data`, waiting while the pty is full, until close() is called
        (a killed recorder reads no more: the pty fills and stays full)."""
        view = memoryview(data)
        while view and not self._stop.is_set():
            _, ready, _ = select.select([], [self.master], [], 0.1)
            if ready:
                view = view[os.write(self.master, view):]

    def sent_before(self, moment: float) -> int:
        """Rows the board had written before `moment` (time.monotonic())."""
        return sum(1 for t in self.sent_at[:] if t < moment)

    def wait_first_row(self, timeout: float = 10.0) -> None:
        end = time.monotonic() + timeout
        while not self.sent_at and time.monotonic() < end:
            time.sleep(0.01)
        assert self.sent_at, "the board wrote nothing"

    def close(self) -> None:
        self._stop.set()
        self._thread.join(5)
        for fd in (self.master, self.slave):
            os.close(fd)


@pytest.fixture
def board_factory():
    boards: list[Board] = []

    def make(n: int, seed: int) -> Board:
        boards.append(Board(weigh_rows(n, seed)))
        return boards[-1]
    yield make
    kill_leftovers()                 # before the boards go: no recorder outlives its port
    for board in boards:
        board.close()


def file_rows(path) -> tuple[np.ndarray, list[str]]:
    """(every whole data row as a float table, the comment lines among the rows)."""
    text = path.read_text()
    lines = text[: text.rfind("\n") + 1].splitlines()
    body = lines[[i for i, line in enumerate(lines) if line.startswith("t_host,")][0] + 1:]
    rows = [line for line in body if not line.startswith("#")]
    table = np.array([[float(x) for x in row.split(",")] for row in rows]).reshape(len(rows), -1)
    marks = [(sum(1 for line in body[:i] if not line.startswith("#")), line)
             for i, line in enumerate(body) if line.startswith("#")]
    return table, marks


def check_rows(path, board: Board, cut_at: float, with_filtered: bool,
               declared: float | None) -> tuple[object, np.ndarray]:
    """Every row written more than PROMPT_S before cut_at is in the file, in order,
    exactly, and nothing else; filtered columns are raw until the rate is known, then
    the chain's own output. Returns (recording, raw values)."""
    rec = read_recording(path)
    raw = np.vstack([b.values for b in rec.blocks()])
    must_have = board.sent_before(cut_at - PROMPT_S)
    assert must_have > 0
    assert len(raw) >= must_have, (f"{must_have - len(raw)} of the {must_have} rows older "
                                   f"than {PROMPT_S * 1000:.0f} ms are missing")
    np.testing.assert_array_equal(raw, board.values[: len(raw)])     # exact, in order
    assert rec.bad_rows == 0 and rec.schema.channels == CHANNELS
    table, marks = file_rows(path)
    assert len(table) == len(raw)
    assert table.shape[1] == 1 + 3 * (2 if with_filtered else 1)
    if with_filtered:
        check_filtered(table[:, 1:4], table[:, 4:7], marks, declared)
    return rec, raw


def check_filtered(raw: np.ndarray, filtered: np.ndarray, marks, declared) -> None:
    """Before `# rate_hz_found:` filtered equals raw (the chain waits for the rate); from
    there (or from the start at a declared rate) it is the chain run on the rows
    (scipy-based ChainSet, block splits equal to float rounding), up to any redesign."""
    start, rate = 0, declared
    for row, line in marks:
        if line.startswith("# rate_hz_found: "):
            start, rate = row, float(line.split(": ")[1].split(" ")[0])
    if rate is None:                     # cut before the rate was known
        np.testing.assert_array_equal(filtered, raw)
        return
    np.testing.assert_array_equal(filtered[:start], raw[:start])
    stop = min([row for row, line in marks if line.startswith("# rate_hz_changed:")]
               + [len(raw)])
    expected = ChainSet(parse_chain(CHAIN), CHANNELS, rate).process(raw[start:stop])
    np.testing.assert_allclose(filtered[start:stop], expected, rtol=1e-9, atol=1e-9)


def moments(kind: str) -> list[tuple[float | None, bool, float]]:
    """(rate, with_filtered, seconds after the first row) for each run: every combination
    in turn, early and late moments alternating, drawn from a seeded generator (a new
    seed per run under the long profile)."""
    seed = {"kill": 9, "hangup": 1}[kind] if PROFILE == "ci" else None
    rng = random.Random(seed)
    runs = []
    for i in range(scaled(4)):
        rate, with_filtered = COMBOS[i % len(COMBOS)]
        low, high = EARLY_S if (i + i // len(COMBOS)) % 2 == 0 else LATE_S
        runs.append((rate, with_filtered, rng.uniform(low, high)))
    return runs


@pytest.fixture
def chain_file(tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text(CHAIN)
    return path


class Run:
    """One recorder process, its board and the moment it gets the signal."""

    def __init__(self, board: Board, out, rate: float | None, with_filtered: bool,
                 moment: float) -> None:
        self.board, self.out, self.rate, self.with_filtered = board, out, rate, with_filtered
        self.moment = moment
        self.proc: subprocess.Popen | None = None
        self.master: int | None = None          # the run's own terminal, if it has one
        self.window_open = False
        self.signalled_at = 0.0

    def __str__(self) -> str:
        return (f"run at {self.moment:.3f} s, rate {self.rate or 'not given'}, "
                f"{'with' if self.with_filtered else 'without'} --with-filtered")

    def args(self, chain) -> list[str]:
        args = ["record", self.board.path, "-o", str(self.out)]
        args += ["--rate", f"{self.rate:g}"] if self.rate else []
        args += ["--chain", str(chain), "--with-filtered"] if self.with_filtered else []
        return tunetrace(*args)


def run_all(runs: list[Run], chain, act) -> None:
    """Start every run's recorder at once (CONCURRENT at a time), start each board once its
    port is open (pyserial drops what waited before the open), then act(run) at each
    run's moment after its board's first row, and wait for every process to end."""
    for batch in range(0, len(runs), CONCURRENT):
        group = runs[batch:batch + CONCURRENT]
        for run in group:
            if run.master is None:
                run.proc = spawn(run.args(chain), stdout=subprocess.PIPE,
                                 stderr=subprocess.PIPE, text=True)
        for run in group:
            if run.master is None:
                line = run.proc.stderr.readline()
                assert "Ctrl-C stops" in line, f"{run}: {line}{run.proc.stderr.read()}"
            else:
                shown = read_screen(run.master, 30, until=lambda got: b"Ctrl-C stops" in got)
                assert b"Ctrl-C stops" in shown, f"{run}: {shown!r}"
            run.board.start()
        for run in group:
            run.board.wait_first_row()
        for run in sorted(group, key=lambda r: r.board.sent_at[0] + r.moment):
            due = run.board.sent_at[0] + run.moment
            while time.monotonic() < due:
                for other in group:             # keep any run's terminal drained
                    if other.window_open:
                        read_screen(other.master, 0.0)
                time.sleep(min(0.01, max(0.0, due - time.monotonic())))
            run.signalled_at = time.monotonic()
            act(run)
        for run in group:
            run.proc.wait(timeout=30)


@pytest.fixture
def runs_factory(board_factory, tmp_path):
    def make(kind: str) -> list[Run]:
        return [Run(board_factory(int((moment + 3) * BOARD_HZ), seed=i + 17),
                    tmp_path / f"{kind}{i}.csv", rate, with_filtered, moment)
                for i, (rate, with_filtered, moment) in enumerate(moments(kind))]
    return make


def test_kill_9_at_random_moments_keeps_every_row_older_than_100_ms(runs_factory,
                                                                    chain_file):
    runs = runs_factory("kill")
    run_all(runs, chain_file, lambda run: run.proc.kill())     # SIGKILL: no cleanup at all
    for run in runs:
        assert run.proc.returncode == -signal.SIGKILL, str(run)
        rec, _ = check_rows(run.out, run.board, run.signalled_at, run.with_filtered, run.rate)
        text = run.out.read_text()
        assert "# rate_hz_measured:" not in text, str(run)     # no close ran: no trailer
        if run.rate is None and "# rate_hz_found:" not in text:
            assert rec.header.rate_hz is None and rec.rate()[1] == "estimated", str(run)
        else:
            assert rec.header.rate_hz == pytest.approx(BOARD_HZ, rel=0.01), str(run)


def summary_frames(stdout: str, path) -> int:
    line = stdout.strip().splitlines()[-1]
    assert line.startswith(f"recorded {path}: "), stdout
    assert line.endswith(f"{os.path.getsize(path)} bytes")
    return int(line.split(": ")[1].split(" frames")[0])


def check_complete(path, frames: int, rows: int) -> None:
    """The file was closed: every received frame written, no torn line, and the closing
    rate line last once the session was long enough to measure (SESSION_MIN_SPAN_S)."""
    assert rows == frames
    text = path.read_text()
    rec = read_recording(path)
    assert text.endswith("\n") and not rec.torn_last_line
    last = text.splitlines()[-1]
    span = rec.duration_s()
    if span > SESSION_MIN_SPAN_S * 1.1:
        assert last.startswith("# rate_hz_measured: "), last
        assert rec.rate_origin in ("trailer", "header")
    elif span < SESSION_MIN_SPAN_S * 0.9:                # too short to measure: no trailer
        assert last[:1].isdigit() or last.startswith("# gap:"), last


def test_sighup_at_random_moments_stops_like_ctrl_c(runs_factory, board_factory, chain_file,
                                                     tmp_path):
    runs = runs_factory("hangup")
    # and one recorder whose terminal really closes: SIGHUP comes and stdout is dead (EIO)
    in_window = Run(board_factory(4000, seed=3), tmp_path / "terminal.csv", None, False,
                    random.Random(3 if PROFILE == "ci" else None).uniform(*LATE_S))
    in_window.proc, in_window.master = in_terminal(in_window.args(chain_file))
    in_window.window_open = True

    def hang_up(run: Run) -> None:
        if run.master is not None:
            run.window_open = False
            os.close(run.master)                 # the terminal window closes
        else:
            run.proc.send_signal(signal.SIGHUP)

    run_all([in_window, *runs], chain_file, hang_up)
    for run in runs:
        stdout, stderr = run.proc.communicate(timeout=20)
        assert run.proc.returncode == 0, f"{run}: {stderr}"
        assert "Traceback" not in stderr, str(run)
        _, raw = check_rows(run.out, run.board, run.signalled_at, run.with_filtered, run.rate)
        check_complete(run.out, summary_frames(stdout, run.out), len(raw))
    assert in_window.proc.returncode == 0
    _, raw = check_rows(in_window.out, in_window.board, in_window.signalled_at, False, None)
    check_complete(in_window.out, len(raw), len(raw))


def in_terminal(args: list[str], cols: int = 120, rows: int = 40, **popen):
    """Start `args` as the session leader of a new real terminal (a pty that is its
    controlling terminal, on stdin, stdout and stderr); returns (process, master fd).
    Closing the master is what closing the terminal window does: the kernel hangs up."""
    master, slave = os.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", rows, cols, 0, 0))

    def take_terminal() -> None:
        fcntl.ioctl(0, termios.TIOCSCTTY, 0)

    proc = spawn(args, stdin=slave, stdout=slave, stderr=slave, start_new_session=True,
                 preexec_fn=take_terminal, env=dict(os.environ, TERM="xterm-256color"),
                 **popen)
    os.close(slave)
    return proc, master


def read_screen(master: int, seconds: float, until=None) -> bytes:
    """What the terminal showed over `seconds` (or until until(text) holds); with 0, only
    what is waiting now."""
    got = b""
    end = time.monotonic() + seconds
    while not (until and until(got)):
        wait = max(0.0, min(0.05, end - time.monotonic()))
        ready, _, _ = select.select([master], [], [], wait)
        if ready:
            try:
                got += os.read(master, 65536)
            except OSError:                  # the far side closed
                break
        elif time.monotonic() >= end:
            break
    return got


def recorded_rows(path) -> int:
    if not path.exists():
        return 0
    return sum(1 for line in path.read_text().splitlines() if line[:1].isdigit())


def wait_all_rows(paths, rows: int, timeout: float, masters=()) -> None:
    """Until every file has `rows` data rows, keeping the given terminals drained."""
    end = time.monotonic() + timeout
    while any(recorded_rows(p) < rows for p in paths) and time.monotonic() < end:
        for master in masters:
            read_screen(master, 0.0)
        time.sleep(0.05)
    for path in paths:
        assert recorded_rows(path) >= rows, f"{path} has {recorded_rows(path)} rows"


def test_plain_sessions_with_record_stop_on_sighup(board_factory, tmp_path):
    board = board_factory(6000, seed=5)
    board.start()                         # what it writes before the port opens is dropped
    outs = {"demo": tmp_path / "demo.csv", "live": tmp_path / "live.csv"}
    procs = {verb: spawn(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for verb, args in (("demo", tunetrace("demo", "--plain", "--record",
                                                   str(outs["demo"]))),
                                ("live", tunetrace("live", board.path, "--plain", "--record",
                                                   str(outs["live"]))))}
    try:
        wait_all_rows(outs.values(), 600, timeout=40)
    finally:
        for proc in procs.values():
            proc.send_signal(signal.SIGHUP)
    for verb, proc in procs.items():
        stdout, stderr = proc.communicate(timeout=20)
        assert proc.returncode == 0, f"{verb}: {stderr}"
        assert "Traceback" not in stderr
        summary = stdout.strip().splitlines()[-1]
        assert summary.startswith("summary: "), stdout
        frames = int(summary.split("frames")[0].split()[-1])
        check_complete(outs[verb], frames, recorded_rows(outs[verb]))


def test_terminal_ui_recording_closes_cleanly(tmp_path):
    # textual leaves SIGHUP and SIGTERM at their defaults and, on a hung-up terminal,
    # runs on; its SIGCONT handler would restart its input thread after the hangup
    outs = {how: tmp_path / f"{how}.csv" for how in ("hangup", "sigterm")}
    sessions = {how: in_terminal(tunetrace("demo", "--record", str(out)), cwd=tmp_path)
                for how, out in outs.items()}
    masters = [master for _, master in sessions.values()]
    try:
        wait_all_rows(outs.values(), 500, timeout=60, masters=masters)
        proc, master = sessions["sigterm"]
        proc.send_signal(signal.SIGTERM)
        os.close(sessions["hangup"][1])                 # the other window closes
        screen = read_screen(master, 10, until=lambda got: b"\x1b[?1049l" in got)
        assert b"\x1b[?1049l" in screen               # the UI left its screen: a clean quit
    finally:
        os.close(sessions["sigterm"][1])
        codes = {how: proc.wait(timeout=20) for how, (proc, _) in sessions.items()}
    assert codes == {"hangup": 0, "sigterm": 0}
    for out in outs.values():
        rows = recorded_rows(out)
        check_complete(out, rows, rows)
