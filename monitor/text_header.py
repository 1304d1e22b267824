"""Which line of a text stream names its columns: the header rules.

A line is a header only if it looks like one and the rows follow it:

- it reads as names: every field, split the way the data rows are split, is a
  name (optionally `name[unit]` or `name [unit]`), none is a number, at least one
  is not empty, and no name holds a stray bracket (`kg],temp[C]` is the tail of
  a cut header, not a header);
- the first data row after it has as many fields as it names.

Everything before the first data row waits (at most MAX_PENDING lines). The first
data row decides: the newest waiting line that is a header of its width names the
columns; every other waiting line is one bad frame (a boot banner such as
`READY v1.2`, a line of names of another width). With `--channels` the user's names
win and a header of the right width still gives the units and is not counted bad.

The bytes before the first line end after a port opens (or reopens) may be the
tail of a line the board was in the middle of (monitor.framing keeps them apart
as the "cut" line). A cut line is kept when it is whole by every test the rows
allow: a header by the rules above, or a row of the stream's width whose first
field (the only field a cut can shorten without changing the width) is no
shorter than that of the rows after it. Otherwise it is a partial line: dropped,
not counted as bad (it is not the board's fault), kept in `TextDecoder.cut_lines`.
A cut that leaves a whole number of the same length (`2.5` of `12.5` where the
rows print `7.5`) cannot be told from a whole row; text has no checksum.

Pure: bytes in, decisions out; monitor.decoding applies them.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field

MAX_PENDING = 16           # lines held before the first data row; older ones count as bad
_FOLLOWING = 16            # rows after a cut line that its first field is compared with
_UNIT = re.compile(r"^(.*?)\s*\[\s*(.*?)\s*\]$")


def is_number(field: bytes) -> bool:
    """Whether a field is a number as a board writes one (float(), without 1_000)."""
    if b"_" in field:              # Python's float() accepts 1_000; a board never sends it
        return False
    try:
        float(field)
    except ValueError:
        return False
    return True


def detect_delimiter(line: bytes) -> bytes | None:
    """The field delimiter of `line`: b"\\t", b";", b"," or None for runs of spaces."""
    for candidate in (b"\t", b";", b","):
        if candidate in line:
            return candidate
    return None


def split_fields(line: bytes, delim: bytes | None) -> list[bytes]:
    return line.split(delim) if delim is not None else line.split()


def parse_header_field(field: str, index: int) -> tuple[str, str]:
    """`name[unit]` or `name [unit]` -> (name, unit); an empty name becomes col<index>."""
    field = field.strip().strip('"').strip()
    match = _UNIT.match(field)
    name, unit = (match.group(1).strip(), match.group(2)) if match else (field, "")
    return (name or f"col{index}", unit)


def space_header_fields(text: str) -> list[str]:
    """Split a space-separated header, keeping `name [unit]` together as one field."""
    fields: list[str] = []
    for token in text.split():
        if token.startswith("[") and fields and not fields[-1].endswith("]"):
            fields[-1] += " " + token
        else:
            fields.append(token)
    return fields


def header_pairs(line: bytes, delim: bytes | None) -> list[tuple[str, str]] | None:
    """(name, unit) of each field when `line` reads as names split by `delim`, else None."""
    try:
        text = line.decode("utf-8")
    except UnicodeDecodeError:
        return None
    if not text.isprintable():
        return None
    parts = text.split(delim.decode()) if delim is not None else space_header_fields(text)
    pairs, named = [], False
    for index, part in enumerate(parts):
        bare = part.strip().strip('"').strip()
        if bare and is_number(bare.encode()):
            return None
        name, unit = parse_header_field(part, index)
        if "[" in name or "]" in name or "[" in unit or "]" in unit:
            return None
        pairs.append((name, unit))
        named = named or bool(bare)
    return pairs if named else None


def data_shape(line: bytes) -> tuple[bytes | None, int] | None:
    """(delimiter, width) when `line` is UTF-8 and every field is a number, else None."""
    try:
        line.decode("utf-8")
    except UnicodeDecodeError:
        return None
    delim = detect_delimiter(line)
    fields = split_fields(line, delim)
    if not fields or not all(is_number(f) for f in fields):
        return None
    return delim, len(fields)


def unique_names(names: Sequence[str]) -> list[str]:
    """Names made unique in order: v, v -> v, v_2."""
    out: list[str] = []
    for name in names:
        unique, n = name, 2
        while unique in out:
            unique, n = f"{name}_{n}", n + 1
        out.append(unique)
    return out


def cut_row_is_whole(line: bytes, delim: bytes | None, width: int,
                     following: Sequence[bytes]) -> bool:
    """A cut line kept as data: all numbers, `width` fields, and a first field no shorter
    than the shortest first field of the rows that follow (the rows of the same read)."""
    fields = split_fields(line, delim)
    if len(fields) != width or not all(is_number(f) for f in fields):
        return False
    lengths = [len(split_fields(row, delim)[0].strip()) for row in following[:_FOLLOWING]
               if split_fields(row, delim)]
    return not lengths or len(fields[0].strip()) >= min(lengths)


@dataclass
class Waiting:
    """A line that came before the first data row (cut: the possibly partial first bytes)."""

    line: bytes
    t_host: float
    cut: bool = False


@dataclass
class Start:
    """What the first data row decided.

    delim, width: how rows are split and how many fields they have.
    header:       the header line chosen (stripped), or None; pairs: its (name, unit).
    rows:         waiting lines to decode as data before the first data row (a whole cut row).
    bad:          (line, reason) of each waiting line that is one bad frame.
    cut:          cut lines dropped as partial.
    """

    delim: bytes | None
    width: int
    header: bytes | None = None
    pairs: list[tuple[str, str]] | None = None
    rows: list[Waiting] = field(default_factory=list)
    bad: list[tuple[bytes, str]] = field(default_factory=list)
    cut: list[bytes] = field(default_factory=list)


def judge_start(waiting: Sequence[Waiting], first_row: bytes,
                following: Sequence[bytes]) -> Start:
    """Decide the header and the fate of every waiting line at the first data row.

    following: the first data row and the lines after it in the same read.
    """
    delim, width = data_shape(first_row) or (None, 0)
    start = Start(delim, width)
    chosen = None
    for index in range(len(waiting) - 1, -1, -1):
        pairs = header_pairs(waiting[index].line.strip(), delim)
        if pairs is not None and len(pairs) == width:
            chosen = index
            start.header, start.pairs = waiting[index].line.strip(), pairs
            break
    for index, item in enumerate(waiting):
        if index == chosen:
            continue
        if item.cut:
            if chosen is None and cut_row_is_whole(item.line, delim, width, following):
                start.rows.append(item)
            else:
                start.cut.append(item.line)
            continue
        if chosen is not None and index < chosen:
            reason = "text before the header"
        elif (shape := data_shape(item.line)) is not None:
            reason = (f"a row of {shape[1]} number{'s' if shape[1] != 1 else ''} before the "
                      f"rows of {width}")
        elif header_pairs(item.line.strip(), delim) is None:
            reason = "text before the data that is not a header"
        else:
            count = len(split_fields(item.line.strip(), delim))
            reason = (f"text before the data: {count} field{'s' if count != 1 else ''}, "
                      f"the rows have {width}")
        start.bad.append((item.line, reason))
    return start
