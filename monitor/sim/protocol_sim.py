"""pyserial URL handler for `sim://`: the weigh-station board behind a serial port API.

URL options (all optional), e.g. `sim://?rate=250&seed=1&channels=3`:
  rate=HZ          sample rate, default 250
  seed=N           random seed, default 1
  channels=N       number of channels, default 3 (load, current, vib, load2, ...)
  format=F         text (CSV lines, default), cobs, slip or sync (binary frames)
  crc=C            binary frames only: none, crc16-ccitt (default), crc16-modbus, crc32
  header=0|1       text only: print the header line after the start banner, default 1
  seq=0|1          add a sequence counter column `seq`, default 0 (binary: always)
  clock=0|1        add a device time column `t_s` in seconds, default 0 (binary: always, us)
  pace=0|1         1 paces samples in real time (default); 0 floods as fast as read
  glitch=P         probability per line or binary frame of a corruption (bad-frame
                   practice: a broken line, or a flipped bit the CRC catches), default 0
  drop=P           probability per sample that the board loses it (counter gaps), default 0
  declare=0|1      1 (default): the board declares its rate (`declared_rate_hz`), as a
                   board whose firmware states it; 0: the rate must be measured

Writes to the port are accepted and ignored, as a board without a command
parser would. pyserial documents this mechanism: a package listed in
`serial.protocol_handler_packages` provides `protocol_<scheme>.Serial`.
"""

from __future__ import annotations

import threading
import time
import urllib.parse

import numpy as np
from serial.serialutil import PortNotOpenError, SerialBase, SerialException

from monitor.sim.weighstation import WeighStation, channel_names

FORMATS = ("text", "cobs", "slip", "sync")
_MAX_BUFFER = 1 << 20            # bytes kept ready; beyond it the board waits (flood mode)
_FLOOD_CHUNK = 2048              # samples generated per refill in flood mode


class SimOptions:
    """Parsed and validated `sim://` URL options (see the module docstring)."""

    def __init__(self, url: str) -> None:
        parts = urllib.parse.urlsplit(url)
        if parts.scheme != "sim":
            raise SerialException(f"expected a sim:// URL, got {url!r}")
        known = {"rate", "seed", "channels", "format", "crc", "header", "seq", "clock",
                 "pace", "glitch", "drop", "declare"}
        query = urllib.parse.parse_qs(parts.query, keep_blank_values=True)
        unknown = sorted(set(query) - known)
        if unknown:
            raise ValueError(f"unknown sim:// option {unknown[0]!r}; "
                             f"known options: {', '.join(sorted(known))}")

        def get(name: str, default: str) -> str:
            return query.get(name, [default])[-1]

        def number(name: str, default: str, cast, low, high):
            text = get(name, default)
            try:
                value = cast(text)
            except ValueError:
                raise ValueError(f"sim:// option {name}={text!r} must be a number") from None
            if not low <= value <= high:
                raise ValueError(f"sim:// option {name}={text} must be between {low} and {high}")
            return value

        self.rate_hz = number("rate", "250", float, 0.001, 1_000_000)
        self.seed = number("seed", "1", int, 0, 2**63 - 1)
        self.channels = number("channels", "3", int, 1, 64)
        self.format = get("format", "text")
        if self.format not in FORMATS:
            raise ValueError(f"sim:// option format={self.format!r} must be one of "
                             f"{', '.join(FORMATS)}")
        self.crc = get("crc", "crc16-ccitt")
        self.header = bool(number("header", "1", int, 0, 1))
        self.seq = bool(number("seq", "0", int, 0, 1))
        self.clock = bool(number("clock", "0", int, 0, 1))
        self.pace = bool(number("pace", "1", int, 0, 1))
        self.glitch = number("glitch", "0", float, 0.0, 1.0)
        self.drop = number("drop", "0", float, 0.0, 1.0)
        self.declare = bool(number("declare", "1", int, 0, 1))


class Serial(SerialBase):
    """A serial port whose far end is the simulated weigh-station board."""

    def __init__(self, *args, **kwargs) -> None:
        self._options: SimOptions | None = None
        self._board: WeighStation | None = None
        self._buffer = bytearray()
        self._lock = threading.Lock()
        self._emitted = 0
        self._t0 = 0.0
        super().__init__(*args, **kwargs)

    # -- pyserial's SerialBase hooks -------------------------------------
    def open(self) -> None:
        if self.is_open:
            raise SerialException("Port is already open.")
        if self._port is None:
            raise SerialException("Port must be configured before it can be used.")
        try:
            self._options = SimOptions(self.port)
        except ValueError as exc:
            raise SerialException(str(exc)) from None
        opts = self._options
        self._board = WeighStation(opts.rate_hz, opts.channels, opts.seed)
        self._rng_glitch = np.random.default_rng(opts.seed + 7)
        self._buffer = bytearray(self._banner())
        self._emitted = 0
        self._t0 = time.monotonic()
        self._reconfigure_port()
        self.is_open = True

    def close(self) -> None:
        self.is_open = False
        super().close()

    def _reconfigure_port(self) -> None:
        if not isinstance(self._baudrate, int) or not 0 < self._baudrate < 2**32:
            raise ValueError(f"invalid baudrate: {self._baudrate!r}")

    @property
    def in_waiting(self) -> int:
        if not self.is_open:
            raise PortNotOpenError()
        with self._lock:
            self._refill()
            return len(self._buffer)

    def read(self, size: int = 1) -> bytes:
        if not self.is_open:
            raise PortNotOpenError()
        deadline = None if self._timeout is None else time.monotonic() + self._timeout
        while True:
            with self._lock:
                self._refill()
                if self._buffer:
                    chunk = bytes(self._buffer[:size])
                    del self._buffer[:size]
                    return chunk
            if not self.is_open:
                return b""
            now = time.monotonic()
            if deadline is not None and now >= deadline:
                return b""
            wait = 1.0 / self._options.rate_hz
            if deadline is not None:
                wait = min(wait, deadline - now)
            time.sleep(max(wait, 0.0005))

    @property
    def declared_rate_hz(self) -> float | None:
        """The sample rate the board is configured with (Hz), unless declare=0."""
        opts = self._options
        return opts.rate_hz if opts is not None and opts.declare else None

    def write(self, data) -> int:
        if not self.is_open:
            raise PortNotOpenError()
        return len(data)

    def reset_input_buffer(self) -> None:
        with self._lock:
            self._buffer.clear()

    def reset_output_buffer(self) -> None:
        pass

    # -- the board -------------------------------------------------------
    def _banner(self) -> bytes:
        opts = self._options
        if opts.format != "text":
            return b""
        fields = []
        if opts.seq:
            fields.append("seq")
        if opts.clock:
            fields.append("t_s[s]")
        fields += [f"{name}[{unit}]" for name, unit in channel_names(opts.channels)]
        banner = b"\r\n"
        if opts.header:
            banner += (",".join(fields) + "\r\n").encode()
        return banner

    def _refill(self) -> None:
        """Generate the samples that are due (real-time pacing) or a flood chunk."""
        opts = self._options
        if opts.pace:
            due = int((time.monotonic() - self._t0) * opts.rate_hz) - self._emitted
            due = min(due, _FLOOD_CHUNK * 8)
        else:
            due = _FLOOD_CHUNK if len(self._buffer) < _MAX_BUFFER else 0
        if due <= 0:
            return
        values = self._board.generate(due)
        index = self._emitted + np.arange(due)
        self._emitted += due
        if opts.drop > 0:
            keep = self._rng_glitch.random(due) >= opts.drop
            values, index = values[keep], index[keep]
        if opts.format == "text":
            self._buffer += self._text_lines(values, index)
        else:
            from monitor.sim.binary import encode_samples

            t_us = (index * (1e6 / opts.rate_hz)).astype("int64")
            flip = self._rng_glitch.random(len(index)) < opts.glitch if opts.glitch else None
            self._buffer += encode_samples(values, index, t_us, opts.format, opts.crc, flip)

    def _text_lines(self, values, index) -> bytes:
        opts = self._options
        lines = []
        for i, row in zip(index.tolist(), values.tolist(), strict=True):
            fields = [f"{v:.5g}" if abs(v) >= 1000 else f"{v:.4f}" for v in row]
            if opts.clock:
                fields.insert(0, f"{i / opts.rate_hz:.6f}")
            if opts.seq:
                fields.insert(0, str(i))
            line = ",".join(fields)
            if opts.glitch and self._rng_glitch.random() < opts.glitch:
                cut = max(1, len(line) // 2)
                line = line[:cut] + ",#?" + line[cut:]
            lines.append(line)
        return ("\r\n".join(lines) + "\r\n").encode()
