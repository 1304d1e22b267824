"""The measured sample rate on a real pseudo-terminal board that talked before the port
opened, and gap lines in order around an unplug.

The pace reference is the writer's own schedule on time.monotonic(): line k is due
at start + k / rate, and a writer that fell behind (the pty was full before the
port opened) writes what is due at once, as a board draining its TX buffer does.
"""

from __future__ import annotations

import os
import threading
import time

import numpy as np
import pytest

from filters.chainfile import parse_chain
from monitor.commands.common import DeferredRecording
from monitor.pipeline import Pipeline, StartRecording, text_source
from monitor.sources import open_byte_source
from replay.reader import read_recording


def make_line(k: int, length: int) -> bytes:
    """A weigh-station style line of about `length` bytes: counter, then load values (kg)."""
    width = max(1, (length - 8) // 12)
    load = 2.0 + 5.0 * ((k // 700) % 3) + 0.01 * ((k * 7919) % 13)
    fields = [f"{k:7d}"] + [f"{load + 0.1 * c:11.4f}" for c in range(width)]
    return (",".join(fields) + "\n").encode()


class PacedBoard:
    """Writes lines to a pty master on a monotonic schedule from a thread.

    rates: [(rate_hz, seconds)], played one after the other (the schedule stays continuous).
    packet_s: 0 writes each line when due; 0.001 writes what is due every 1 ms in one write,
    like USB full-speed CDC packets.
    """

    def __init__(self, master: int, rates: list[tuple[float, float]], length: int,
                 packet_s: float = 0.0, make=make_line) -> None:
        self.master, self.rates, self.length = master, rates, length
        self.packet_s, self.make = packet_s, make
        self.sent = 0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)

    def start(self) -> PacedBoard:
        self.thread.start()
        return self

    def due(self, elapsed: float) -> int:
        """Lines due `elapsed` s after the start by the schedule (the pace reference)."""
        count, begin = 0.0, 0.0
        for rate, seconds in self.rates:
            part = min(max(elapsed - begin, 0.0), seconds)
            count += part * rate
            begin += seconds
        return int(count)

    def _run(self) -> None:
        start = time.monotonic()
        total = sum(seconds for _, seconds in self.rates)
        while not self.stop.is_set():
            elapsed = time.monotonic() - start
            if elapsed >= total:
                return
            due = self.due(elapsed)
            if due > self.sent:
                data = b"".join(self.make(k, self.length) for k in range(self.sent, due))
                try:
                    view = memoryview(data)
                    while view:                       # blocks while the pty is full
                        view = view[os.write(self.master, view):]
                except OSError:
                    return
                self.sent = due
            step = self.packet_s or 0.0002
            time.sleep(step)


@pytest.fixture
def pty_pair():
    master, slave = os.openpty()
    yield master, slave
    for fd in (master, slave):
        try:
            os.close(fd)
        except OSError:
            pass


# (rate Hz, head start s, line bytes, 1 ms packets): a few representative cases
CASES = [
    (1000.0, 0.0, 10, False),
    (1000.0, 1.2, 80, True),
    (1000.0, 2.0, 200, True),
    (500.0, 1.0, 120, False),
]


@pytest.mark.parametrize("rate,head_start,length,packets", CASES)
def test_paced_board_with_a_head_start(pty_pair, tmp_path, rate, head_start, length,
                                       packets):
    master, slave = pty_pair
    board = PacedBoard(master, [(rate, head_start + 10.0)], length,
                       packet_s=0.001 if packets else 0.0).start()
    time.sleep(head_start)                           # the board talks before the port opens
    source = text_source(open_byte_source(os.ttyname(slave)))
    pipe = Pipeline(source)
    out = tmp_path / "paced.csv"
    pipe.submit(StartRecording(DeferredRecording(pipe, str(out), None, False)))
    pipe.start()
    try:
        time.sleep(3.0)
        status = pipe.status()
        time.sleep(1.0)
    finally:
        pipe.stop()
        board.stop.set()
        board.thread.join(2.0)
    assert status.rate_origin == "estimated" and status.chain_note is None
    assert status.rate_hz == pytest.approx(rate, rel=2e-3)         # 0.2 % after 3 s
    text = out.read_text()
    rec = read_recording(out)
    # the header's early figure: the backlog used to put it 13 to 34 % high
    assert rec.header.rate_origin == "estimated"
    assert rec.header.rate_hz == pytest.approx(rate, rel=2e-3)
    trailer = text.rstrip("\n").rsplit("\n", 1)[-1]
    assert trailer.startswith("# rate_hz_measured: ") and "(arrival, " in trailer
    assert rec.rate_origin == "trailer"
    assert rec.rate_hz == pytest.approx(rate, rel=5e-4)             # 0.05 % over the session


def test_rate_change_redesigns_the_chain_without_a_jump(pty_pair):
    from scipy import signal

    master, slave = pty_pair

    def load_line(k: int, length: int) -> bytes:
        # slow sine, parcel steps and deterministic noise (kg)
        x = 2.0 + np.sin(0.003 * k) + 4.0 * ((k // 1500) % 2) + 0.05 * np.sin(k * 2.39996)
        return f"{x:.6f}\n".encode()

    board = PacedBoard(master, [(1000.0, 3.5), (1010.0, 7.0)], 10, make=load_line)
    source = text_source(open_byte_source(os.ttyname(slave)), channels=("load",))
    spec = parse_chain('[[stage]]\nkind = "butterworth"\norder = 2\ncutoff_hz = 20.0\n'
                       'method = "tustin-prewarp"\n')
    sink = CaptureSink()
    pipe = Pipeline(source, chain_spec=spec, sink=sink)
    board.start()
    pipe.start()
    try:
        deadline = time.monotonic() + 10.0
        while time.monotonic() < deadline and not (
                pipe.status().rate_redesigns and pipe.status().rate_hz > 1007):
            time.sleep(0.1)
        time.sleep(0.8)                                       # let the swap settle
        status = pipe.status()
    finally:
        pipe.stop()
        board.stop.set()
        board.thread.join(2.0)
    assert status.rate_redesigns >= 1, "no redesign after a 1 % rate change"
    assert "sample rate moved from" in status.notice and "chain redesigned" in status.notice
    new_rate = pipe.chain.rate_hz
    assert new_rate == pytest.approx(1010.0, rel=2e-3)
    raw = np.concatenate([b for b, _ in sink.blocks])[:, 0]
    filtered = np.concatenate([f for _, f in sink.blocks])[:, 0]
    steps = np.abs(np.diff(filtered))
    for at in sink.changes:                                  # no jump at any swap
        assert steps[at - 1] <= 2.0 * steps[at - 101:at - 1].max() + 1e-12
    # after the last swap settles, the output is a filter designed at the new rate:
    # scipy.signal.butter at fs = new rate run by scipy.signal.sosfilt (the reference)
    last = sink.changes[-1]
    sos = signal.butter(2, 20.0, fs=new_rate, output="sos")
    ref, _ = signal.sosfilt(sos, raw[last:], zi=signal.sosfilt_zi(sos) * filtered[last - 1])
    settle = int(0.5 * new_rate)
    assert len(raw) - last > settle + 100
    np.testing.assert_allclose(filtered[last + settle:], ref[settle:], atol=1e-9)


class CaptureSink:
    """Keeps every block with its filtered values and where each rate change fell."""

    def __init__(self) -> None:
        self.blocks: list[tuple[np.ndarray, np.ndarray]] = []
        self.changes: list[int] = []
        self.rows = 0

    def write_block(self, block, filtered) -> None:
        self.blocks.append((block.values.copy(), filtered.copy()))
        self.rows += len(block)

    def write_gap(self, reason: str) -> None:
        pass

    def write_rate_change(self, rate_hz: float, origin: str, previous_hz: float) -> None:
        self.changes.append(self.rows)

    def close(self) -> None:
        pass


def test_unplug_during_a_fast_stream_keeps_rows_before_the_gap(tmp_path):
    link = str(tmp_path / "by-id-board")
    master, slave = os.openpty()
    os.symlink(os.ttyname(slave), link)

    def board_line(board: int):
        return lambda k, length: f"{board},{k},{2.0 + 0.001 * k:.4f}\n".encode()

    first = PacedBoard(master, [(4000.0, 30.0)], 0, packet_s=0.001, make=board_line(1))
    source = text_source(open_byte_source(link), channels=("board", "k", "load"))
    out = tmp_path / "unplug.csv"
    pipe = Pipeline(source, rate_hz=4000.0)
    pipe.submit(StartRecording(DeferredRecording(pipe, str(out), None, False)))
    first.start()
    pipe.start()
    second_fds: tuple[int, int] | None = None
    try:
        time.sleep(1.0)
        first.stop.set()
        first.thread.join(2.0)
        os.write(master, b"".join(board_line(1)(k, 0) for k in range(first.sent,
                                                                       first.sent + 400)))
        os.close(master)                                  # unplugged mid-stream
        os.close(slave)
        os.unlink(link)
        time.sleep(0.4)
        master2, slave2 = second_fds = os.openpty()
        os.symlink(os.ttyname(slave2), link)              # the same by-id name comes back
        second = PacedBoard(master2, [(4000.0, 30.0)], 0, packet_s=0.001,
                            make=board_line(2)).start()
        deadline = time.monotonic() + 6.0
        while time.monotonic() < deadline and pipe.status().gaps < 2:
            time.sleep(0.05)
        time.sleep(0.5)
        second.stop.set()
        second.thread.join(2.0)
    finally:
        pipe.stop()
        for fd in second_fds or ():
            os.close(fd)
    lines = out.read_text().splitlines()
    vanished = [i for i, line in enumerate(lines) if line.startswith("# gap: device vanished")]
    back = [i for i, line in enumerate(lines) if line.startswith("# gap: reconnected")]
    assert len(vanished) == 1 and len(back) == 1 and vanished[0] < back[0]
    rows = [(i, line.split(",")[1]) for i, line in enumerate(lines)
            if line and line[0].isdigit()]
    board1 = [i for i, b in rows if float(b) == 1]
    board2 = [i for i, b in rows if float(b) == 2]
    assert board1 and board2
    assert max(board1) < vanished[0], "rows received before the unplug sit after its gap"
    assert min(board2) > back[0]
    assert not [i for i, _ in rows if vanished[0] < i < back[0]]
