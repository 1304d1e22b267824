"""A weigh-station board on a real pseudo-terminal, and a live pipeline reading it."""

from __future__ import annotations

import os
import threading
import time
import tty

import pytest

from monitor.sim.weighstation import WeighStation, channel_names

BOARD_RATE_HZ = 250.0


class PtyBoard:
    """Writes the weigh-station stream (header, then CSV at `rate_hz`) into a pty master.

    `path` is the slave device that pyserial opens, as it would /dev/ttyACM0.
    """

    def __init__(self, rate_hz: float = BOARD_RATE_HZ, channels: int = 3, seed: int = 7) -> None:
        self.rate_hz = rate_hz
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)
        self.names = channel_names(channels)
        self._board = WeighStation(rate_hz, channels, seed)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="pty-board", daemon=True)

    def start(self) -> PtyBoard:
        self._thread.start()
        return self

    def _run(self) -> None:
        header = ",".join(f"{n}[{u}]" for n, u in self.names)
        try:
            os.write(self.master, f"\r\n{header}\r\n".encode())
            t0, sent = time.monotonic(), 0
            while not self._stop.is_set():
                due = int((time.monotonic() - t0) * self.rate_hz) - sent
                if due > 0:
                    rows = self._board.generate(due)
                    text = "".join(",".join(f"{v:.5f}" for v in row) + "\r\n"
                                   for row in rows.tolist())
                    os.write(self.master, text.encode())
                    sent += due
                time.sleep(0.01)
        except OSError:
            pass  # the reader closed the pty

    def close(self) -> None:
        self._stop.set()
        self._thread.join(2)
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass


@pytest.fixture
def board():
    b = PtyBoard()
    yield b
    b.close()


@pytest.fixture
def pipeline(board):
    """A started Pipeline on the pty board, rate declared (250 Hz) so chains design at once."""
    from monitor.pipeline import Pipeline, text_source
    from monitor.sources import open_byte_source

    source = open_byte_source(board.path, 115200)
    board.start()           # after the open, so the header line is surely read
    p = Pipeline(text_source(source, declared_rate=board.rate_hz), rate_hz=board.rate_hz,
                 ring_capacity=250 * 60)
    p.start()
    deadline = time.monotonic() + 10
    while (p.ring is None or p.ring.total < 50) and time.monotonic() < deadline:
        time.sleep(0.02)
    assert p.ring is not None, "no samples arrived from the pty board"
    yield p
    p.stop()
