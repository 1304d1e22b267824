"""Binary frames -> Block: a `struct` layout, an optional trailing CRC, device time and counter.

The payload layout is a Python `struct` format with an explicit byte order
("<" little-endian, ">" or "!" big-endian), e.g. "<HI8f", and one name per
field it holds ("seq", "t_us", "ax[g]", ...; a unit may follow the name in
brackets as in text headers). Every frame of a call that has the right length
is decoded at once: the frames are joined, viewed as an (n, frame bytes)
uint8 array, checked against their CRC, and read through a numpy structured
dtype built from the layout, so the cost per frame is a few numpy operations
shared by the whole batch.

Caution: a CRC-16 lets through about one in 65536 randomly corrupted frames
and a counter cannot tell a lost frame from a board that skipped a sample;
data that feeds a control loop or a safety decision needs the checks of that
system and its standards, not this monitor's.
"""

from __future__ import annotations

import binascii
import re
import struct
from collections.abc import Sequence

import numpy as np

from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.crc import crc_algorithm, crc_rows
from monitor.devicetime import DeviceClock, DeviceTiming, SequenceCounter
from monitor.trackcheck import FrameGate, TrackCheck

# struct code -> (numpy kind, bytes); only fixed-size numeric codes.
_CODES: dict[str, tuple[str, int]] = {
    "b": ("i", 1), "B": ("u", 1), "?": ("u", 1), "h": ("i", 2), "H": ("u", 2),
    "i": ("i", 4), "I": ("u", 4), "l": ("i", 4), "L": ("u", 4), "q": ("i", 8),
    "Q": ("u", 8), "e": ("f", 2), "f": ("f", 4), "d": ("f", 8),
}
_TOKEN = re.compile(r"\s*(\d*)\s*([A-Za-z?])")
_NAME_UNIT = re.compile(r"^\s*([^\[\]]+?)\s*(?:\[\s*([^\]]*?)\s*\])?\s*$")


def parse_layout(layout: str) -> tuple[str, list[tuple[str, int, int]]]:
    """A struct format -> (byte order "little"|"big", [(numpy dtype str, offset, bytes)]).

    Raises ValueError naming the layout and what is wrong with it.
    """
    if not layout or layout[0] not in "<>!":
        raise ValueError(f"layout '{layout}' must start with < (little-endian) or > "
                         "(big-endian) so the byte order is explicit")
    from monitor.framing_binary import MAX_FRAME_BYTES

    # the frame size from the counts, before the fields are listed one by one below:
    # '<99999999f' would list 1e8 of them (2.8 GB)
    size, huge = 0, False
    for match in _TOKEN.finditer(layout[1:]):
        digits = match.group(1) or "1"
        huge = huge or len(digits) > 12
        size += int(digits[:12]) * _CODES.get(match.group(2), ("", 1))[1]
    if huge or size > MAX_FRAME_BYTES:
        frames = "over 10^12" if huge else str(size)
        raise ValueError(f"layout '{layout[:40]}' makes frames of {frames} bytes, more than "
                         f"the {MAX_FRAME_BYTES} allowed")
    order = "little" if layout[0] == "<" else "big"
    prefix = "<" if order == "little" else ">"
    body = layout[1:]
    items: list[tuple[str, int, int]] = []
    offset = 0
    pos = 0
    for match in _TOKEN.finditer(body):
        if match.start() != pos:
            break
        pos = match.end()
        count = int(match.group(1) or 1)
        code = match.group(2)
        if code == "x":
            offset += count
            continue
        if code not in _CODES:
            raise ValueError(f"layout '{layout}' uses '{code}'; allowed codes are x and "
                             f"{' '.join(_CODES)}")
        kind, size = _CODES[code]
        for _ in range(count):
            items.append((f"{prefix}{kind}{size}", offset, size))
            offset += size
    if body[pos:].strip():
        raise ValueError(f"layout '{layout}' cannot be read at '{body[pos:]}'")
    if not items:
        raise ValueError(f"layout '{layout}' holds no fields")
    if struct.calcsize(layout) != offset:  # struct itself is the judge of the size
        raise ValueError(f"layout '{layout}' has a size this decoder cannot mirror")
    return order, items


def split_name_unit(field: str) -> tuple[str, str]:
    """"load[kg]" or "load [kg]" -> ("load", "kg"); "seq" -> ("seq", "")."""
    match = _NAME_UNIT.match(field)
    if not match:
        raise ValueError(f"field name '{field}' cannot be read; use name or name[unit]")
    return match.group(1), match.group(2) or ""


def _check_bits(what: str, bits: int | None, field_bytes: int) -> None:
    """ValueError when a wrap width is wider than the field that carries it."""
    if bits is not None and bits > 8 * field_bytes:
        raise ValueError(f"{what} bits {bits} exceed the {8 * field_bytes}-bit field; "
                         f"allowed up to {8 * field_bytes}")


class BinaryDecoder:
    """Fixed-layout binary frames -> Block, with the decoder interface of DEVELOPERS.md.

    layout:        struct format of the payload, e.g. "<HI8f".
    fields:        one name per value in the layout (padding x has none).
    crc:           "none", "crc16-ccitt", "crc16-modbus" or "crc32": a checksum
                   over the payload sits after it (layout byte order; MODBUS
                   always low byte first) and is checked and stripped.
    time_field:    field holding the device time, in `time_unit` (s, ms, us;
                   required for integer fields, s for float fields), wrapping
                   at `time_bits` (16 or 32; default: the field's width for 16-
                   and 32-bit integer fields, else no wrap).
    counter_field: field holding the frame counter, wrapping at `counter_bits`
                   (8, 16 or 32; default: the field's width).
    The other fields are the channels, in layout order, as float64.
    Bad length and bad CRC are counted in `bad`; missing frames in `dropped`
    and, one line per hole, in `take_gaps()`. A device time or counter value that
    is NaN, inf or off its track for one frame is one bad frame too
    (monitor.trackcheck); such a frame at the end of a read waits for the next
    read's first frame to be judged, and `flush()` lets it go at the end.
    """

    def __init__(self, layout: str, fields: Sequence[str], *, crc: str = "none",
                 time_field: str | None = None, time_unit: str | None = None,
                 time_bits: int | None = None, counter_field: str | None = None,
                 counter_bits: int | None = None) -> None:
        order, items = parse_layout(layout)
        if len(fields) != len(items):
            raise ValueError(f"fields give {len(fields)} names but layout '{layout}' holds "
                             f"{len(items)} values; give one name per value")
        names, units = zip(*(split_name_unit(f) for f in fields), strict=True)
        if len(set(names)) != len(names):
            raise ValueError(f"fields {', '.join(names)} repeat a name; names must be unique")
        self.layout = layout
        self.byte_order = order
        self.crc = crc_algorithm(crc)
        self.payload_size = struct.calcsize(layout)
        self.frame_size = self.payload_size + (self.crc.size if self.crc else 0)
        self.bad = BadFrames()
        self._dtype = np.dtype({
            "names": [f"f{i}" for i in range(len(items))],
            "formats": [item[0] for item in items],
            "offsets": [item[1] for item in items],
            "itemsize": self.frame_size,
        })
        index = {name: i for i, name in enumerate(names)}
        self._time_index = self._field_index(index, time_field, "time field")
        self._counter_index = self._field_index(index, counter_field, "counter field")
        self.clock: DeviceClock | None = None
        self.counter: SequenceCounter | None = None
        if time_field is not None and time_field == counter_field:
            raise ValueError(f"time field and counter field are both '{time_field}'; "
                             "give two different fields")
        if self._time_index is not None:
            kind, size = items[self._time_index][0][1], items[self._time_index][2]
            if kind == "f":
                if time_bits is not None:
                    raise ValueError(f"time bits {time_bits} need an integer time field; "
                                     f"'{time_field}' is floating point")
            elif time_unit is None:
                raise ValueError(f"time field '{time_field}' holds integer ticks; give their "
                                 "unit: s, ms or us")
            _check_bits("time", time_bits, size)
            if time_bits is None and kind in "iu" and size * 8 in (16, 32):
                time_bits = size * 8
            self.clock = DeviceClock(time_unit or "s", time_bits)
        if self._counter_index is not None:
            kind, size = items[self._counter_index][0][1], items[self._counter_index][2]
            if kind not in "iu":
                raise ValueError(f"counter field '{counter_field}' must be an integer field")
            _check_bits("counter", counter_bits, size)
            self.counter = SequenceCounter(counter_bits or min(size * 8, 32))
        def whole(index: int | None) -> bool:      # an integer field holds no NaN
            return index is not None and items[index][0][1] in "iu"

        self._gate = FrameGate(
            TrackCheck(f"device time {time_field}",
                       2.0 ** self.clock.bits if self.clock.bits else None,
                       exact=whole(self._time_index))
            if self.clock is not None else None,
            TrackCheck(f"counter {counter_field}", 2.0 ** self.counter.bits, integer=True,
                       exact=True)
            if self.counter is not None else None)
        self._held: tuple[np.ndarray, list[bytes]] | None = None
        special = {self._time_index, self._counter_index}
        self._channel_fields = [f"f{i}" for i in range(len(items)) if i not in special]
        if not self._channel_fields:
            raise ValueError(f"fields {', '.join(names)} leave no channel besides time and counter")
        self.schema = Schema(
            channels=tuple(n for i, n in enumerate(names) if i not in special),
            units=tuple(u for i, u in enumerate(units) if i not in special),
            time_column=time_field, counter_column=counter_field)

    @staticmethod
    def _field_index(index: dict[str, int], name: str | None, option: str) -> int | None:
        if name is None:
            return None
        if name not in index:
            raise ValueError(f"{option} '{name}' is not one of the fields {', '.join(index)}")
        return index[name]

    @property
    def dropped(self) -> int:
        """Frames the counter says never arrived (0 without a counter field)."""
        return self.counter.dropped if self.counter else 0

    def take_gaps(self) -> list[str]:
        """Dropped-frame holes and clock resets since the last call, one line each."""
        gaps = self.counter.take_gaps() if self.counter else []
        if self.clock:
            gaps += self.clock.take_gaps()
        return gaps

    def timing(self) -> DeviceTiming | None:
        """Sample rate and jitter on the device clock (None without a time field)."""
        return self.clock.timing() if self.clock else None

    def device_rate(self) -> float | None:
        """Sample rate on the device clock (Hz), or None before 8 intervals are seen."""
        timing = self.timing()
        return timing.rate_hz if timing is not None and timing.intervals >= 8 else None

    def crc_ok(self, frame: bytes) -> bool:
        """Whether one frame has the right length and, if a CRC is set, a matching one."""
        if len(frame) != self.frame_size:
            return False
        if self.crc is None:
            return True
        sent = int.from_bytes(frame[self.payload_size:], self.crc.byte_order(self.byte_order))
        return self.crc.compute(frame[:self.payload_size]) == sent

    def decode(self, frames: Sequence[bytes], t_host: float) -> Block | None:
        """Frames of one read -> Block with one row per intact frame, or None.

        t_host: host monotonic time (s) the frames arrived, given to every row.
        """
        size = self.frame_size
        good = [f for f in frames if len(f) == size]
        if len(good) != len(frames):
            for frame in frames:
                if len(frame) != size:
                    self.bad.add(frame, f"{len(frame)} bytes, expected {size}")
        if not good and self._held is None:
            return None
        rows = np.frombuffer(b"".join(good), dtype=np.uint8).reshape(len(good), size)
        if self.crc is not None and good:
            ok = self._check_rows(good, rows)
            if not ok.all():
                for i in np.flatnonzero(~ok):
                    self.bad.add(good[i], "checksum mismatch")
                rows = rows[ok]
                good = [good[i] for i in np.flatnonzero(ok)]
        return self._rows_block(rows, good, t_host, final=False)

    def flush(self, t_host: float = 0.0) -> Block | None:
        """End of the stream: a frame held for the next frame's verdict is decided without it."""
        if self._held is None:
            return None
        return self._rows_block(np.empty((0, self.frame_size), dtype=np.uint8), [], t_host,
                                final=True)

    def _rows_block(self, rows: np.ndarray, frames: list[bytes], t_host: float,
                    final: bool) -> Block | None:
        if self._gate:
            rows, frames = self._gated(rows, frames, final)
        if rows.shape[0] == 0:
            return None
        records = rows.view(self._dtype).reshape(-1)
        n = records.shape[0]
        values = np.empty((n, len(self._channel_fields)), dtype=np.float64)
        for j, name in enumerate(self._channel_fields):
            values[:, j] = records[name]
        t_dev = counter = None
        if self.clock is not None:
            t_dev = self.clock.unwrap(records[f"f{self._time_index}"])
        if self.counter is not None:
            counter = self.counter.unwrap(records[f"f{self._counter_index}"])
        return Block(t_host=np.full(n, float(t_host)), values=values, t_dev=t_dev,
                     counter=counter)

    def _gated(self, rows: np.ndarray, frames: list[bytes], final: bool
               ) -> tuple[np.ndarray, list[bytes]]:
        """The frames whose time and counter are on track (monitor.trackcheck); a frame
        that left the track as the last of the read is held for the next read."""
        if self._held is not None:
            held_rows, held_frames = self._held
            self._held = None
            rows = np.vstack([held_rows, rows])
            frames = held_frames + frames
        if rows.shape[0] == 0:
            return rows, frames
        records = rows.view(self._dtype).reshape(-1)

        def column(index: int | None) -> np.ndarray | None:
            return None if index is None else records[f"f{index}"].astype(np.float64)

        verdict = self._gate.sort(column(self._time_index), column(self._counter_index), final)
        for index, reason in verdict.bad:
            self.bad.add(frames[index], reason)
        if verdict.hold_from < rows.shape[0]:
            cut = verdict.hold_from
            self._held = (rows[cut:].copy(), frames[cut:])
        elif verdict.keep.all():
            return rows, frames                  # the common case: no list to build
        return rows[verdict.keep], [f for f, k in zip(frames, verdict.keep, strict=True) if k]

    def _check_rows(self, frames: list[bytes], rows: np.ndarray) -> np.ndarray:
        """(n,) bool: which frames carry the CRC of their payload."""
        p = self.payload_size
        order = self.crc.byte_order(self.byte_order)
        tail = rows[:, p:].astype(np.uint32)
        weights = 256 ** np.arange(self.crc.size, dtype=np.uint32)
        sent = tail @ (weights if order == "little" else weights[::-1])
        if self.crc.name == "crc16-ccitt":
            got = np.fromiter((binascii.crc_hqx(f[:p], 0xFFFF) for f in frames),
                              dtype=np.uint32, count=len(frames))
        elif self.crc.name == "crc32":
            got = np.fromiter((binascii.crc32(f[:p]) for f in frames),
                              dtype=np.uint32, count=len(frames))
        else:
            got = crc_rows(self.crc.name, rows[:, :p])
        return got == sent
