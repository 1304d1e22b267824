"""RecordingWriter: the crash-safe block sink that appends every raw sample to a CSV file.

File format (contract in DESIGN.md, "Recording file"): comment header lines,
the CSV header row `t_host,...`, then one row per sample; `# gap: <reason>`
lines where reconnects or drops happened; `# stopped: <reason>` when a size or
duration limit ended the recording; `# rate_hz_changed: <Hz> (<origin>, was <Hz>)`
where the live rate moved and the chain was redesigned; and, when it closes, the
trailer `# rate_hz_measured: <Hz> (arrival, <n> samples)`: the rate measured over
the whole recording from each block's arrival time (the time of its last row)
with monitor.arrival_rate, which readers prefer to an estimated header rate.

A recording may open before the rate is known (rows are never held back for it):
its header then reads `# rate_hz: unknown` followed by spaces that keep room for
the rate, and `rate_found` later writes the rate into that room in place (one
pwrite inside the first page, so a reader sees either line whole) and appends
`# rate_hz_found: <Hz> (<origin>)` where it became known. With filtered columns,
rows before that line carry raw values in them (the chain waits for the rate).
A file cut before the rate was known keeps `unknown`; readers then estimate the
rate from t_host or take --rate.

Column names come from the stream; replay.column_names renames those that would
clash (`t_host`, a repeated name, `x_filtered` beside `x`, ...) and the header
lists each as `# renamed: "<stream name>" -> "<column name>" (<why>)`.

Rows reach the operating system at most 100 ms after `write_block` returned: a
killed process loses nothing older (the kernel keeps written data even on
`kill -9`; only power loss needs the fsync done at `close`).
"""

from __future__ import annotations

import csv
import errno
import io
import os
import threading
import time
from datetime import UTC, datetime

import numpy as np

from monitor import __version__
from monitor.arrival_rate import ArrivalRate
from monitor.block import Block, Schema
from replay.column_names import RecordingColumns, Rename, recording_columns
from replay.csvtext import format_full_precision, format_rows, format_seconds, join_columns

MAGIC = "# tunetrace recording 1"
RATE_CHANGED_KEY = "rate_hz_changed"
RATE_MEASURED_KEY = "rate_hz_measured"
RATE_FOUND_KEY = "rate_hz_found"
RATE_LINE = "# rate_hz: "
# Room kept after `# rate_hz: ` when the rate is not known at open: the longest
# value, a float repr (24 characters) and " (estimated)", fits with some to spare.
RATE_ROOM = 40
FLUSH_INTERVAL_S = 0.1
# The background flusher wakes this long after the first unflushed row, well
# inside FLUSH_INTERVAL_S even when the machine is busy.
_FLUSHER_DELAY_S = 0.04
# Pending text larger than this is written at once, whatever the clock says.
_MAX_PENDING_BYTES = 1 << 20


class RecordingFull(OSError):
    """The size or duration limit was reached; the file is complete and closed.

    An OSError so that a pipeline stops recording and shows the message the
    same way as for a disk error; `RecordingWriter.full` tells the two apart.
    """


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def columns_of(schema: Schema, with_filtered: bool) -> RecordingColumns:
    """The names a recording of `schema` writes (clashing stream names renamed)."""
    return recording_columns(schema.counter_column or None, schema.time_column or None,
                             schema.channels, with_filtered)


def data_columns(schema: Schema, with_filtered: bool) -> list[str]:
    """Column names of a recording of `schema`, in file order."""
    return list(columns_of(schema, with_filtered).columns)


def rate_text(rate_hz: float, rate_origin: str | None) -> str:
    """The rate as a recording writes it: `250.0 (declared)`."""
    return f"{float(rate_hz)!r} ({_one_line(rate_origin or 'declared')})"


def header_text(
    schema: Schema,
    source_description: str,
    rate_hz: float | None,
    rate_origin: str | None,
    chain_text: str | None,
    with_filtered: bool,
    started: datetime | None = None,
    rate_room: bool = False,
) -> str:
    """The comment lines and CSV header row that open a recording.

    rate_room: when the rate is unknown, pad `# rate_hz: unknown` with spaces to
    RATE_ROOM characters so that RecordingWriter.rate_found can fill it in place.
    """
    started = started or datetime.now(UTC)
    names = columns_of(schema, with_filtered)
    channels = ", ".join(
        f"{name} [{_one_line(schema.unit(i))}]" if schema.unit(i).strip() else name
        for i, name in enumerate(names.channels)
    )
    rate = rate_text(rate_hz, rate_origin) if rate_hz else "unknown"
    if rate_room and not rate_hz:
        rate = rate.ljust(RATE_ROOM)
    lines = [
        MAGIC,
        f"# tool: tunetrace {__version__}",
        f"# started: {started.strftime('%Y-%m-%dT%H:%M:%SZ')}",
        f"# source: {_one_line(source_description)}",
        f"{RATE_LINE}{rate}",
        f"# channels: {channels}",
    ]
    if names.time_column:
        lines.append(f"# time_column: {names.time_column}")
    if names.counter_column:
        lines.append(f"# counter_column: {names.counter_column}")
    lines.extend(rename.comment() for rename in names.renames)
    for line in (chain_text or "").splitlines():
        lines.append(f"# chain: {line}".rstrip())
    row = io.StringIO()
    csv.writer(row, lineterminator="\n").writerow(names.columns)
    return "\n".join(lines) + "\n" + row.getvalue()


class RecordingWriter:
    """Block sink that appends every raw sample of a stream to a recording file.

    path:               the CSV file to create; an existing file is refused
                        (FileExistsError) unless force=True.
    schema:             channel names and units, device time and counter columns.
    source_description: e.g. "/dev/ttyACM0 @ 115200".
    rate_hz, rate_origin: the sample rate and how it was obtained
                        ("declared", "device", "estimated", "recording"), or None.
    chain_text:         the chain file at start (TOML), written as `# chain:` lines.
    with_filtered:      also write `<channel>_filtered` columns.
    limit_bytes, limit_seconds: stop cleanly once the file would grow beyond
                        this many bytes or the recording beyond this many seconds;
                        `write_block` then raises RecordingFull once.
    rate_to_come:       the rate is not known yet (rate_hz None) and the caller will
                        call `rate_found` once it is: the header keeps room for it.

    `renames` lists the stream names written under another name (replay.column_names).

    `write_block`, `write_gap` and `close` are called by one thread (the
    pipeline's reader); a small background thread only flushes. OSError from
    the disk propagates from the next call.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        schema: Schema,
        source_description: str,
        rate_hz: float | None,
        rate_origin: str | None,
        chain_text: str | None,
        force: bool = False,
        with_filtered: bool = False,
        limit_bytes: int | None = None,
        limit_seconds: float | None = None,
        rate_to_come: bool = False,
    ) -> None:
        if limit_bytes is not None and not limit_bytes > 0:
            raise ValueError(f"limit_bytes = {limit_bytes!r} must be a positive number of bytes")
        if limit_seconds is not None and not limit_seconds > 0:
            raise ValueError(f"limit_seconds = {limit_seconds!r} must be positive seconds")
        if not schema.channels:
            raise ValueError("schema has no channels; a recording needs at least one")
        self.path = os.fspath(path)
        self.schema = schema
        self.renames: tuple[Rename, ...] = columns_of(schema, with_filtered).renames
        self.with_filtered = with_filtered
        self.limit_bytes = limit_bytes
        self.limit_seconds = limit_seconds
        self.rows = 0
        self.bytes_written = 0
        self.full: str | None = None
        self._t0 = time.monotonic()
        self._t0_fixed = False
        self._pending: list[str] = []
        self._pending_bytes = 0
        self._dirty_since: float | None = None
        self._last_flush = time.monotonic()
        self._error: OSError | None = None
        self._failed = False
        self._closed = False
        self._cond = threading.Condition()
        self._arrival = ArrivalRate(live=False)     # the trailer's session rate
        header = header_text(schema, source_description, rate_hz, rate_origin, chain_text,
                             with_filtered, rate_room=rate_to_come)
        # where the rate goes when it is found (None: known at open, or no room kept)
        self._rate_at: int | None = None
        self._rate_pending = rate_to_come and not rate_hz
        if self._rate_pending:
            self._rate_at = len(header[:header.index(f"\n{RATE_LINE}") + 1
                                       + len(RATE_LINE)].encode("utf-8"))
        self._file = open(self.path, "wb" if force else "xb", buffering=0)
        try:
            self._write_now(header)
        except OSError:
            self._file.close()
            if not force:
                os.unlink(self.path)
            raise
        self._flusher = threading.Thread(target=self._flush_loop, name="recording-flush",
                                         daemon=True)
        self._flusher.start()

    # -- the block-sink contract -------------------------------------------------

    def write_block(self, block: Block, filtered: np.ndarray | None = None) -> None:
        """Append the rows of `block` (and `filtered` (n, channels) if with_filtered)."""
        if self.full or self._failed or self._closed or len(block) == 0:
            return
        if not self._t0_fixed:
            self._t0 = min(self._t0, float(block.t_host[0]))
            self._t0_fixed = True
        t_rel = np.asarray(block.t_host, dtype=np.float64) - self._t0
        floats = [np.asarray(block.values, dtype=np.float64)]
        if (self.schema.time_column and block.t_dev is None) or (
                self.schema.counter_column and block.counter is None):
            raise ValueError("the block lacks the device time or counter its schema names")
        if self.schema.time_column:
            floats.insert(0, np.asarray(block.t_dev, dtype=np.float64).reshape(-1, 1))
        filtered_text: list[str] = []
        if self.with_filtered:
            if filtered is None:
                raise ValueError("filtered values are required when with_filtered is set")
            filtered_text = format_full_precision(np.asarray(filtered, dtype=np.float64))
        counter = []
        if self.schema.counter_column:
            counter = format_rows(np.asarray(block.counter, dtype=np.int64).reshape(-1, 1))
        text_rows = join_columns(format_seconds(t_rel), counter,
                                 format_rows(np.hstack(floats)), filtered_text)
        stop = self._limit_cut(t_rel, text_rows)
        with self._cond:
            self._raise_pending_error()
            if stop is None:
                self._arrival.add(float(block.t_host[-1]), len(block))
                self._append(text_rows, len(block))
                if (self._pending_bytes > _MAX_PENDING_BYTES
                        or time.monotonic() - self._last_flush >= FLUSH_INTERVAL_S):
                    self._flush_or_fail()
                return
            kept_text, kept_rows, reason = stop
            if kept_rows:
                self._arrival.add(float(block.t_host[kept_rows - 1]), kept_rows)
            self._append(kept_text, kept_rows)
            self._append(f"# stopped: {reason}\n", 0)
            self.full = reason
        self.close()
        raise RecordingFull(f"{reason}; {self.path} is complete")

    def write_gap(self, reason: str) -> None:
        """Mark a reconnect or dropped frames at this point of the file; flushes."""
        if self.full or self._failed or self._closed:
            return
        with self._cond:
            self._raise_pending_error()
            self._append(f"# gap: {_one_line(reason)}\n", 0)
            self._arrival.restart()
            self._flush_or_fail()

    def write_rate_change(self, rate_hz: float, origin: str, previous_hz: float) -> None:
        """Mark that the rate moved to `rate_hz` (Hz, from `origin`) here; flushes."""
        if self.full or self._failed or self._closed:
            return
        with self._cond:
            self._raise_pending_error()
            self._append(f"# {RATE_CHANGED_KEY}: {float(rate_hz)!r} ({_one_line(origin)}, "
                         f"was {float(previous_hz)!r})\n", 0)
            self._flush_or_fail()

    def rate_found(self, rate_hz: float, origin: str) -> None:
        """The rate became known: fill the header's room (if kept) and mark this point of
        the file with `# rate_hz_found: <Hz> (<origin>)`; flushes. Later calls do nothing."""
        if not self._rate_pending or self.full or self._failed or self._closed \
                or not rate_hz > 0:
            return
        self._rate_pending = False
        text = rate_text(rate_hz, origin)
        with self._cond:
            self._raise_pending_error()
            at, self._rate_at = self._rate_at, None
            if at is not None and len(text) <= RATE_ROOM:
                try:
                    os.pwrite(self._file.fileno(), text.ljust(RATE_ROOM).encode("ascii"), at)
                except OSError as exc:
                    if exc.errno != errno.ESPIPE:       # a pipe keeps `unknown`; the line
                        self._failed = True             # below still says it
                        raise
            self._append(f"# {RATE_FOUND_KEY}: {text}\n", 0)
            self._flush_or_fail()

    def measured_rate(self) -> tuple[float, int] | None:
        """(Hz, samples) measured from arrival over the recording so far, or None."""
        session = self._arrival.session()
        return (session.rate_hz, self.rows) if session is not None else None

    def close(self) -> None:
        """Flush, fsync and close the file; idempotent. Raises an OSError not yet reported."""
        with self._cond:
            if self._closed:
                return
            self._closed = True
            self._cond.notify_all()
            try:
                if self._error is None and not self._failed:
                    measured = self.measured_rate()
                    if measured is not None:
                        self._pending.append(f"# {RATE_MEASURED_KEY}: {measured[0]:.6f} "
                                             f"(arrival, {measured[1]} samples)\n")
                    self._flush_locked()
                    os.fsync(self._file.fileno())
            except OSError as exc:
                self._error = exc
            finally:
                self._file.close()
            error, self._error = self._error, None
        self._flusher.join(timeout=1.0)
        if error is not None:
            raise error

    # -- internals ---------------------------------------------------------------

    def _limit_cut(self, t_rel: np.ndarray, text: str) -> tuple[str, int, str] | None:
        """None when the block fits the limits, else (text that fits, its rows, reason)."""
        keep = len(t_rel)
        reason = ""
        if self.limit_seconds is not None and t_rel[-1] > self.limit_seconds:
            keep = int(np.searchsorted(t_rel, self.limit_seconds, side="right"))
            reason = f"reached the duration limit of {self.limit_seconds:g} s"
        size = self.bytes_written + self._pending_bytes
        if self.limit_bytes is not None and size + len(text) > self.limit_bytes:
            lengths = np.cumsum([len(line) + 1 for line in text.split("\n")[:-1]])
            fit = int(np.searchsorted(lengths, self.limit_bytes - size, side="right"))
            if fit <= keep:
                keep = fit
                reason = f"reached the size limit of {self.limit_bytes} bytes"
        if not reason:
            return None
        lines = text.split("\n")[:keep]
        return ("\n".join(lines) + "\n" if keep else ""), keep, reason

    def _append(self, text: str, rows: int) -> None:
        if not text:
            return
        self._pending.append(text)
        self._pending_bytes += len(text)
        self.rows += rows
        if self._dirty_since is None:
            self._dirty_since = time.monotonic()
            self._cond.notify_all()

    def _write_now(self, text: str) -> None:
        data = memoryview(text.encode("utf-8"))
        while data:
            written = self._file.write(data)
            if not written:
                raise OSError(f"could not write to {self.path}")
            self.bytes_written += written
            data = data[written:]

    def _flush_locked(self) -> None:
        self._last_flush = time.monotonic()
        if not self._pending:
            return
        text = "".join(self._pending)
        self._pending.clear()
        self._pending_bytes = 0
        self._dirty_since = None
        self._write_now(text)

    def _flush_or_fail(self) -> None:
        try:
            self._flush_locked()
        except OSError:
            self._failed = True
            raise

    def _raise_pending_error(self) -> None:
        """Report an OSError the background flusher met, once; later calls do nothing."""
        if self._error is not None:
            error, self._error = self._error, None
            self._failed = True
            raise error

    def _flush_loop(self) -> None:
        with self._cond:
            while not self._closed:
                if self._dirty_since is None or self._error is not None:
                    self._cond.wait()
                    continue
                delay = self._dirty_since + _FLUSHER_DELAY_S - time.monotonic()
                if delay > 0:
                    self._cond.wait(delay)
                    continue
                try:
                    self._flush_locked()
                except OSError as exc:
                    self._error = exc


def open_error_sentence(exc: OSError, path: str, what: str = "recording") -> str:
    """One sentence for an OSError on `path`, naming what to fix."""
    if isinstance(exc, FileExistsError):
        return f"{path} already exists; choose another file or give --force to overwrite it."
    if isinstance(exc, IsADirectoryError):
        return f"{path} is a directory; give a file name for the {what}."
    if isinstance(exc, PermissionError):
        return f"permission denied writing {path}; choose a writable place for the {what}."
    if isinstance(exc, FileNotFoundError):
        return f"the folder of {path} does not exist; create it or choose another path."
    reason = (exc.strerror or str(exc)).rstrip(".")
    return f"writing the {what} {path} failed: {reason}; free space or choose another disk."
