"""Shared fixtures for monitor tests: a real pseudo-terminal that plays a board.

`pty_board` gives a PtyBoard: the test opens `board.path` with pyserial (through
monitor.sources.open_byte_source) and the board writes to the master side, as
a microcontroller's UART would.
"""

from __future__ import annotations

import errno
import os
import threading
import time
from collections.abc import Callable, Iterable

import pytest


class PtyBoard:
    """A board on the far end of a real pty.

    path:  the slave device to open, like /dev/ttyACM0.
    write(data) writes at once; play(lines, rate_hz) paces lines from a thread;
    flood(make_line, seconds, min_bytes=0) writes without waiting and drops lines the
    pty will not take (as a board's full TX buffer does), counting them in `skipped`.
    """

    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        self.path = os.ttyname(self.slave)
        self.sent = 0
        self.skipped = 0
        self.bytes_sent = 0
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            view = view[os.write(self.master, view):]

    def play(self, lines: Iterable[bytes], rate_hz: float) -> threading.Thread:
        """Write each line (terminator included) at `rate_hz` from a background thread."""
        def run() -> None:
            start = time.monotonic()
            for i, line in enumerate(lines):
                if self._stop.is_set():
                    return
                delay = start + i / rate_hz - time.monotonic()
                if delay > 0:
                    time.sleep(delay)
                self.write(line)
                self.sent += 1
        return self._start(run)

    def flood(self, make_line: Callable[[int], bytes], seconds: float,
              batch: int = 64, min_bytes: int = 0,
              timeout_s: float = 20.0) -> threading.Thread:
        """Write make_line(i) for i = 0, 1, ... as fast as possible for `seconds`,
        and on until `min_bytes` have gone out (at most `timeout_s` s in all).

        Lines go out `batch` at a time; a batch the pty will not take is lost whole
        (counted in `skipped`), as when a board's TX buffer is full.
        """
        os.set_blocking(self.master, False)

        def run() -> None:
            start = time.monotonic()
            i = 0
            while not self._stop.is_set():
                now = time.monotonic()
                if now >= start + timeout_s or (now >= start + seconds
                                                and self.bytes_sent >= min_bytes):
                    break
                data = b"".join(make_line(j) for j in range(i, i + batch))
                try:
                    written = os.write(self.master, data)
                except BlockingIOError:
                    self.skipped += batch
                    time.sleep(0.0005)
                else:
                    if written < len(data):     # finish a batch once started
                        os.set_blocking(self.master, True)
                        self.write(data[written:])
                        os.set_blocking(self.master, False)
                    self.sent += batch
                    self.bytes_sent += len(data)
                i += batch
            os.set_blocking(self.master, True)
        return self._start(run)

    def _start(self, target: Callable[[], None]) -> threading.Thread:
        self._thread = threading.Thread(target=target, daemon=True)
        self._thread.start()
        return self._thread

    def wait(self, timeout: float = 30.0) -> None:
        if self._thread is not None:
            self._thread.join(timeout)

    def close(self) -> None:
        self._stop.set()
        self.wait(5.0)
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError as exc:
                if exc.errno != errno.EBADF:
                    raise


@pytest.fixture
def pty_board():
    board = PtyBoard()
    yield board
    board.close()


def _wait_for(predicate: Callable[[], bool], timeout: float = 10.0, step: float = 0.02) -> bool:
    """Poll `predicate` until it is true or `timeout` s pass; returns its last value."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(step)
    return predicate()


@pytest.fixture
def wait_for():
    """The polling helper `wait_for(predicate, timeout=10.0) -> bool` as a fixture."""
    return _wait_for
