"""Read recordings (ours and plain CSV from other loggers) in chunks with bounded memory.

The file is read in byte chunks cut at line ends (about 1 MB each); each chunk
is parsed by numpy's C CSV parser. A chunk that does not parse is split in
halves until the bad rows are isolated, so one bad row costs a few extra
parses of its neighbourhood, never a Python loop over the whole file. Bad rows
are counted, comment lines `# gap: ...` are surfaced where they stand, a torn
last line is ignored and reported. The closing `# rate_hz_measured:` trailer is
read from the file's tail when the file opens; `rate()` prefers it to a header
rate that was only estimated early (a declared or device rate stays).

Odd bytes are read as the live path reads them (replay.textlines): LF, CRLF and
bare CR end lines, a leading UTF-8 byte-order mark is dropped, a line longer than
`max_line_bytes` is one bad row and is never held whole, a row with a NUL byte is
a bad row, binary or overlong lines before the header row are bad rows. Bytes that
are not UTF-8 make a row bad when they sit in a column of numbers; in a text column
of another logger's CSV they are kept exactly (apply writes them back byte for byte).
"""

from __future__ import annotations

import csv
import io
import os
import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import BinaryIO

import numpy as np

from monitor.block import Block, Schema
from replay.header import (
    MAX_HEADER_LINE,
    RecordingError,
    RecordingHeader,
    parse_rate_trailer,
    read_header,
    split_unit,
)
from replay.textlines import (
    Head,
    HeadError,
    is_text,
    iter_lines,
    last_line_end,
    normalize_line_ends,
    read_head,
    shown,
    size_text,
    split_lines,
)
from replay.timecolumn import find_time_column, match_override

__all__ = ["Gap", "NoTimeColumnError", "Recording", "RecordingError", "RecordingHeader",
           "Segment", "read_recording"]

CHUNK_BYTES = 1 << 20
MAX_DATA_LINE = 1 << 20       # a longer 'row' is counted bad and skipped
_SAMPLE_LINES = 50
_SAMPLE_BYTES = 1 << 20       # how far past the header row plain-CSV columns are sampled
# the decoding of data rows: bytes that are not UTF-8 survive as lone surrogates, so a
# text column of another logger's CSV is copied exactly and a number column refuses them
TEXT_ERRORS = "surrogateescape"


class NoTimeColumnError(RecordingError):
    """A plain CSV file has no time column and no rate was given; a caller that knows a
    fallback rate (a chain's rate_hz) opens the file again with it."""


@dataclass(frozen=True)
class Gap:
    """A `# gap: <reason>` line of the file; `row` is the index of the next data row."""

    reason: str
    row: int


@dataclass
class Segment:
    """Consecutive good data rows: the Block and, when asked for, their text lines."""

    block: Block
    lines: list[str] | None
    first_row: int


def _parses(text: str) -> bool:
    try:
        float(text.strip().strip('"'))
    except ValueError:
        return False
    return True


def _read_failed(path: str, exc: OSError) -> RecordingError:
    return RecordingError(f"{path} cannot be read ({exc.strerror or exc}); check the disk "
                          "or copy the file somewhere readable.")


def _open(path: str):
    try:
        if os.path.isdir(path):
            raise RecordingError(f"{path} is a directory; give the path of a recording file.")
        return open(path, "rb")
    except FileNotFoundError:
        raise RecordingError(f"{path} does not exist; check the recording's path.") from None
    except PermissionError:
        raise RecordingError(f"{path} cannot be read (permission denied); "
                             "fix its permissions or copy it somewhere readable.") from None
    except OSError as exc:
        raise _read_failed(path, exc) from None


class Recording:
    """A recording file opened for streaming.

    path:        the file (tunetrace recording or plain CSV with a header row).
    time_column: for plain CSV, the column holding time (else the first whose name the
                 shared rule of replay.timecolumn recognises: t, time, time_s, t_ms, ...).
    rate_hz:     the sample rate to use (overrides the header; required for plain CSV
                 without a time column, which then gets t_host = row / rate; without
                 it such a file raises NoTimeColumnError).
    chunk_rows:  at most this many rows per Block.
    chunk_bytes: bytes read per parse (memory per chunk).
    max_line_bytes: a longer line is one bad row, skipped without being held in memory
                 (default MAX_DATA_LINE).

    `header`, `schema` are known after construction; `bad_rows`, `torn_last_line`,
    `gaps` and `rows` grow while the file is read (final after one full pass).
    Raises RecordingError (one sentence) for a file that cannot be used.
    """

    def __init__(self, path: str | os.PathLike[str], time_column: str | None = None,
                 rate_hz: float | None = None, chunk_rows: int = 65536,
                 chunk_bytes: int = CHUNK_BYTES, max_line_bytes: int | None = None) -> None:
        if max_line_bytes is None:
            max_line_bytes = MAX_DATA_LINE
        if rate_hz is not None and not rate_hz > 0:
            raise RecordingError(f"--rate {rate_hz!r} must be a positive number of Hz.")
        if chunk_rows < 1 or chunk_bytes < 1 or max_line_bytes < 1:
            raise ValueError("chunk_rows, chunk_bytes and max_line_bytes must be at least 1")
        self.path = os.fspath(path)
        self.chunk_rows = chunk_rows
        self.chunk_bytes = chunk_bytes
        self.max_line_bytes = max_line_bytes
        self.rate_override = rate_hz
        self.bad_rows = 0
        self.last_bad_row: str | None = None
        self.torn_last_line = False
        self.gaps = 0
        self.rows = 0
        self.size_bytes = os.path.getsize(self.path) if os.path.isfile(self.path) else 0
        self._scanned_to = 0
        self._index: list[tuple[int, float, int]] = []  # (byte offset, first t, row number)
        try:
            self._read_head()
            self._setup_columns(time_column)
            self._t_first, self._rate_estimate = self._peek()
            if self.header.format_version:
                self._read_trailer()
        except OSError as exc:
            raise _read_failed(self.path, exc) from None

    # -- public ----------------------------------------------------------------

    @property
    def t_first(self) -> float:
        """t_host of the first data row (seconds)."""
        return self._t_first

    def duration_s(self) -> float | None:
        """Seconds from the first to the last row, read from the file's tail (no full pass);
        None for plain CSV without a time column."""
        if self._t_idx is None:
            return None
        with _open(self.path) as f:
            size = f.seek(0, os.SEEK_END)
            back = min(size - self._data_start, 1 << 16)
            f.seek(size - back)
            lines = split_lines(f.read(back))
        # the first piece may start mid-line, the last one is torn or empty
        whole = lines[1:-1] if size - back > self._data_start else lines[:-1]
        for raw in reversed(whole):
            line = raw.decode("utf-8", errors="replace").strip()
            if not line or line.startswith("#"):
                continue
            try:
                t = float(self._loadtxt([line])[0, self._t_idx]) * self.header.time_scale
            except ValueError:
                continue
            if np.isfinite(t):
                return max(0.0, t - self._t_first)
        return None

    def rate(self) -> tuple[float, str] | None:
        """(Hz, origin): --rate ("declared"); else ("recording") a declared or device rate
        of the header, else the closing trailer's rate measured over the whole session,
        else the header's early estimate; else estimated from the first rows."""
        if self.rate_override:
            return float(self.rate_override), "declared"
        h = self.header
        if h.rate_hz and h.rate_origin in ("declared", "device"):
            return float(h.rate_hz), "recording"
        if h.measured_rate_hz:
            return float(h.measured_rate_hz), "recording"
        if h.rate_hz:
            return float(h.rate_hz), "recording"
        if self._rate_estimate:
            return self._rate_estimate, "estimated"
        return None

    @property
    def rate_hz(self) -> float | None:
        """The sample rate `rate()` chooses (Hz), or None."""
        rate = self.rate()
        return rate[0] if rate else None

    @property
    def rate_origin(self) -> str | None:
        """Where rate_hz comes from: "declared" (--rate), "trailer" (measured over the
        session), "header" (the header's rate line, with its own origin in
        header.rate_origin), "estimated" (first rows), or None."""
        rate = self.rate()
        if rate is None or rate[1] != "recording":
            return rate[1] if rate else None
        h = self.header
        if h.rate_hz and h.rate_origin in ("declared", "device"):
            return "header"
        return "trailer" if h.measured_rate_hz else "header"

    def events(self, start_s: float = 0.0) -> Iterator[Block | Gap]:
        """Blocks of consecutive rows and Gap marks, in file order, from start_s seconds
        after the first row."""
        for item in self.segments(start_s):
            yield item.block if isinstance(item, Segment) else item

    def blocks(self, start_s: float = 0.0) -> Iterator[Block]:
        """The data as Blocks of at most chunk_rows rows (gap marks left out)."""
        for item in self.segments(start_s):
            if isinstance(item, Segment):
                yield item.block

    def segments(self, start_s: float = 0.0, keep_text: bool = False
                 ) -> Iterator[Segment | Gap]:
        """Segments (block + optional text lines) and Gap marks from start_s onwards."""
        t_start = self._t_first + start_s
        offset, row = self._data_start, 0
        if start_s > 0:
            for entry_offset, entry_t, entry_row in self._index:
                if entry_t > t_start:
                    break
                offset, row = entry_offset, entry_row
        started = start_s <= 0
        for item in self._scan(offset, row, keep_text):
            if isinstance(item, Segment) and not started:
                if item.block.t_host[-1] < t_start:
                    continue
                item = _tail(item, int(np.searchsorted(item.block.t_host, t_start)))
                started = True
            if started:
                yield item

    def progress(self) -> float:
        """Fraction of the file read by the furthest pass so far, 0..1."""
        return min(1.0, self._scanned_to / self.size_bytes) if self.size_bytes else 1.0

    # -- header ----------------------------------------------------------------

    def _read_head(self) -> None:
        """Comment lines and header row, read by the rules of replay.textlines (BOM, CR,
        binary lines skipped and counted) and parsed by replay.header."""
        with _open(self.path) as f:
            try:
                head = read_head(f, self.path, MAX_HEADER_LINE)
            except HeadError as exc:
                raise RecordingError(str(exc)) from None
        self._refuse_numbers_as_names(head)
        self.header, _ = read_header(io.BytesIO(head.text), self.path)
        self._data_start = head.data_start
        self.bad_rows = head.skipped
        self.last_bad_row = head.last_skipped

    def _refuse_numbers_as_names(self, head: Head) -> None:
        """A 'header row' of numbers is a data row: taking it for names would lose it."""
        row = head.text.decode("utf-8").rstrip("\n").rsplit("\n", 1)[-1]
        if not all(_parses(field) for field in re.split(r"[,;\t]", row)):
            return
        if head.skipped:
            raise RecordingError(
                f"{self.path} has no header row: {head.skipped} binary or overlong "
                f"line{'s' if head.skipped > 1 else ''} (over {size_text(MAX_HEADER_LINE)}) "
                "came before its first row of numbers; give a CSV file whose first line "
                "names its columns.")
        raise RecordingError(f"{self.path}: its first row holds numbers, not column names; "
                             "add a header row naming the columns (for example time,load).")

    def _setup_columns(self, time_column: str | None) -> None:
        """Which parsed column is time, which are channels, device time and counter."""
        h = self.header
        cols = list(h.columns)
        if h.format_version:
            channels, units = self._setup_ours(cols)
        else:
            channels, units = self._setup_plain(cols, time_column)
        position = {c: i for i, c in enumerate(cols if self._usecols is None
                                                 else [cols[i] for i in self._usecols])}
        self._value_idx = [position[c] for c in channels]
        self._tdev_idx = position.get(h.device_time_column) if h.device_time_column else None
        self._counter_idx = position.get(h.counter_column) if h.counter_column else None
        shown = channels if h.format_version else [split_unit(c)[0] for c in channels]
        self.schema = Schema(
            channels=tuple(shown),
            units=tuple(units.get(c, "") for c in channels),
            time_column=h.device_time_column if self._tdev_idx is not None else None,
            counter_column=h.counter_column if self._counter_idx is not None else None,
        )

    def _setup_ours(self, cols: list[str]) -> tuple[list[str], dict[str, str]]:
        """A tunetrace recording: t_host, device time, counter, channels, filtered columns."""
        h = self.header
        if "t_host" not in cols:
            raise RecordingError(f"{self.path} is a tunetrace recording without a "
                                 "t_host column; its header row is damaged.")
        h.time_column = "t_host"
        h.filtered_columns = tuple(c for c in cols if c.endswith("_filtered")
                                   and c[: -len("_filtered")] in cols)
        special = {"t_host", h.device_time_column, h.counter_column, *h.filtered_columns}
        channels = [c for c in cols if c not in special]
        units = dict(h.channels_units)
        self._usecols = None
        self._quote = None
        self._width = len(cols)
        self._t_idx = cols.index("t_host")
        return channels, units

    def _setup_plain(self, cols: list[str], time_column: str | None
                     ) -> tuple[list[str], dict[str, str]]:
        """Plain CSV: numeric columns are channels, one of them (or --rate) gives time."""
        h = self.header
        numeric = self._numeric_columns()
        if not numeric:
            skipped = (f" ({self.bad_rows} binary or overlong lines came before it)"
                       if self.bad_rows else "")
            raise RecordingError(f"{self.path}: no column under the header row holds "
                                 f"numbers{skipped}; give a CSV file with numeric columns.")
        names = [cols[i] for i in numeric]
        # which column is time: the rule shared by every verb (replay.timecolumn)
        if time_column is not None:
            if match_override(cols, time_column) is None:
                raise RecordingError(f"--time-column {time_column!r} is not a column of "
                                     f"{self.path}; its columns are {', '.join(cols)}.")
            if match_override(names, time_column) is None:
                raise RecordingError(f"--time-column {time_column!r} does not hold "
                                     "numbers; name a column of seconds or give --rate HZ.")
        found = find_time_column(names, time_column)
        if found is not None:
            h.time_column, h.time_scale = names[found[0]], found[1]
        if h.time_column is None and self.rate_override is None:
            raise NoTimeColumnError(f"{self.path} has no time column (t, time, t_s, "
                                    "timestamp, ...); name one with --time-column NAME or "
                                    "give the sample rate with --rate HZ.")
        h.ignored_columns = tuple(c for i, c in enumerate(cols) if i not in numeric)
        self._usecols = numeric if h.ignored_columns else None
        self._quote = '"'
        self._width = len(numeric)
        channels = [n for n in names if n != h.time_column]
        if not channels:
            raise RecordingError(f"{self.path} holds only a time column; it needs at "
                                 "least one column of readings.")
        self._t_idx = names.index(h.time_column) if h.time_column else None
        h.channels_units = tuple(split_unit(n) for n in channels)
        units = {n: split_unit(n)[1] for n in channels}
        return channels, units

    def _numeric_columns(self) -> list[int]:
        """Indices of plain-CSV columns that hold numbers in at least half of the first
        well-formed data rows (so one damaged first row does not make a column text)."""
        width = len(self.header.columns)
        rows: list[list[str]] = []
        widths: dict[int, int] = {}
        with _open(self.path) as f:
            for _, raw in iter_lines(f, self._data_start, MAX_HEADER_LINE, _SAMPLE_BYTES):
                if raw is None or not is_text(raw):
                    continue
                line = raw.decode("utf-8", errors=TEXT_ERRORS).strip()
                if not line or line.startswith("#"):
                    continue
                fields = next(csv.reader([line], delimiter=self.header.delimiter))
                if len(fields) != width:
                    widths[len(fields)] = widths.get(len(fields), 0) + 1
                    continue
                rows.append(fields)
                if len(rows) >= _SAMPLE_LINES:
                    break
        numeric = [i for i in range(width)
                   if rows and 2 * sum(_parses(row[i]) for row in rows) >= len(rows)]
        if numeric or (rows and not widths):
            return numeric
        if widths:          # rows of another width, none of the header's that holds numbers
            common = max(widths, key=widths.__getitem__)
            raise RecordingError(
                f"{self.path}: its header row names {width} column{'s' if width > 1 else ''} "
                f"but the rows under it have {common} field{'s' if common > 1 else ''}; "
                "fix the header row so it names every column.")
        raise RecordingError(f"{self.path} has no data rows with {width} fields under its "
                             "header row; give a file with at least one row of readings.")

    def _read_trailer(self) -> None:
        """Take the `# rate_hz_measured:` line if it is the file's last complete line (a
        torn one, without its newline, or one followed by rows is not trusted)."""
        with _open(self.path) as f:
            size = f.seek(0, os.SEEK_END)
            back = min(size - self._data_start, 4096)
            if back <= 0:
                return
            f.seek(size - back)
            tail = f.read(back)
        if not tail.endswith((b"\n", b"\r")):
            return
        pieces = split_lines(tail)
        last = (pieces[-2] if len(pieces) > 1 else b"").decode("utf-8", errors="replace")
        found = parse_rate_trailer(last)
        if found is not None:
            h = self.header
            h.measured_rate_hz, h.measured_method, h.measured_samples = found

    def _peek(self) -> tuple[float, float | None]:
        """t of the first row and a rate estimate from the first rows' spacing."""
        times: list[np.ndarray] = []
        count = 0
        for item in self._scan(self._data_start, 0, False):
            if isinstance(item, Segment):
                times.append(item.block.t_host)
                count += len(item.block)
                if count >= 4096:
                    break
        if not count:
            if not self.bad_rows:
                raise RecordingError(f"{self.path} has no data rows; record or export "
                                     "some readings first.")
            raise RecordingError(f"{self.path} has no data rows ({self.bad_rows} bad rows); "
                                 "check that its rows match its header row (the last bad "
                                 f"one: {shown(self.last_bad_row or '', 40)!r}).")
        t = np.concatenate(times)
        if self._t_idx is None:
            return float(t[0]), None
        # The mean spacing, not the median: host arrival times come in bursts (a USB
        # packet holds many rows), which biases the median step but not the span.
        t = t[np.isfinite(t)]
        span = float(t[-1] - t[0]) if t.size > 1 else 0.0
        return float(t[0]), ((t.size - 1) / span if span > 0 else None)

    # -- data ------------------------------------------------------------------

    def _scan(self, offset: int, row: int, keep_text: bool) -> Iterator[Segment | Gap]:
        """Segments and gaps from byte `offset` (a line start) where row number `row` begins."""
        with _open(self.path) as f:
            f.seek(offset)
            leftover = b""
            while True:
                try:
                    data = f.read(self.chunk_bytes)
                except OSError as exc:
                    raise _read_failed(self.path, exc) from None
                if not data:
                    yield from self._tail_line(leftover, row, keep_text, offset)
                    return
                data = leftover + data
                cut = last_line_end(data)
                leftover = data[cut:]
                if not cut:
                    if len(leftover) > self.max_line_bytes:   # not a CSV row: memory bounded
                        offset = self._skip_line(f, leftover, offset)
                        leftover = b""
                    continue
                start, offset = offset, offset + cut
                fresh = start >= self._scanned_to
                items = self._chunk(data[:cut].decode("utf-8", errors=TEXT_ERRORS),
                                    row, keep_text, fresh)
                segments = [item for item in items if isinstance(item, Segment)]
                if segments:
                    if fresh:
                        self._index.append((start, float(segments[0].block.t_host[0]), row))
                    row = segments[-1].first_row + len(segments[-1].block)
                if fresh:
                    self._scanned_to = offset
                    self.rows = row
                yield from items

    def _skip_line(self, f: BinaryIO, head: bytes, offset: int) -> int:
        """Count an overlong line as bad and read past its end (LF or CR) in bounded
        pieces; returns the next line's offset, where the file is left positioned."""
        fresh = offset >= self._scanned_to
        if fresh:
            self.bad_rows += 1
            self.last_bad_row = shown(head)
        offset += len(head)
        while True:
            try:
                piece = f.read(1 << 16)
            except OSError as exc:
                raise _read_failed(self.path, exc) from None
            end = min((i for i in (piece.find(b"\n"), piece.find(b"\r")) if i >= 0),
                      default=-1)
            if end < 0:
                offset += len(piece)
                if not piece:
                    if fresh:
                        self._scanned_to = max(self._scanned_to, offset)
                    return offset
                continue
            offset += end + 1            # a CR's LF, if any, starts the next line as blank
            f.seek(offset)
            if fresh:                    # counted once: a later pass starts past it
                self._scanned_to = max(self._scanned_to, offset)
            return offset

    def _tail_line(self, leftover: bytes, row: int, keep_text: bool, start: int
                   ) -> Iterator[Segment | Gap]:
        text = leftover.decode("utf-8", errors=TEXT_ERRORS)
        if not text.strip():
            return
        fresh = start >= self._scanned_to
        if self.header.format_version or text.startswith("#"):
            # Our writer ends every row with a newline: a last line without one was
            # cut by a crash and may hold a truncated number, so it is never trusted.
            if fresh:
                self.torn_last_line = True
            return
        items = self._chunk(text + "\n", row, keep_text, fresh=False)
        if items and isinstance(items[0], Segment):
            if fresh:
                self.rows = row + 1
                self._scanned_to = start + len(leftover)
            yield from items
        elif fresh:
            self.torn_last_line = True
            self._scanned_to = start + len(leftover)

    def _chunk(self, text: str, row: int, keep_text: bool, fresh: bool
               ) -> list[Segment | Gap]:
        """Parse complete lines (text ends with a line end) into Segments and Gaps."""
        text = normalize_line_ends(text)
        lines = text.split("\n")[:-1]
        limit = self.max_line_bytes
        suspect = "\x00" in text or (4 * len(text) > limit
                                     and 4 * max(map(len, lines), default=0) > limit)
        if not suspect and "#" not in text and "\n\n" not in text \
                and not text.startswith("\n"):
            return self._segment(lines, row, keep_text, fresh)
        items: list[Segment | Gap] = []
        run: list[str] = []
        for line in [*lines, "#"]:
            if suspect and (
                    "\x00" in line or (4 * len(line) > limit and len(line.encode(
                        "utf-8", errors=TEXT_ERRORS)) > limit)):
                self._count_bad(line, fresh)  # NUL padding or an overlong row
                continue
            if not line.startswith("#") and line.strip():
                run.append(line)
                continue
            if run:
                items.extend(self._segment(run, row, keep_text, fresh))
                row = items[-1].first_row + len(items[-1].block) if items and isinstance(
                    items[-1], Segment) else row
                run = []
            if line.startswith("# gap:"):
                if fresh:
                    self.gaps += 1
                items.append(Gap(shown(line[len("# gap:"):].strip()), row))
        return items

    def _count_bad(self, line: str, fresh: bool) -> None:
        if fresh:
            self.bad_rows += 1
            self.last_bad_row = shown(line)

    def _segment(self, lines: list[str], row: int, keep_text: bool, fresh: bool
                 ) -> list[Segment]:
        table, good = self._parse(lines)
        if self._t_idx is not None:
            finite = np.isfinite(table[:, self._t_idx])
            if not finite.all():            # a row without a usable time is a bad row
                kept = np.flatnonzero(finite)
                good = kept.tolist() if good is None else [good[i] for i in kept]
                table = table[finite]
        if good is not None:
            if fresh:
                # a whitespace-only line is blank, not bad (as in the live framer)
                bad = [i for i in sorted(set(range(len(lines))) - set(good))
                       if lines[i].strip()]
                self.bad_rows += len(bad)
                if bad:
                    self.last_bad_row = shown(lines[bad[-1]])
            lines = [lines[i] for i in good]
        return [
            Segment(self._block(table[begin:begin + self.chunk_rows], row + begin),
                    lines[begin:begin + self.chunk_rows] if keep_text else None, row + begin)
            for begin in range(0, table.shape[0], self.chunk_rows)
        ]

    def _block(self, table: np.ndarray, first_row: int) -> Block:
        if self._t_idx is None:
            # Plain CSV without a time column: t_host = row number / rate.
            t = np.arange(first_row, first_row + table.shape[0], dtype=np.float64)
            t /= float(self.rate_override)
        else:
            t = table[:, self._t_idx] * self.header.time_scale
        return Block(
            t_host=np.ascontiguousarray(t),
            values=np.ascontiguousarray(table[:, self._value_idx]),
            t_dev=None if self._tdev_idx is None else np.ascontiguousarray(
                table[:, self._tdev_idx]),
            counter=None if self._counter_idx is None else table[:, self._counter_idx].astype(
                np.int64),
        )

    def _loadtxt(self, lines: list[str]) -> np.ndarray:
        table = np.loadtxt(lines, delimiter=self.header.delimiter, comments=None,
                           usecols=self._usecols, quotechar=self._quote, ndmin=2,
                           dtype=np.float64)
        if table.shape != (len(lines), self._width):
            raise ValueError("wrong number of fields")
        if self._usecols is not None:
            # numpy ignores fields beyond the used columns: count them here (a line
            # with quotes may hold the delimiter inside a field and is let through)
            separators = len(self.header.columns) - 1
            delimiter = self.header.delimiter
            if any(line.count(delimiter) != separators and '"' not in line for line in lines):
                raise ValueError("wrong number of fields")
        return table

    def _parse(self, lines: list[str]) -> tuple[np.ndarray, list[int] | None]:
        """(table of good rows, indices of good lines or None when all are good)."""
        try:
            return self._loadtxt(lines), None
        except ValueError:
            pass
        if len(lines) <= 8:
            rows, good = [], []
            for i, line in enumerate(lines):
                try:
                    rows.append(self._loadtxt([line])[0])
                    good.append(i)
                except ValueError:
                    continue
            table = np.array(rows, dtype=np.float64).reshape(-1, self._width)
            return table, good
        mid = len(lines) // 2
        first, good_a = self._parse(lines[:mid])
        second, good_b = self._parse(lines[mid:])
        good_a = list(range(mid)) if good_a is None else good_a
        good_b = list(range(len(lines) - mid)) if good_b is None else good_b
        return np.vstack([first, second]), good_a + [mid + i for i in good_b]


def _tail(segment: Segment, start: int) -> Segment:
    b = segment.block
    block = Block(b.t_host[start:], b.values[start:],
                  None if b.t_dev is None else b.t_dev[start:],
                  None if b.counter is None else b.counter[start:])
    lines = None if segment.lines is None else segment.lines[start:]
    return Segment(block, lines, segment.first_row + start)


def read_recording(path: str | os.PathLike[str], time_column: str | None = None,
                   rate_hz: float | None = None, chunk_rows: int = 65536) -> Recording:
    """Open a recording for streaming; raises RecordingError (one sentence) if unusable."""
    return Recording(path, time_column=time_column, rate_hz=rate_hz, chunk_rows=chunk_rows)
