"""How a text board lays out its rows now, and how a later header line changes that.

The stream's columns are fixed at its start (monitor.decoding); the board may
still send a header line later: after a reset or reconnect, or after a reflash
that added, dropped or reordered columns. RowLayout keeps the delimiter and
width of the rows as they come now and where each of the stream's columns sits
in them, so that values always land under their own name:

- a repeat of the current header changes nothing;
- a header with the rows' width and delimiter that names the same columns in
  another order is followed at once: each value goes under its own name;
- a header of another width that shares a name with the stream's value columns
  and names its time and counter columns is followed by name from the first row
  of its width (a row of the old width first means the rows do not follow it:
  one bad frame). Each column then takes the field of its name; one the header
  lacks is NaN, a new one is not shown, and a warning says both;
- any other header line is one bad frame, and the rows go on as before. That
  includes a header of the rows' width with other names: by width alone the rows
  cannot show whether a column was renamed or the line was spoilt (junk glued to a
  header), and a spoilt line must cost one frame, not a column.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from monitor.counters import BadFrames
from monitor.text_header import detect_delimiter, is_number, split_fields, unique_names


@dataclass(frozen=True)
class Pending:
    """A header line of another width, waiting for the first row that follows it."""

    line: bytes
    delim: bytes | None
    width: int
    field_of: np.ndarray         # per stream column, its field in such rows (-1: none)
    names: list[str]
    cut: bool                    # it came as the cut line after a reconnect


class RowLayout:
    """The rows as the board sends them now -> the stream's columns.

    delim, width:  how today's rows split, and into how many fields.
    header:        the header line these rows follow (stripped), or None.
    known:         the stream's column names a later header is matched with.
    special:       indices of the time and counter columns (a header must name them).
    bad, warn:     where a refused header line is counted, where a change is told.
    """

    def __init__(self, delim: bytes | None, width: int, header: bytes | None,
                 known: Sequence[str], special: Sequence[int], bad: BadFrames,
                 warn: Callable[[str], None]) -> None:
        self.ncols = width
        self.header = header
        self.known = list(known)
        self.special = [self.known[i] for i in special]
        self.bad = bad
        self.warn = warn
        self.map: np.ndarray | None = None
        self.next: Pending | None = None
        self._set(delim, width)

    def _set(self, delim: bytes | None, width: int) -> None:
        self.delim = delim
        self.delim_text = delim.decode() if delim is not None else None
        self.width = width

    def split(self, line: bytes) -> list[bytes]:
        return split_fields(line, self.delim)

    def mapped(self, table: np.ndarray) -> np.ndarray:
        """(n, width) rows as sent now -> (n, columns) in the stream's order, NaN if absent."""
        if self.map is None:
            return table
        out = np.full((table.shape[0], self.ncols), np.nan)
        present = self.map >= 0
        out[:, present] = table[:, self.map[present]]
        return out

    def on_header(self, line: bytes, pairs: list[tuple[str, str]], cut: bool = False) -> bool:
        """A line of names after the columns are fixed. True when it was taken as a header
        (a repeat, followed, waiting, or counted bad); False: a cut line that is no header."""
        if line == self.header:
            return True
        names = unique_names([name for name, _ in pairs])
        shared = [n for n in names if n in self.known and n not in self.special]
        delim = detect_delimiter(line)
        same_shape = len(names) == self.width and delim == self.delim
        if (not shared or any(s not in names for s in self.special)
                or (same_shape and sorted(names) != sorted(self.known))):
            if cut:
                return False
            self.bad.add(line, f"a header line naming other columns ({', '.join(names)[:60]})")
            return True
        field_of = np.array([names.index(n) if n in names else -1 for n in self.known],
                            dtype=np.intp)
        pending = Pending(line, delim, len(names), field_of, names, cut)
        if same_shape:
            self.adopt(pending)
        else:
            self.next = pending
        return True

    def adopt(self, pending: Pending) -> None:
        """Follow `pending` from now on."""
        self.header = pending.line
        self._set(pending.delim, pending.width)
        self.next = None
        same = (pending.width == self.ncols
                and bool(np.all(pending.field_of == np.arange(self.ncols))))
        self.map = None if same else pending.field_of
        new = [n for n in pending.names if n not in self.known]
        gone = [n for n in self.known if n not in pending.names]
        if new:
            self.warn(f"the board's header now also names {', '.join(new)}: not shown; "
                      f"restart to see it")
        if gone:
            self.warn(f"the board's header no longer names {', '.join(gone)}: shown as "
                      f"missing samples")

    def adopt_if_first_row(self, line: bytes) -> bool:
        """Follow the waiting header when `line` is the first row of its width."""
        pending = self.next
        if pending is None:
            return False
        fields = split_fields(line, pending.delim)
        if len(fields) != pending.width or not all(is_number(f) for f in fields):
            return False
        self.adopt(pending)
        return True

    def rows_went_on(self) -> None:
        """A row of today's layout came after a waiting header: the rows do not follow it."""
        if self.next is not None:
            pending, self.next = self.next, None
            if not pending.cut:
                self.bad.add(pending.line, "a header line the rows do not follow")
