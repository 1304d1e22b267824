"""Byte sources over real pseudo-terminals opened by pyserial, stdin pipes and sim://."""

from __future__ import annotations

import errno
import os
import subprocess
import sys
import time

import pytest

from monitor.errors import UserError
from monitor.sources import (
    CONNECTED,
    ENDED,
    RECONNECTING,
    StdinSource,
    explain_open_error,
    open_byte_source,
)


def read_until(source, predicate, timeout=5.0) -> bytes:
    """Read from `source` until predicate(bytes so far) or timeout."""
    got = b""
    end = time.monotonic() + timeout
    while time.monotonic() < end and not predicate(got):
        got += source.read(0.05)
    return got


class Pty:
    """A real pseudo-terminal; `link` is a stable path like a udev by-id symlink."""

    def __init__(self, link: str) -> None:
        self.master, self.slave = os.openpty()
        self.path = os.ttyname(self.slave)
        self.link = link
        if os.path.lexists(link):
            os.unlink(link)
        os.symlink(self.path, link)

    def write(self, data: bytes) -> None:
        os.write(self.master, data)

    def vanish(self) -> None:
        os.close(self.master)
        os.close(self.slave)
        os.unlink(self.link)


@pytest.fixture
def pty(tmp_path):
    board = Pty(str(tmp_path / "board"))
    yield board
    for fd in (board.master, board.slave):
        try:
            os.close(fd)
        except OSError:
            pass


def test_pty_bytes_arrive_exactly(pty):
    src = open_byte_source(pty.link, 115200)
    assert src.state == CONNECTED
    payload = b"".join(b"%d,%d\n" % (i, i * i) for i in range(500))
    pty.write(payload)
    got = read_until(src, lambda b: len(b) >= len(payload))
    assert got == payload
    assert src.describe() == f"{pty.link} @ 115200"
    src.close()
    assert src.state == ENDED


def test_read_times_out_empty(pty):
    src = open_byte_source(pty.link)
    t0 = time.monotonic()
    assert src.read(0.1) == b""
    assert time.monotonic() - t0 < 2.0
    src.close()


def test_device_vanishes_and_returns(tmp_path):
    first = Pty(str(tmp_path / "board"))
    src = open_byte_source(first.link)
    first.write(b"1,2\n")
    assert read_until(src, lambda b: b.endswith(b"\n")) == b"1,2\n"
    first.vanish()
    read_until(src, lambda b: src.state == RECONNECTING, timeout=3.0)
    assert src.state == RECONNECTING
    gaps = src.take_gaps()
    assert len(gaps) == 1 and "vanished" in gaps[0]
    # still gone: retries fail quietly
    assert src.read(0.2) == b""
    second = Pty(str(tmp_path / "board"))
    try:
        read_until(src, lambda b: src.state == CONNECTED, timeout=5.0)
        assert src.state == CONNECTED
        assert any("reconnected" in g for g in src.take_gaps())
        second.write(b"3,4\n")
        assert read_until(src, lambda b: b.endswith(b"\n")) == b"3,4\n"
    finally:
        src.close()
        os.close(second.master)
        os.close(second.slave)


def test_vanish_without_reconnect_ends(tmp_path):
    board = Pty(str(tmp_path / "board"))
    src = open_byte_source(board.link, reconnect=False)
    board.vanish()
    read_until(src, lambda b: src.state == ENDED, timeout=3.0)
    assert src.state == ENDED
    assert "not reconnecting" in src.take_gaps()[0]


def test_missing_port_is_one_sentence(tmp_path):
    with pytest.raises(UserError) as err:
        open_byte_source(str(tmp_path / "ttyNOPE"))
    message = str(err.value)
    assert "does not exist" in message and "tunetrace ports" in message
    assert message.count(". ") == 0 and message.endswith(".")


def test_busy_port(pty):
    first = open_byte_source(pty.path)
    try:
        with pytest.raises(UserError, match="busy"):
            open_byte_source(pty.path)
    finally:
        first.close()


@pytest.mark.parametrize("baud", [0, -9600])
def test_bad_baud(pty, baud):
    with pytest.raises(UserError, match="baud rate"):
        open_byte_source(pty.link, baud)


def test_permission_sentence_from_real_oserror():
    # A real OSError as the OS raises it; as root no file can be made unreadable,
    # so the message mapping is checked on the exception object itself.
    exc = PermissionError(errno.EACCES, "Permission denied", "/dev/ttyUSB0")
    message = explain_open_error("/dev/ttyUSB0", 115200, exc)
    assert "no permission" in message and "dialout" in message


@pytest.mark.skipif(os.geteuid() == 0, reason="root can open any device file")
def test_permission_denied_real(tmp_path, pty):
    os.chmod(pty.path, 0)
    with pytest.raises(UserError, match="no permission"):
        open_byte_source(pty.path)


def test_unknown_scheme():
    with pytest.raises(UserError, match="not a source tunetrace knows"):
        open_byte_source("carrier-pigeon://coop")


def test_loop_url_goes_through_pyserial():
    src = open_byte_source("loop://")
    src._port.write(b"7,8\n")
    assert read_until(src, lambda b: b.endswith(b"\n")) == b"7,8\n"
    src.close()


def test_stdin_source_reads_until_eof():
    r, w = os.pipe()
    src = StdinSource(os.fdopen(r, "rb"))
    src.open()
    os.write(w, b"1,2\n3,4\n")
    os.close(w)
    got = read_until(src, lambda b: src.state == ENDED)
    assert got == b"1,2\n3,4\n"
    assert src.take_gaps() == ["end of input"]


def test_cli_bad_port_no_traceback(tmp_path):
    proc = subprocess.run(
        [sys.executable, "-m", "monitor", "live", str(tmp_path / "nope"), "--plain",
         "--duration", "1"],
        capture_output=True, text=True, timeout=30,
    )
    assert proc.returncode != 0
    assert "Traceback" not in proc.stderr
    assert "does not exist" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
