"""The column names a recording writes: the stream's own names, renamed where they would clash.

A recording's CSV header row is `t_host`, then the counter and device-time columns,
then the channels, then (with filtered output) `<channel>_filtered` per channel. A
stream may name its columns anything, so some names cannot stand as they are: the
reader (replay.reader) would refuse the file or take one column for another. The
rule, applied on write:

- characters a header line cannot hold (commas, which split the `# channels:` line,
  and control characters such as CR, NUL or a byte-order mark) become `_`; spaces
  around a name are dropped (the reader strips them); an empty channel name becomes
  `ch<index>` (the stream verbs' default names);
- a name that is `t_host` (the recording's own host-time column), that an earlier
  column already has, or that ends in `_filtered` beside a column named like its
  stem (the reader would take it for that column's filtered output) gets the
  suffix `_2`, else `_3`, ... : the first that no column of the recording has or
  had in the stream, and that no stream name `<it>_filtered` would take as its stem.
  A renamed name ends in a digit, so it never clashes again.

Every change is listed as a Rename; the writer puts each in the header as
`# renamed: "<stream name>" -> "<column name>" (<why>)`.

Pure: no I/O, nothing from monitor, so the writer and its tests can share it.
"""

from __future__ import annotations

from dataclasses import dataclass

HOST_TIME = "t_host"
FILTERED_SUFFIX = "_filtered"
RENAMED_KEY = "renamed"
_ESCAPES = {"\r": "\\r", "\n": "\\n", "\t": "\\t", '"': '\\"', "\\": "\\\\"}


def quoted(name: str) -> str:
    """`name` in double quotes, with quotes, backslashes and characters that do not print
    (CR, NUL, a byte-order mark) escaped as in JSON, so it stays on one visible line."""
    def escape(c: str) -> str:
        if c in _ESCAPES:
            return _ESCAPES[c]
        if c.isprintable():
            return c
        return f"\\u{ord(c):04x}" if ord(c) < 0x10000 else f"\\U{ord(c):08x}"
    return '"' + "".join(escape(c) for c in name) + '"'


@dataclass(frozen=True)
class Rename:
    """One stream name the recording writes under another name, and why (a phrase)."""

    original: str
    written: str
    reason: str

    def comment(self) -> str:
        """The header line, e.g. `# renamed: "t_host" -> "t_host_2" (t_host is ...)`."""
        return f"# {RENAMED_KEY}: {quoted(self.original)} -> {quoted(self.written)} ({self.reason})"

    def sentence(self) -> str:
        """For stderr: one sentence naming the stream's column and the recording's."""
        return (f"the stream's column {quoted(self.original)} is recorded as {self.written} "
                f"({self.reason})")


@dataclass(frozen=True)
class RecordingColumns:
    """The names a recording of one stream writes.

    counter_column, time_column: the written names of those columns, or None.
    channels:  written channel names, in stream order (as many as the schema has).
    columns:   the whole CSV header row: t_host, counter, time, channels, filtered.
    renames:   every name that differs from the stream's, in column order.
    """

    counter_column: str | None
    time_column: str | None
    channels: tuple[str, ...]
    columns: tuple[str, ...]
    renames: tuple[Rename, ...]


def _clean(name: str, fallback: str) -> tuple[str, list[str]]:
    """(name with commas and control characters as '_', stripped; reasons for changes)."""
    reasons = []
    kept = "".join(c if c.isprintable() and c != "," else "_" for c in name)
    if kept != name:
        reasons.append("a column name cannot hold commas or control characters")
    stripped = kept.strip()
    if stripped != kept and stripped:
        reasons.append("spaces around a name are not kept")
    if not stripped:
        reasons.append("the stream gave no name")
        stripped = fallback
    return stripped, reasons


def recording_columns(counter_column: str | None, time_column: str | None,
                      channels: tuple[str, ...] | list[str],
                      with_filtered: bool) -> RecordingColumns:
    """The written names for a stream's counter, device-time and channel names (see the
    module docstring for the rule); deterministic, so the same stream always gets the
    same file columns."""
    roles = ([("counter", counter_column)] if counter_column is not None else []) + \
        ([("time", time_column)] if time_column is not None else [])
    first_channel = len(roles)
    originals = [name for _, name in roles] + list(channels)
    names: list[str] = []
    why: list[list[str]] = []
    for i, name in enumerate(originals):
        cleaned, reasons = _clean(str(name), f"ch{i - first_channel}" if i >= first_channel
                                  else "col")
        names.append(cleaned)
        why.append(reasons)
    # a suffixed name must not take a name any column had in the stream, nor make another
    # stream name read as its filtered output
    claimed = {HOST_TIME, *names,
               *(n[:-len(FILTERED_SUFFIX)] for n in names if n.endswith(FILTERED_SUFFIX))}
    while True:
        channel_names = names[first_channel:]
        filtered = [f"{n}{FILTERED_SUFFIX}" for n in channel_names] if with_filtered else []
        present = {HOST_TIME, *names, *filtered}
        offender = None
        for i, name in enumerate(names):
            if name == HOST_TIME:
                offender = (i, f"{HOST_TIME} is the recording's own host-time column")
            elif name in names[:i]:
                offender = (i, "an earlier column of the recording has that name")
            elif name.endswith(FILTERED_SUFFIX) and name[:-len(FILTERED_SUFFIX)] in present:
                stem = name[:-len(FILTERED_SUFFIX)]
                offender = (i, f"it would read as the filtered output of {stem}")
            if offender:
                break
        if offender is None:
            break
        i, reason = offender
        names[i] = _fresh(names[i], claimed)
        claimed.add(names[i])
        why[i].append(reason)
    renames = tuple(Rename(str(originals[i]), names[i], "; ".join(why[i]))
                    for i in range(len(names)) if names[i] != originals[i])
    counter = names[0] if counter_column is not None else None
    time = names[first_channel - 1] if time_column is not None else None
    channel_names = tuple(names[first_channel:])
    filtered = tuple(f"{n}{FILTERED_SUFFIX}" for n in channel_names) if with_filtered else ()
    columns = (HOST_TIME, *names, *filtered)
    return RecordingColumns(counter, time, channel_names, columns, renames)


def _fresh(name: str, claimed: set[str]) -> str:
    """`name_2`, else `name_3`, ...: the first not in `claimed`."""
    k = 2
    while f"{name}_{k}" in claimed:
        k += 1
    return f"{name}_{k}"
