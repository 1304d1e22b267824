"""Text decoding: lines -> Block, with header detection, schema and device-time rate.

The columns are fixed at the first data row (a line of numbers): its delimiter
(tab, semicolon, comma, else runs of spaces), its width, and the header line
before it if there is one; monitor.text_header has the rules (a boot banner
before the numbers is one bad frame, a line cut at connect is judged, not
thrown away). Columns are named by the header `name[unit]` or `name [unit]`,
else by `channels` (which also wins over a header's names; the header still
gives the units), else ch0, ch1, ... A device time column (named by the caller,
else found by the shared rule of replay.timecolumn) and a counter column (named
by the caller) are taken out of the channels into Block.t_dev and
Block.counter; monitor.trackcheck makes one bad value there one bad frame.

Later header lines (monitor.row_layout): a repeat is ignored; the same columns
in another order, or a header of a new width that rows of that width follow (a
board reflashed with a channel more), are followed by name; any other is one bad
frame and the rows go on as before. The schema never changes.

Bad lines (not UTF-8, wrong width, a field that is not a number) are counted in
`bad` with the newest kept; the stream goes on.

Speed: a batch of lines is parsed in one numpy.loadtxt call (numpy's C
parser); only when that fails are the lines checked one by one to find and
count the bad ones.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Sequence

import numpy as np

from monitor.arrival_rate import ArrivalRate as ArrivalRate  # moved; re-exported
from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.devicetime import DeviceClock, SequenceCounter
from monitor.row_layout import RowLayout
from monitor.text_header import (
    MAX_PENDING,
    Start,
    Waiting,
    cut_row_is_whole,
    data_shape,
    detect_delimiter,
    header_pairs,
    is_number,
    judge_start,
    unique_names,
)
from monitor.text_header import parse_header_field as parse_header_field  # re-exported
from monitor.trackcheck import FrameGate, TrackCheck
from replay.timecolumn import find_time_column, match_override, time_scale_of

# Bytes numpy.loadtxt (reading latin-1) takes for whitespace but float() does not: a read
# holding any goes to the line-by-line check, so a line's verdict never depends on the
# other lines that arrived with it.
_LOADTXT_ONLY_SPACE = bytes([0x1C, 0x1D, 0x1E, 0x1F, 0x85, 0xA0])


def _utf8(line: bytes) -> bool:
    try:
        line.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


class TextDecoder:
    """Turns text lines into Blocks.

    channels:       names of the columns (all, in order, time and counter columns
                    included); they win over a header's names; default: the header's,
                    else ch0, ch1, ...
    time_column:    name of the device time column; without it a column the shared rule
                    recognises (t, time, time_s, t_ms, ... see replay.timecolumn) is
                    device time. Values in seconds, or in the unit its name carries.
    counter_column: name of the sequence counter column; gaps count as `dropped`.
    decode(frames, t_host) -> Block of the good lines, or None when none were good.
    offer_cut(line, t_host): the bytes before the first line end after (re)connect.
    flush(t_host) -> Block | None: end of stream, rows held for a check let go.
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
        self.cut_lines: deque[bytes] = deque(maxlen=8)   # partial lines dropped at connect
        self._waiting: list[Waiting] = []    # lines before the first data row
        self._cut: Waiting | None = None     # a cut line after a reconnect, judged with rows
        self.layout: RowLayout | None = None  # today's rows -> the stream's columns
        self._value_cols: np.ndarray | None = None
        self._time_col: int | None = None
        self._time_scale = 1.0
        self._counter_col: int | None = None
        self._gate = FrameGate()
        self._held: tuple[np.ndarray, np.ndarray, list[bytes]] | None = None
        self._last_counter: int | None = None
        self._t_dev_steps: deque[float] = deque(maxlen=512)
        self._last_t_dev: float | None = None
        self.clock = clock            # unit and wraparound of the time column, if given
        self.sequence = sequence      # width and wraparound of the counter column, if given

    # -- public --------------------------------------------------------------

    def decode(self, frames: Sequence[bytes], t_host: float | np.ndarray) -> Block | None:
        """Decode lines. t_host: one arrival time (s) for all, or (len(frames),) float64."""
        return self._decode(frames, t_host, final=False)

    def flush(self, t_host: float = 0.0) -> Block | None:
        """End of the stream: rows held back for the next row's verdict are decided without it."""
        return self._decode([], t_host, final=True)

    def offer_cut(self, line: bytes, t_host: float) -> None:
        """The bytes before the first line end after the port opened or reopened: the tail
        of a line the board was in the middle of, or a whole line (text_header decides)."""
        if not line.strip():
            return
        item = Waiting(line, float(t_host), cut=True)
        if self.schema is None:
            self._wait(item)
        else:
            self._cut = item

    def device_rate(self) -> float | None:
        """Sample rate from the device time column (Hz), or None before 8 steps are seen."""
        if len(self._t_dev_steps) < 8:
            return None
        step = float(np.median(np.fromiter(self._t_dev_steps, dtype=np.float64)))
        return 1.0 / step if step > 0 else None

    def take_gaps(self) -> list[str]:
        """Counter holes and clock resets since the last call (with clock/sequence given)."""
        gaps = self.sequence.take_gaps() if self.sequence is not None else []
        return gaps + (self.clock.take_gaps() if self.clock is not None else [])

    # -- the flow of one read --------------------------------------------------

    def _decode(self, frames: Sequence[bytes], t_host: float | np.ndarray,
                final: bool) -> Block | None:
        frames = list(frames)
        times = (np.full(len(frames), t_host, dtype=np.float64) if np.ndim(t_host) == 0
                 else np.asarray(t_host, dtype=np.float64))
        if self.schema is None:
            frames, times = self._start(frames, times, final)
            if self.schema is None:
                return None
        elif self._cut is not None and frames:
            frames, times = self._judge_cut(frames, times)
        table, lines = np.empty((0, self.layout.ncols)), frames
        if frames:
            table = self._parse_fast(frames)
            if table is None:
                table, keep = self._parse_checked(frames)
                times = times[keep]
                lines = [frames[i] for i in np.flatnonzero(keep)]
            else:
                self.layout.rows_went_on()    # the rows went on as before any new header
        if self._gate:
            table, times = self._gated(table, times, lines, final)
        if table.shape[0] == 0:
            return None
        return self._block(table, times)

    def _wait(self, item: Waiting) -> None:
        self._waiting.append(item)
        if len(self._waiting) > MAX_PENDING:
            old = self._waiting.pop(0)
            if old.cut:
                self.cut_lines.append(old.line)
            else:
                self.bad.add(old.line, "text before the data that is not a header")

    # -- the start: which line names the columns -------------------------------

    def _start(self, frames: list[bytes], times: np.ndarray,
               final: bool = False) -> tuple[list[bytes], np.ndarray]:
        """Wait until the rows show the stream's shape: two rows of numbers with the same
        delimiter and width, or one of two fields or more after a header of its width
        (or, at the end of the stream, one alone). A lone number line such as a version
        `1.2` fixes nothing, and neither does one word and one number."""
        for i, line in enumerate(frames):
            shape = data_shape(line)
            if shape is None:
                if _utf8(line):
                    self._wait(Waiting(line, float(times[i])))
                else:
                    self.bad.add(line, "not UTF-8 text")
                continue
            twin = next((k for k, w in enumerate(self._waiting)
                         if not w.cut and data_shape(w.line) == shape), None)
            if twin is None and (shape[1] < 2 or not any(
                    not w.cut and (pairs := header_pairs(w.line.strip(), shape[0])) is not None
                    and len(pairs) == shape[1] for w in self._waiting)):
                self._wait(Waiting(line, float(times[i])))
                continue
            if twin is not None:
                return self._decide(twin, frames[i:], times[i:])
            self._waiting.append(Waiting(line, float(times[i])))
            return self._decide(len(self._waiting) - 1, frames[i + 1:], times[i + 1:])
        if final:
            first = next((k for k, w in enumerate(self._waiting)
                          if not w.cut and data_shape(w.line) is not None), None)
            if first is not None:
                return self._decide(first, [], times[:0])
        return [], times[:0]

    def _decide(self, first: int, rest: list[bytes], rest_times: np.ndarray
                ) -> tuple[list[bytes], np.ndarray]:
        """Fix the columns with waiting line `first` as the first data row; the lines to
        decode: a whole cut row, that row, the waiting lines after it, then `rest`."""
        before, row, after = (self._waiting[:first], self._waiting[first],
                              self._waiting[first + 1:])
        self._waiting = []
        following = [row.line] + [w.line for w in after if not w.cut] + rest
        start = judge_start(before, row.line, following)
        self._apply_start(start)
        for w in after:
            if w.cut:
                self.cut_lines.append(w.line)
        lead = start.rows + [row] + [w for w in after if not w.cut]
        return ([w.line for w in lead] + rest,
                np.concatenate([np.array([w.t_host for w in lead], dtype=np.float64),
                                rest_times]))

    def _apply_start(self, start: Start) -> None:
        for line, reason in start.bad:
            self.bad.add(line, reason)
        self.cut_lines.extend(start.cut)
        user = list(self.names or ())[:start.width]
        if start.pairs is not None:
            known = unique_names([name for name, _ in start.pairs])
            names = user + known[len(user):]
            units = [unit for _, unit in start.pairs]
            if user and user != known[:len(user)]:
                self._warn(f"the board's header names {', '.join(known)}; --channels names "
                           f"them {', '.join(unique_names(names))}")
        else:
            names = user + [f"ch{i}" for i in range(len(user), start.width)]
            units = [""] * start.width
            known = unique_names(names)
        self._set_schema(list(zip(names, units, strict=True)))
        special = [i for i in (self._time_col, self._counter_col) if i is not None]
        self.layout = RowLayout(start.delim, start.width, start.header, known, special,
                                self.bad, self._warn)

    def _warn(self, text: str) -> None:
        self.warning = text if not self.warning else f"{self.warning}; {text}"

    def _set_schema(self, pairs: list[tuple[str, str]]) -> None:
        names = unique_names([name for name, _ in pairs])       # channel names must be unique
        pairs = [(name, unit) for name, (_, unit) in zip(names, pairs, strict=True)]
        missing = [(c, what) for c, what in ((self.time_column, "--time-column"),
                                             (self.counter_column, "--counter-column"))
                   if c and (c not in names if what == "--counter-column"
                             else match_override(names, c) is None)]
        if missing:
            column, what = missing[0]
            self._warn(f"{what} {column!r} is not in the stream (columns: "
                       f"{', '.join(names)}); check the name")
        self._counter_col = (names.index(self.counter_column)
                             if self.counter_column in names else None)
        self._time_col, self._time_scale = self._find_time(pairs)
        special = {self._time_col, self._counter_col}
        cols = [i for i in range(len(pairs)) if i not in special]
        self._value_cols = np.array(cols, dtype=np.intp)
        time_name = pairs[self._time_col][0] if self._time_col is not None else None
        clock_bits = self.clock.bits if self.clock is not None else None
        self._gate = FrameGate(
            TrackCheck(f"device time {time_name}", 2.0 ** clock_bits if clock_bits else None)
            if time_name is not None else None,
            TrackCheck(f"counter {self.counter_column}",
                       2.0 ** self.sequence.bits if self.sequence is not None else None,
                       integer=True) if self._counter_col is not None else None)
        self.schema = Schema(
            channels=tuple(pairs[i][0] for i in cols),
            units=tuple(pairs[i][1] for i in cols),
            time_column=time_name,
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

    # -- later header lines and cut lines --------------------------------------

    def _judge_cut(self, frames: list[bytes], times: np.ndarray
                   ) -> tuple[list[bytes], np.ndarray]:
        """A cut line after a reconnect: a header, a whole row (kept first), or partial."""
        cut, self._cut = self._cut, None
        line = cut.line.strip()
        pairs = header_pairs(line, detect_delimiter(line))
        if line == self.layout.header or (
                pairs is not None and self.layout.on_header(line, pairs, cut=True)):
            return frames, times
        if cut_row_is_whole(cut.line, self.layout.delim, self.layout.width, frames):
            return [cut.line] + frames, np.concatenate([[cut.t_host], times])
        self.cut_lines.append(cut.line)
        return frames, times

    # -- parsing -------------------------------------------------------------

    def _parse_fast(self, frames: Sequence[bytes]) -> np.ndarray | None:
        """(n, columns) float64 when every line is well formed, else None.

        numpy.loadtxt's C parser checks that every row has the same width and every
        field is a number (it refuses 1_000, empty fields and non-ASCII bytes).
        """
        joined = b"".join(frames)
        if len(joined.translate(None, _LOADTXT_ONLY_SPACE)) != len(joined):
            return None         # the checked path's float() judges these lines alike
        try:
            table = np.loadtxt(frames, dtype=np.float64, delimiter=self.layout.delim_text,
                               comments=None, ndmin=2)
        except ValueError:
            return None
        return self.layout.mapped(table) if table.shape[1] == self.layout.width else None

    def _parse_checked(self, frames: Sequence[bytes]) -> tuple[np.ndarray, np.ndarray]:
        """Line by line: the good rows and a boolean mask of which frames they were."""
        rows: list[np.ndarray] = []
        keep = np.zeros(len(frames), dtype=bool)
        for i, line in enumerate(frames):
            row = self._parse_line(line)
            if row is not None:
                rows.append(row)
                keep[i] = True
        table = np.array(rows, dtype=np.float64).reshape(len(rows), self.layout.ncols)
        return table, keep

    def _parse_line(self, line: bytes) -> np.ndarray | None:
        if not _utf8(line):
            self.bad.add(line, "not UTF-8 text")
            return None
        layout = self.layout
        stripped = line.strip()
        if layout.header is not None and stripped == layout.header:
            return None                                  # the board re-sent its header
        fields = layout.split(line)
        if len(fields) != layout.width and layout.adopt_if_first_row(line):
            fields = layout.split(line)                  # the first row of a new header
        if len(fields) != layout.width or not all(is_number(f) for f in fields):
            pairs = header_pairs(stripped, detect_delimiter(stripped))
            if pairs is not None and layout.on_header(stripped, pairs):
                return None
            if len(fields) != layout.width:
                self.bad.add(line, f"{len(fields)} fields, expected {layout.width}")
                return None
            index = next(i for i, f in enumerate(fields) if not is_number(f))
            shown = fields[index].strip().decode("utf-8")[:20]
            self.bad.add(line, f"field {index + 1} {shown!r} is not a number")
            return None
        layout.rows_went_on()
        return layout.mapped(np.array([[float(f) for f in fields]]))[0]

    # -- output --------------------------------------------------------------

    def _gated(self, table: np.ndarray, times: np.ndarray, lines: Sequence[bytes],
               final: bool) -> tuple[np.ndarray, np.ndarray]:
        """Rows whose device time and counter are on track; a row whose value left the
        track as the last of a read waits for the next read (monitor.trackcheck)."""
        if self._held is not None:
            held_table, held_times, held_lines = self._held
            self._held = None
            table = np.vstack([held_table, table])
            times = np.concatenate([held_times, times])
            lines = held_lines + list(lines)
        if table.shape[0] == 0:
            return table, times
        verdict = self._gate.sort(
            table[:, self._time_col] if self._time_col is not None else None,
            table[:, self._counter_col] if self._counter_col is not None else None, final)
        for index, reason in verdict.bad:
            self.bad.add(lines[index], reason)
        if verdict.hold_from < table.shape[0]:
            cut = verdict.hold_from
            self._held = (table[cut:], times[cut:], list(lines[cut:]))
        return table[verdict.keep], times[verdict.keep]

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
            counter = table[:, self._counter_col].astype(np.int64)   # whole: trackcheck
            if self.sequence is not None:
                counter = self.sequence.unwrap(counter)
                self.dropped = self.sequence.dropped
            else:
                self._note_counter(counter)
        return Block(t_host=t_host, values=values, t_dev=t_dev, counter=counter)

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
