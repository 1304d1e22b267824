"""The first lines of a text stream: a boot banner, a header, a line cut at connect.

Attacks, each on a real path: stdin through a real `tunetrace record -` subprocess,
real pseudo-terminals opened by pyserial, and a real TCP server on loopback read
through pyserial's socket:// handler. What each test expects is worked out from the
lines the board sent (which are rows, which is the header, which is text), never by
asking tunetrace:

- every row the board sent whole is recorded, exactly and in order;
- a banner before the numbers is one bad frame, not the header;
- a header the board sent whole names the channels, on every link;
- a line cut at connect is dropped when the rows show it is partial;
- a header arriving after a reconnect, or changed mid-stream, loses no row and never
  puts one channel's values under another channel's name.
"""

from __future__ import annotations

import csv
import io
import os
import socket
import subprocess
import sys
import threading
import time

import numpy as np
import pytest
from hostile_profile import hostile
from hypothesis import given
from hypothesis import strategies as st

from monitor.decoding import TextDecoder
from monitor.framed_source import text_source
from monitor.framing import TextFramer
from monitor.sources import RECONNECTING, open_byte_source

# -- helpers --------------------------------------------------------------------------------


def tunetrace(*args: str, stdin: bytes | None = None, timeout: float = 60.0):
    return subprocess.run([sys.executable, "-m", "monitor", *args], input=stdin,
                          capture_output=True, timeout=timeout)


def recorded(path) -> tuple[list[str], np.ndarray]:
    """(column names, (n, columns) float64) of a recording, read with the csv module."""
    text = open(path, encoding="utf-8").read()
    rows = list(csv.reader(io.StringIO("\n".join(
        line for line in text.splitlines() if not line.startswith("#")))))
    return rows[0], np.array(rows[1:], dtype=np.float64).reshape(len(rows) - 1, len(rows[0]))


def weigh_rows(n: int, width: int = 3, seed: int = 4) -> np.ndarray:
    """(n, width) weigh-station-like readings: load in kg, current in A, vibration in g."""
    rng = np.random.default_rng(seed)
    base = np.array([12.0, 1.2, 0.0, 20.0, 3.0][:width])
    return np.round(base + rng.normal(0, [0.05, 0.01, 0.02, 0.1, 0.1][:width], (n, width)), 4)


def as_lines(values: np.ndarray, end: bytes = b"\r\n") -> list[bytes]:
    return [b",".join(repr(float(v)).encode() for v in row) + end for row in values]


def read_rows(source, want: int, timeout: float = 15.0) -> np.ndarray:
    """Values of every block `source` gives until `want` rows came or `timeout` s passed."""
    got, end = [], time.monotonic() + timeout
    while sum(len(v) for v in got) < want and time.monotonic() < end:
        block = source.read_block(0.05)
        if block is not None:
            got.append(block.values)
    return np.vstack(got) if got else np.empty((0, 0))


class Pty:
    """A real pseudo-terminal behind a stable symlink, as udev's by-id names are."""

    def __init__(self, link: str) -> None:
        self.master, self.slave = os.openpty()
        self.link = link
        if os.path.lexists(link):
            os.unlink(link)
        os.symlink(os.ttyname(self.slave), link)

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            view = view[os.write(self.master, view):]

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass


class LoopbackBoard:
    """A TCP server on 127.0.0.1 that sends `data` to whoever connects, as a board behind a
    network bridge does from the moment the connection opens; socket://127.0.0.1:port."""

    def __init__(self, data: bytes) -> None:
        self.data = data
        self.server = socket.create_server(("127.0.0.1", 0))
        self.url = f"socket://127.0.0.1:{self.server.getsockname()[1]}"
        self.done = threading.Event()
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self) -> None:
        conn, _ = self.server.accept()
        with conn:
            conn.sendall(self.data)
            self.done.wait(30.0)          # keep the link up until the test is done

    def close(self) -> None:
        self.done.set()
        self.thread.join(5.0)
        self.server.close()


# -- a banner before the numbers ----------------------------------------------------------

BANNER = b"READY v1.2\r\n"


@pytest.mark.parametrize("channels", [("--channels", "a,b,c"), ()])
def test_a_banner_on_stdin_is_one_bad_frame_and_every_row_is_recorded(tmp_path, channels):
    values = weigh_rows(200)
    out = tmp_path / "banner.csv"
    result = tunetrace("record", "-", "-o", str(out), "--rate", "100", *channels,
                       stdin=BANNER + b"".join(as_lines(values)))
    assert result.returncode == 0, result.stderr.decode()
    assert b"Traceback" not in result.stderr
    names, table = recorded(out)
    assert names == ["t_host", *(["a", "b", "c"] if channels else ["ch0", "ch1", "ch2"])]
    np.testing.assert_array_equal(table[:, 1:], values)           # all 200, exactly
    assert "200 frames, 1 bad" in (result.stdout + result.stderr).decode()


def has_open(pid: int, path: str) -> bool:
    """Whether process `pid` holds `path` open (Linux /proc)."""
    try:
        fds = os.listdir(f"/proc/{pid}/fd")
    except OSError:
        return False
    for fd in fds:
        try:
            if os.readlink(f"/proc/{pid}/fd/{fd}") == path:
                return True
        except OSError:
            pass
    return False


def test_a_banner_after_a_line_end_over_a_pty_does_not_become_the_header(tmp_path):
    # the board's first bytes end a line, so its banner is a whole line: it must not name
    # the columns (it used to, and then every row was "a different header line")
    pty = Pty(str(tmp_path / "board"))
    values = weigh_rows(150)
    out = tmp_path / "pty.csv"
    proc = subprocess.Popen([sys.executable, "-m", "monitor", "record", pty.link, "-o",
                             str(out), "--channels", "a,b,c", "--rate", "100",
                             "--duration", "4"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    try:
        end = time.monotonic() + 20
        while not has_open(proc.pid, os.ttyname(pty.slave)) and time.monotonic() < end:
            time.sleep(0.02)
        time.sleep(0.5)              # pyserial flushes the input queue right after open
        pty.write(b"\r\n" + BANNER + b"".join(as_lines(values)))
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        proc.kill()
        pty.close()
    assert proc.returncode == 0, stderr.decode()
    names, table = recorded(out)
    assert names == ["t_host", "a", "b", "c"]
    np.testing.assert_array_equal(table[:, 1:], values)
    assert "150 frames, 1 bad" in (stdout + stderr).decode()


def test_the_banner_the_last_bad_frame_shows_is_the_banner():
    decoder = TextDecoder(channels=("a", "b", "c"))
    block = decoder.decode([b"READY v1.2", b"1,2,3", b"4,5,6"], 0.0)
    assert block.values.tolist() == [[1, 2, 3], [4, 5, 6]]
    assert decoder.bad.count == 1 and decoder.bad.last == b"READY v1.2"
    assert "not a header" in decoder.bad.last_reason or "field" in decoder.bad.last_reason


def test_a_number_banner_does_not_fix_the_width():
    # a firmware version printed alone ("1.2") is a row of one number; the rows have three
    decoder = TextDecoder()
    out = [decoder.decode([line], float(i)) for i, line in
           enumerate([b"1.2", b"12.5,1.2,0.01", b"12.6,1.3,0.02", b"12.7,1.1,0.0"])]
    rows = np.vstack([b.values for b in out if b is not None])
    assert rows.tolist() == [[12.5, 1.2, 0.01], [12.6, 1.3, 0.02], [12.7, 1.1, 0.0]]
    assert decoder.bad.count == 1 and decoder.bad.last == b"1.2"


# -- the first line after connect ----------------------------------------------------------

HEADER = b"load[kg],temp[C]"


def test_a_header_sent_first_over_socket_names_the_channels():
    values = weigh_rows(100, width=2)
    board = LoopbackBoard(HEADER + b"\r\n" + b"".join(as_lines(values)))
    source = text_source(open_byte_source(board.url), declared_rate=100.0)
    try:
        rows = read_rows(source, len(values))
    finally:
        source.close()
        board.close()
    assert source.schema.channels == ("load", "temp") and source.schema.units == ("kg", "C")
    np.testing.assert_array_equal(rows, values)
    assert source.bad.count == 0


def test_a_whole_first_row_over_socket_is_kept():
    values = weigh_rows(50, width=2)
    board = LoopbackBoard(b"".join(as_lines(values)))
    source = text_source(open_byte_source(board.url), declared_rate=100.0)
    try:
        rows = read_rows(source, len(values))
    finally:
        source.close()
        board.close()
    np.testing.assert_array_equal(rows, values)                 # the first row too


@pytest.mark.parametrize("cut", [b"2.031,0.41", b"031,0.412", b"kg],temp[C]", b"0.412"])
def test_a_line_cut_at_connect_is_dropped_not_recorded(cut):
    # the board was mid-line when the port opened: "12.031,0.412" arrived as its tail
    values = np.array([[12.031, 0.412], [12.035, 0.409], [12.027, 0.415]] * 10)
    board = LoopbackBoard(cut + b"\r\n" + HEADER + b"\r\n" + b"".join(as_lines(values)))
    source = text_source(open_byte_source(board.url), declared_rate=100.0)
    try:
        rows = read_rows(source, len(values))
        time.sleep(0.1)
        rows = np.vstack([rows, read_rows(source, 1, timeout=0.3).reshape(-1, 2)])
    finally:
        source.close()
        board.close()
    np.testing.assert_array_equal(rows, values)
    assert source.schema.channels == ("load", "temp")
    assert source.bad.count == 0            # a cut line is not the board's fault


def test_a_first_row_cut_in_its_first_field_is_dropped_over_a_pty(tmp_path):
    pty = Pty(str(tmp_path / "board"))
    values = np.array([[12.031, 0.412], [12.035, 0.409], [12.027, 0.415]] * 10)
    try:
        source = text_source(open_byte_source(pty.link), declared_rate=100.0)
        pty.write(b"5,0.412\r\n" + b"".join(as_lines(values)))   # the tail of 12.5,0.412
        rows = read_rows(source, len(values))
        source.close()
    finally:
        pty.close()
    np.testing.assert_array_equal(rows, values)


# -- reconnects and headers that change ----------------------------------------------------

def test_after_a_reconnect_the_header_and_a_cut_line_lose_no_row(tmp_path):
    link = str(tmp_path / "board")
    first = Pty(link)
    before = weigh_rows(40, width=2, seed=1)
    after = weigh_rows(40, width=2, seed=2)
    source = text_source(open_byte_source(link), declared_rate=100.0)
    second = None
    try:
        first.write(b"\r\n" + HEADER + b"\r\n" + b"".join(as_lines(before)) + b"12.5,0.4")
        got = read_rows(source, len(before))
        first.close()
        os.unlink(link)
        end = time.monotonic() + 5
        while source.byte_source.state != RECONNECTING and time.monotonic() < end:
            source.read_block(0.05)
        second = Pty(link)
        end = time.monotonic() + 5
        while source.byte_source.state != "connected" and time.monotonic() < end:
            source.read_block(0.05)
        # the board came back mid-line, then reset and sent its header again
        second.write(b"1,0.39\r\n" + HEADER + b"\r\n" + b"".join(as_lines(after)))
        got = np.vstack([got, read_rows(source, len(after))])
    finally:
        source.close()
        first.close()
        if second is not None:
            second.close()
    np.testing.assert_array_equal(got, np.vstack([before, after]))
    assert source.schema.channels == ("load", "temp")
    # the line the vanish cut off is one bad frame; the header again and the cut tail, none
    assert source.bad.count == 1 and source.bad.last == b"12.5,0.4"


def test_a_header_with_a_new_channel_keeps_the_old_channels_by_name(tmp_path):
    first = weigh_rows(30, width=2, seed=1)
    second = weigh_rows(30, width=3, seed=2)
    text = (HEADER + b"\n" + b"".join(as_lines(first, b"\n")) + b"temp[C],vib[g],load[kg]\n"
            + b"".join(as_lines(second, b"\n")))
    out = tmp_path / "reflashed.csv"
    result = tunetrace("record", "-", "-o", str(out), "--rate", "100", stdin=text)
    assert result.returncode == 0, result.stderr.decode()
    names, table = recorded(out)
    assert names == ["t_host", "load", "temp"]
    # after the new header the load column is its third field, temp its first
    expected = np.vstack([first, second[:, [2, 0]]])
    np.testing.assert_array_equal(table[:, 1:], expected)


def test_a_reordered_header_moves_the_values_with_their_names():
    decoder = TextDecoder()
    a = decoder.decode([b"load[kg],temp[C]", b"12.0,25.0", b"12.1,25.1"], 0.0)
    b = decoder.decode([b"temp[C],load[kg]", b"25.2,12.2"], 1.0)
    assert np.vstack([a.values, b.values]).tolist() == [[12.0, 25.0], [12.1, 25.1],
                                                        [12.2, 25.2]]
    assert decoder.bad.count == 0


def test_a_header_naming_other_columns_is_one_bad_frame_and_rows_go_on():
    decoder = TextDecoder()
    decoder.decode([b"load,temp", b"1,2", b"3,4"], 0.0)
    block = decoder.decode([b"hello,world", b"5,6"], 1.0)
    assert block.values.tolist() == [[5, 6]] and decoder.bad.count == 1
    assert decoder.schema.channels == ("load", "temp")


def test_a_line_of_names_the_rows_do_not_follow_changes_nothing():
    # a status line that shares a name with a column, and has another width
    decoder = TextDecoder(channels=None)
    decoder.decode([b"load temp", b"1 2", b"3 4"], 0.0)
    block = decoder.decode([b"load cell ok", b"5 6", b"7 8"], 1.0)
    assert block.values.tolist() == [[5, 6], [7, 8]] and decoder.bad.count == 1


# -- generated starts ----------------------------------------------------------------------

def _not_a_number(word: str) -> bool:
    try:
        float(word)
    except ValueError:
        return True
    return False


# text, never a number: "inf", "NaN" and "Infinity" are numbers to any float parser
words = st.text(st.sampled_from("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz_."),
                min_size=1, max_size=8).filter(_not_a_number)
banners = st.lists(words, min_size=1, max_size=4).map(" ".join).map(str.encode)
units = st.sampled_from(["", "kg", "A", "g", "C"])


@st.composite
def starts(draw):
    """(bytes, rows, names or None, banners): banners, maybe a header, then rows."""
    width = draw(st.integers(2, 5))
    n = draw(st.integers(2, 40))
    values = np.array(draw(st.lists(st.lists(st.floats(-1e6, 1e6, allow_nan=False),
                                             min_size=width, max_size=width),
                                    min_size=n, max_size=n)))
    names = None
    if draw(st.booleans()):
        names = [f"c{i}x{draw(words)}" for i in range(width)]
        header = ",".join(f"{name}[{draw(units)}]" for name in names).encode()
    lead = draw(st.lists(banners, max_size=5))
    end = draw(st.sampled_from([b"\n", b"\r\n", b"\r"]))
    data = b"".join(line + end for line in lead)
    if names is not None:
        data += header + end
    data += b"".join(as_lines(values, end))
    return data, values, names, lead


@hostile(100)
@given(start=starts(), cuts=st.lists(st.integers(1, 200), min_size=1, max_size=20))
def test_any_banners_before_any_header_keep_every_row_and_count_each_banner(start, cuts):
    data, values, names, lead = start
    framer, decoder = TextFramer(drop_partial_first=False), TextDecoder()
    got, pos, i = [], 0, 0
    while pos < len(data):
        chunk = data[pos:pos + cuts[i % len(cuts)]]
        pos, i = pos + len(chunk), i + 1
        block = decoder.decode(framer.feed(chunk), float(i))
        if block is not None:
            got.append(block.values)
    tail = decoder.decode(framer.flush(), float(i + 1))
    got += [tail.values] if tail is not None else []
    final = decoder.flush()
    got += [final.values] if final is not None else []
    np.testing.assert_array_equal(np.vstack(got), values)
    assert decoder.bad.count == len(lead)
    expected = names or [f"ch{k}" for k in range(values.shape[1])]
    assert list(decoder.schema.channels) == expected
