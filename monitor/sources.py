"""Byte sources: a serial device or any pyserial URL, stdin, or the sim:// board.

All of them sit behind one interface (see DEVELOPERS.md): `open()`, then
`read(timeout) -> bytes` from the one reader thread, `state`, `take_gaps()`,
`describe()`, `close()`. A device that vanishes never raises out of `read`:
the source turns to "reconnecting", retries with a growing backoff, and
records a gap for the recorder and the status line.
"""

from __future__ import annotations

import errno
import os
import select
import sys
import threading
import time

from monitor.errors import UserError

SIM_PACKAGE = "monitor.sim"
BACKOFF_FIRST_S = 0.1
BACKOFF_MAX_S = 2.0
READ_CHUNK = 65536

CONNECTING, CONNECTED, RECONNECTING, ENDED = "connecting", "connected", "reconnecting", "ended"


def register_sim_scheme() -> None:
    """Make pyserial's serial_for_url understand sim:// (its documented handler hook)."""
    import serial

    if SIM_PACKAGE not in serial.protocol_handler_packages:
        serial.protocol_handler_packages.append(SIM_PACKAGE)


def open_byte_source(source: str, baud: int = 115200, *, reconnect: bool = True) -> ByteSource:
    """Open `source` and return a connected byte source.

    source:    a device path (/dev/ttyACM0, COM3), any pyserial URL (socket://host:port,
               rfc2217://..., loop://), "-" for stdin, or sim://?rate=250&seed=1.
    baud:      line speed in baud (ignored by stdin and sim://).
    reconnect: keep trying when the device vanishes (True) or end the stream (False).
    Raises UserError with one sentence when the first open fails.
    """
    if source == "-":
        src: ByteSource = StdinSource()
    else:
        src = SerialSource(source, baud, reconnect=reconnect)
    src.open()
    return src


class ByteSource:
    """Common state and gap bookkeeping of every byte source."""

    is_stdin = False

    def __init__(self) -> None:
        self.state = CONNECTING
        self._gaps: list[str] = []
        self._gaps_lock = threading.Lock()

    def _add_gap(self, reason: str) -> None:
        with self._gaps_lock:
            self._gaps.append(reason)

    def take_gaps(self) -> list[str]:
        """Reasons of the gaps (vanish, reconnect) since the last call, oldest first."""
        with self._gaps_lock:
            gaps, self._gaps = self._gaps, []
        return gaps

    def open(self) -> None:  # pragma: no cover - interface
        raise NotImplementedError

    def read(self, timeout: float) -> bytes:  # pragma: no cover - interface
        raise NotImplementedError

    def close(self) -> None:  # pragma: no cover - interface
        raise NotImplementedError

    def describe(self) -> str:  # pragma: no cover - interface
        raise NotImplementedError


class SerialSource(ByteSource):
    """A serial device or pyserial URL, reopened with backoff when it vanishes.

    url:  device path or pyserial URL (sim:// included).
    baud: line speed in baud.
    """

    def __init__(self, url: str, baud: int = 115200, *, reconnect: bool = True) -> None:
        super().__init__()
        self.url = url
        self.baud = baud
        self.reconnect = reconnect
        self._port = None
        self._backoff = BACKOFF_FIRST_S
        self._next_try = 0.0
        self._lost_at = 0.0
        self._closed = False
        self._declared_rate: float | None = None

    def describe(self) -> str:
        if self.url.startswith("sim://"):
            return f"{self.url} (simulated weigh station)"
        return f"{self.url} @ {self.baud}"

    def declared_rate(self) -> float | None:
        """The rate the far end declares (Hz): the sim:// board does, a real port does not."""
        rate = getattr(self._port, "declared_rate_hz", None)
        if rate is not None:
            self._declared_rate = float(rate)      # kept while the port is away
        return self._declared_rate

    def _is_device_path(self) -> bool:
        return "://" not in self.url

    def _open_port(self):
        import serial

        register_sim_scheme()
        kwargs = {"baudrate": self.baud, "timeout": 0}
        if self._is_device_path() and os.name == "posix":
            kwargs["exclusive"] = True      # flock: a second opener is told the port is busy
        if not self.url.startswith("socket://"):
            return serial.serial_for_url(self.url, **kwargs)
        # pyserial's socket handler discards whatever arrived while it connected (its
        # open() ends with reset_input_buffer()). On a fresh TCP connection that is the
        # board's first line, often its header: keep it.
        port = serial.serial_for_url(self.url, do_not_open=True, **kwargs)
        port.reset_input_buffer = lambda: None
        try:
            port.open()
        finally:
            del port.reset_input_buffer
        return port

    def open(self) -> None:
        if not isinstance(self.baud, int) or isinstance(self.baud, bool) or self.baud <= 0:
            raise UserError(f"baud rate {self.baud!r} is not valid; give a positive whole "
                            f"number such as 115200.")
        try:
            self._port = self._open_port()
        except Exception as exc:  # pyserial raises SerialException, ValueError, OSError
            raise UserError(explain_open_error(self.url, self.baud, exc), exit_code=1) from None
        self.state = CONNECTED

    def read(self, timeout: float) -> bytes:
        if self._closed or self.state == ENDED:
            time.sleep(min(timeout, 0.05))
            return b""
        if self.state == RECONNECTING:
            return self._try_reconnect(timeout)
        try:
            return self._read_port(self._port, timeout)
        except Exception as exc:  # device vanished: EIO, USB unplug, socket closed
            if not self._closed:
                self._lost(exc)
            return b""

    @staticmethod
    def _read_port(port, timeout: float) -> bytes:
        """Whatever is ready, waiting up to `timeout` s for the first byte."""
        waiting = port.in_waiting
        if waiting:
            return port.read(min(waiting, READ_CHUNK))
        fd = getattr(port, "fd", None)
        if isinstance(fd, int):
            ready, _, _ = select.select([fd], [], [], timeout)
            if not ready:
                return b""
            # Readable with nothing waiting means the far end is gone (a closed pty
            # master, an unplugged USB device): pyserial's read then raises.
            return port.read(max(port.in_waiting, 1))
        # URL handlers without a file descriptor (socket://, sim://): pyserial waits.
        port.timeout = timeout
        try:
            first = port.read(1)
        finally:
            port.timeout = 0
        rest = port.in_waiting if first else 0
        return first + (port.read(min(rest, READ_CHUNK)) if rest else b"")

    def _lost(self, exc: BaseException) -> None:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        try:
            self._port.close()
        except Exception:
            pass
        self._port = None
        self._lost_at = time.monotonic()
        if self.reconnect:
            self.state = RECONNECTING
            self._backoff = BACKOFF_FIRST_S
            self._next_try = self._lost_at + self._backoff
            self._add_gap(f"device vanished ({reason})")
        else:
            self.state = ENDED
            self._add_gap(f"device vanished ({reason}); not reconnecting")

    def _try_reconnect(self, timeout: float) -> bytes:
        now = time.monotonic()
        if now < self._next_try:
            time.sleep(min(timeout, self._next_try - now))
            return b""
        try:
            self._port = self._open_port()
        except Exception:
            self._backoff = min(self._backoff * 2, BACKOFF_MAX_S)
            self._next_try = time.monotonic() + self._backoff
            return b""
        self.state = CONNECTED
        self._add_gap(f"reconnected after {time.monotonic() - self._lost_at:.1f} s")
        return b""

    def close(self) -> None:
        self._closed = True
        port, self._port = self._port, None
        if port is not None:
            try:
                port.close()
            except Exception:
                pass
        self.state = ENDED


class StdinSource(ByteSource):
    """Bytes piped to standard input; the stream ends at end of file."""

    is_stdin = True

    def __init__(self, stream=None) -> None:
        super().__init__()
        self._stream = stream or sys.stdin.buffer   # kept: closing it would close the fd
        self._fd = self._stream.fileno()

    def describe(self) -> str:
        return "stdin"

    def open(self) -> None:
        self.state = CONNECTED

    def read(self, timeout: float) -> bytes:
        if self.state == ENDED:
            time.sleep(min(timeout, 0.05))
            return b""
        ready, _, _ = select.select([self._fd], [], [], timeout)
        if not ready:
            return b""
        data = os.read(self._fd, READ_CHUNK)
        if not data:
            self.state = ENDED
            self._add_gap("end of input")
        return data

    def close(self) -> None:
        self.state = ENDED


def explain_open_error(url: str, baud: int, exc: BaseException) -> str:
    """One sentence saying why `url` could not be opened and what to do about it."""
    text = str(exc)
    low = text.lower()
    code = getattr(exc, "errno", None)
    if code is None and exc.args and isinstance(exc.args[0], int):
        code = exc.args[0]
    if "invalid baudrate" in low or "baud" in low and isinstance(exc, ValueError):
        return f"baud rate {baud} is not accepted by {url}; use a standard rate such as 115200."
    if "protocol" in low and "not known" in low or "invalid url" in low:
        return (f"'{url}' is not a source tunetrace knows; give a device path, a pyserial "
                f"URL (socket://, rfc2217://, loop://), - for stdin, or sim://.")
    if url.startswith("sim://"):
        return f"cannot start the simulated board: {text.rstrip('.')}."
    if code == errno.ENOENT or "no such file" in low or "could not find port" in low:
        return (f"serial port {url} does not exist; check the cable and run "
                f"'tunetrace ports' to list the ports on this machine.")
    if code in (errno.EACCES, errno.EPERM) or "permission denied" in low:
        return (f"no permission to open {url}; add your user to the group that owns it "
                f"(often 'dialout') and log in again.")
    if code == errno.EBUSY or "exclusively lock" in low or "busy" in low:
        return f"serial port {url} is busy: another program has it open; close that program."
    if "connection refused" in low or code == errno.ECONNREFUSED:
        return f"nothing is listening at {url}; start the server or check the address."
    return f"cannot open {url}: {text.splitlines()[0] if text else type(exc).__name__}."
