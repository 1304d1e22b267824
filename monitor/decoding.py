"""Text decoding: lines -> Block, with header detection, schema and device-time rate.

The first line fixes the delimiter (tab, semicolon, comma, else runs of
spaces) and the width. If its fields are not all numbers it is a header that
names the columns, `name[unit]` or `name [unit]`; otherwise the columns are
named by `channels` or ch0, ch1, ... A device time column (named by the caller,
else found by the shared rule of replay.timecolumn) and a counter column (named
by the caller) are taken out of the channels into Block.t_dev and
Block.counter. Bad lines (not UTF-8, wrong width, a field that is not a number,
a different header) are counted in `bad` with the newest kept; the stream goes on.

Speed: a batch of lines is parsed in one numpy.loadtxt call (numpy's C
parser); only when that fails are the lines checked one by one to find and
count the bad ones.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Sequence

import numpy as np

from monitor.arrival_rate import ArrivalRate as ArrivalRate  # moved; re-exported
from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.devicetime import DeviceClock, SequenceCounter
from replay.timecolumn import find_time_column, match_override, time_scale_of

_UNIT = re.compile(r"^(.*?)\s*\[\s*(.*?)\s*\]$")


def detect_delimiter(line: bytes) -> bytes | None:
    """The field delimiter of `line`: b"\\t", b";", b"," or None for runs of spaces."""
    for candidate in (b"\t", b";", b","):
        if candidate in line:
            return candidate
    return None


def parse_header_field(field: str, index: int) -> tuple[str, str]:
    """`name[unit]` or `name [unit]` -> (name, unit); an empty name becomes col<index>."""
    field = field.strip().strip('"').strip()
    match = _UNIT.match(field)
    name, unit = (match.group(1).strip(), match.group(2)) if match else (field, "")
    return (name or f"col{index}", unit)


def _space_header_fields(text: str) -> list[str]:
    """Split a space-separated header, keeping `name [unit]` together as one field."""
    fields: list[str] = []
    for token in text.split():
        if token.startswith("[") and fields and not fields[-1].endswith("]"):
            fields[-1] += " " + token
        else:
            fields.append(token)
    return fields


def _is_number(field: bytes) -> bool:
    if b"_" in field:              # Python's float() accepts 1_000; a board never sends it
        return False
    try:
        float(field)
    except ValueError:
        return False
    return True


class TextDecoder:
    """Turns text lines into Blocks.

    channels:       names for a stream without a header line (all columns, in order,
                    time and counter columns included); default ch0, ch1, ...
    time_column:    name of the device time column; without it a column the shared rule
                    recognises (t, time, time_s, t_ms, ... see replay.timecolumn) is
                    device time. Values in seconds, or in the unit its name carries.
    counter_column: name of the sequence counter column; gaps count as `dropped`.
    decode(frames, t_host) -> Block of the good lines, or None when none were good.
    """

    def __init__(self, channels: Sequence[str] | None = None, time_column: str | None = None,
                 counter_column: str | None = None, *, clock: DeviceClock | None = None,
                 sequence: SequenceCounter | None = None) -> None:
        if time_column is not None and time_column == counter_column:
            raise ValueError(f"time_column and counter_column are both {time_column!r}; "
                             f"give two different columns")
        self.names = tuple(channels) if channels else None
        self.time_column = time_column
        self.counter_column = counter_column
        self.schema: Schema | None = None
        self.bad = BadFrames()
        self.dropped = 0              # samples missing according to the counter column
        self.warning: str | None = None
        self._delim: bytes | None = None
        self._delim_text: str | None = None
        self._width = 0
        self._header: bytes | None = None
        self._value_cols: np.ndarray | None = None
        self._time_col: int | None = None
        self._time_scale = 1.0
        self._counter_col: int | None = None
        self._last_counter: int | None = None
        self._t_dev_steps: deque[float] = deque(maxlen=512)
        self._last_t_dev: float | None = None
        self.clock = clock            # unit and wraparound of the time column, if given
        self.sequence = sequence      # width and wraparound of the counter column, if given

    # -- public --------------------------------------------------------------

    def decode(self, frames: Sequence[bytes], t_host: float | np.ndarray) -> Block | None:
        """Decode lines. t_host: one arrival time (s) for all, or (len(frames),) float64."""
        if not frames:
            return None
        times = (np.full(len(frames), t_host, dtype=np.float64) if np.ndim(t_host) == 0
                 else np.asarray(t_host, dtype=np.float64))
        start = 0
        while self.schema is None and start < len(frames):
            if self._learn(frames[start]):
                start += 1
        if start:
            frames, times = frames[start:], times[start:]
        if not frames:
            return None
        table = self._parse_fast(frames)
        if table is None:
            table, keep = self._parse_checked(frames)
            times = times[keep]
        if table.shape[0] == 0:
            return None
        return self._block(table, times)

    def device_rate(self) -> float | None:
        """Sample rate from the device time column (Hz), or None before 8 steps are seen."""
        if len(self._t_dev_steps) < 8:
            return None
        step = float(np.median(np.fromiter(self._t_dev_steps, dtype=np.float64)))
        return 1.0 / step if step > 0 else None

    # -- schema --------------------------------------------------------------

    def _learn(self, line: bytes) -> bool:
        """Fix delimiter, width and names from the first decodable line.

        Returns True when the line is used up (a header or undecodable), False when
        it is data that still has to be decoded.
        """
        try:
            text = line.decode("utf-8")
        except UnicodeDecodeError:
            self.bad.add(line, "not UTF-8 text")
            return True
        delim = detect_delimiter(line)
        fields = line.split(delim)
        if all(_is_number(f) for f in fields):
            names = list(self.names or ())[: len(fields)]
            names += [f"ch{i}" for i in range(len(names), len(fields))]
            pairs = [(name, "") for name in names]
            is_header = False
        else:
            parts = text.split(delim.decode()) if delim else _space_header_fields(text)
            pairs = [parse_header_field(f, i) for i, f in enumerate(parts)]
            self._header = line.strip()
            is_header = True
        self._delim = delim
        self._delim_text = delim.decode() if delim is not None else None
        self._width = len(pairs)
        self._set_schema(pairs)
        return is_header

    def _set_schema(self, pairs: list[tuple[str, str]]) -> None:
        names: list[str] = []
        for name, _ in pairs:                     # channel names must be unique
            unique, n = name, 2
            while unique in names:
                unique, n = f"{name}_{n}", n + 1
            names.append(unique)
        pairs = [(name, unit) for name, (_, unit) in zip(names, pairs, strict=True)]
        missing = [(c, what) for c, what in ((self.time_column, "--time-column"),
                                             (self.counter_column, "--counter-column"))
                   if c and (c not in names if what == "--counter-column"
                             else match_override(names, c) is None)]
        if missing:
            column, what = missing[0]
            self.warning = (f"{what} {column!r} is not in the stream (columns: "
                            f"{', '.join(names)}); check the name")
        self._counter_col = (names.index(self.counter_column)
                             if self.counter_column in names else None)
        self._time_col, self._time_scale = self._find_time(pairs)
        special = {self._time_col, self._counter_col}
        cols = [i for i in range(len(pairs)) if i not in special]
        self._value_cols = np.array(cols, dtype=np.intp)
        self.schema = Schema(
            channels=tuple(pairs[i][0] for i in cols),
            units=tuple(pairs[i][1] for i in cols),
            time_column=pairs[self._time_col][0] if self._time_col is not None else None,
            counter_column=self.counter_column if self._counter_col is not None else None,
        )

    def _find_time(self, pairs: list[tuple[str, str]]) -> tuple[int | None, float]:
        """(column index, seconds per unit) of the device time column, by the rule every
        verb shares (replay.timecolumn): --time-column, else a recognised name."""
        labels = [f"{name} [{unit}]" if unit else name for name, unit in pairs]
        if self.time_column is not None:
            index = match_override([name for name, _ in pairs], self.time_column)
            found = None if index is None else (index, time_scale_of(labels[index]) or 1.0)
        else:
            candidates = [label if i != self._counter_col else "" for i, label in
                          enumerate(labels)]
            found = find_time_column(candidates)
        if found is None:
            return None, 1.0
        # with --time-unit the clock converts; otherwise the name's unit (t_ms) does
        return found[0], (1.0 if self.clock is not None else found[1])

    # -- parsing -------------------------------------------------------------

    def _split(self, joined: bytes) -> list[bytes]:
        return joined.split(self._delim) if self._delim is not None else joined.split()

    def _parse_fast(self, frames: Sequence[bytes]) -> np.ndarray | None:
        """(n, width) float64 when every line is well formed, else None.

        numpy.loadtxt's C parser checks that every row has the same width and every
        field is a number (it refuses 1_000, empty fields and non-ASCII bytes).
        """
        try:
            table = np.loadtxt(frames, dtype=np.float64, delimiter=self._delim_text,
                               comments=None, ndmin=2)
        except ValueError:
            return None
        return table if table.shape[1] == self._width else None

    def _parse_checked(self, frames: Sequence[bytes]) -> tuple[np.ndarray, np.ndarray]:
        """Line by line: the good rows and a boolean mask of which frames they were."""
        rows: list[list[float]] = []
        keep = np.zeros(len(frames), dtype=bool)
        for i, line in enumerate(frames):
            row = self._parse_line(line)
            if row is not None:
                rows.append(row)
                keep[i] = True
        table = np.array(rows, dtype=np.float64).reshape(len(rows), self._width)
        return table, keep

    def _parse_line(self, line: bytes) -> list[float] | None:
        try:
            line.decode("utf-8")
        except UnicodeDecodeError:
            self.bad.add(line, "not UTF-8 text")
            return None
        if self._header is not None and line.strip() == self._header:
            return None                                  # the board re-sent its header
        fields = self._split(line)
        if len(fields) != self._width:
            self.bad.add(line, f"{len(fields)} fields, expected {self._width}")
            return None
        for index, field in enumerate(fields):
            if not _is_number(field):
                shown = field.strip().decode("utf-8")[:20]
                reason = ("a different header line" if self._header is not None
                          and not any(_is_number(f) for f in fields)
                          else f"field {index + 1} {shown!r} is not a number")
                self.bad.add(line, reason)
                return None
        return [float(f) for f in fields]

    # -- output --------------------------------------------------------------

    def _block(self, table: np.ndarray, t_host: np.ndarray) -> Block:
        plain = self._time_col is None and self._counter_col is None
        values = table if plain else np.ascontiguousarray(table[:, self._value_cols])
        t_dev = counter = None
        if self._time_col is not None:
            t_dev = np.ascontiguousarray(table[:, self._time_col])
            if self._time_scale != 1.0:
                t_dev = t_dev * self._time_scale
            if self.clock is not None:
                t_dev = self.clock.unwrap(t_dev)
            self._note_device_time(t_dev)
        if self._counter_col is not None:
            counter = table[:, self._counter_col].astype(np.int64)
            if self.sequence is not None:
                counter = self.sequence.unwrap(counter)
                self.dropped = self.sequence.dropped
            else:
                self._note_counter(counter)
        return Block(t_host=t_host, values=values, t_dev=t_dev, counter=counter)

    def take_gaps(self) -> list[str]:
        """Counter holes and clock resets since the last call (with clock/sequence given)."""
        gaps = self.sequence.take_gaps() if self.sequence is not None else []
        return gaps + (self.clock.take_gaps() if self.clock is not None else [])

    def _note_counter(self, counter: np.ndarray) -> None:
        previous = self._last_counter
        steps = np.diff(counter) if previous is None else np.diff(counter, prepend=previous)
        self.dropped += int(np.sum(steps[steps > 1] - 1))   # steps <= 0: the board restarted
        self._last_counter = int(counter[-1])

    def _note_device_time(self, t_dev: np.ndarray) -> None:
        previous = self._last_t_dev
        steps = np.diff(t_dev) if previous is None else np.diff(t_dev, prepend=previous)
        self._t_dev_steps.extend(steps[steps > 0][-512:].tolist())
        self._last_t_dev = float(t_dev[-1])

