"""The header of a recording file: tunetrace metadata lines, or a plain CSV header row.

Contract (DESIGN.md, "Recording file"): `# tunetrace recording 1`, then
`# key: value` lines (tool, started, source, rate_hz, channels, time_column,
counter_column, chain), then the CSV header row. A recording may end with the
trailer `# rate_hz_measured: <Hz> (<method>, <n> samples)` (the rate measured
over the whole session, see replay.writer); `parse_rate_trailer` reads it. Plain
CSV from other loggers
has just the header row; units may be given as `name [unit]` or `name[unit]`.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field
from typing import BinaryIO

MAX_HEADER_LINE = 1 << 16
_UNIT_RE = re.compile(r"^\s*(.*?)\s*\[([^\]]*)\]\s*$")
_TRAILER_RE = re.compile(r"^# rate_hz_measured: (\S+) \((\w+), (\d+) samples\)$")


class RecordingError(ValueError):
    """A recording file cannot be used; the message is one sentence naming what to fix."""


@dataclass
class RecordingHeader:
    """What the header of a recording says.

    format_version: 1 for tunetrace recordings, None for plain CSV from other loggers.
    columns:        the CSV header row as written.
    rate_hz, rate_origin: the rate line of a tunetrace recording, else None.
    channels_units: (name, unit) pairs of the `# channels:` line (or the header row).
    chain_text:     the chain at start, joined from `# chain:` lines, or None.
    time_column:    the column that gives t_host (seconds x time_scale), or None (rows / rate).
    ignored_columns: columns skipped because they do not hold numbers.
    notes:          other comment lines of the header, without the leading '# '.
    measured_rate_hz, measured_method, measured_samples: the closing trailer (rate over
                    the whole session, e.g. method "arrival"), None when it is missing or torn.
    """

    format_version: int | None = None
    tool: str | None = None
    started: str | None = None
    source: str | None = None
    rate_hz: float | None = None
    rate_origin: str | None = None
    channels_units: tuple[tuple[str, str], ...] = ()
    chain_text: str | None = None
    columns: tuple[str, ...] = ()
    time_column: str | None = None
    time_scale: float = 1.0
    device_time_column: str | None = None
    counter_column: str | None = None
    filtered_columns: tuple[str, ...] = ()
    ignored_columns: tuple[str, ...] = ()
    delimiter: str = ","
    notes: list[str] = field(default_factory=list)
    measured_rate_hz: float | None = None
    measured_method: str | None = None
    measured_samples: int | None = None


def parse_rate_trailer(line: str) -> tuple[float, str, int] | None:
    """`# rate_hz_measured: 999.98 (arrival, 1234 samples)` -> (999.98, "arrival", 1234);
    None for anything else (a torn or damaged trailer included)."""
    match = _TRAILER_RE.match(line.rstrip("\r"))
    if match is None:
        return None
    try:
        rate = float(match.group(1))
    except ValueError:
        return None
    if not (rate > 0 and rate < float("inf")):
        return None
    return rate, match.group(2), int(match.group(3))


def parse_rate_value(value: str) -> tuple[float | None, str | None]:
    """The value of a `# rate_hz:` line -> (Hz, origin): `250.0 (declared)` ->
    (250.0, "declared"); `unknown` (the rate was not known when the file opened; the
    writer may leave spaces after it) and anything that is not a finite rate > 0 ->
    (None, None)."""
    number, _, origin = value.strip().partition(" ")
    try:
        rate = float(number)
    except ValueError:
        return None, None
    if not (0 < rate < float("inf")):
        return None, None
    return rate, origin.strip("() ") or None


def split_unit(name: str) -> tuple[str, str]:
    """'load [kg]' or 'load[kg]' -> ('load', 'kg'); no brackets -> (name, '')."""
    match = _UNIT_RE.match(name)
    return (match.group(1), match.group(2).strip()) if match else (name.strip(), "")


def read_header(f: BinaryIO, path: str) -> tuple[RecordingHeader, int]:
    """Parse the comment lines and header row of an open file; (header, offset of the data)."""
    header = RecordingHeader()
    chain: list[str] = []
    first = True
    while True:
        raw = f.readline(MAX_HEADER_LINE)
        if not raw:
            raise RecordingError(f"{path} has no header row; a CSV file needs a "
                                 "first line naming its columns.")
        if len(raw) >= MAX_HEADER_LINE and not raw.endswith(b"\n"):
            raise RecordingError(f"{path} does not look like a CSV file (a line "
                                 f"longer than {MAX_HEADER_LINE} bytes).")
        line = raw.decode("utf-8", errors="replace").rstrip("\r\n")
        if first and line.startswith("# tunetrace recording"):
            version = line.rsplit(" ", 1)[-1]
            if version != "1":
                raise RecordingError(f"{path} is a tunetrace recording of format "
                                     f"{version!r}; this version reads format 1.")
            header.format_version = 1
        elif line.startswith("#"):
            _header_comment(header, line[1:].strip(), line, chain)
        elif line.strip():
            break
        first = False
    header.chain_text = "\n".join(chain) + "\n" if chain else None
    header.delimiter = "," if header.format_version else _sniff_delimiter(line)
    names = next(csv.reader([line], delimiter=header.delimiter))
    header.columns = tuple(name.strip() for name in names)
    if len(set(header.columns)) != len(header.columns):
        raise RecordingError(f"{path}: the header row names a column twice; "
                             "give every column its own name.")
    return header, f.tell()


def _header_comment(header: RecordingHeader, body: str, line: str, chain: list[str]) -> None:
    key, _, value = body.partition(":")
    value = value.strip()
    if header.format_version and key == "chain":
        chain.append(line.split(":", 1)[1][1:] if ": " in line else "")
    elif header.format_version and key == "rate_hz":
        header.rate_hz, header.rate_origin = parse_rate_value(value)
    elif header.format_version and key == "channels":
        header.channels_units = tuple(split_unit(item) for item in value.split(",")
                                      if item.strip())
    elif header.format_version and key in ("tool", "started", "source"):
        setattr(header, key, value)
    elif header.format_version and key in ("time_column", "counter_column"):
        setattr(header, "device_time_column" if key == "time_column" else key, value)
    else:
        header.notes.append(body)


def _sniff_delimiter(line: str) -> str:
    """',' unless the header row only makes sense split at ';' or a tab."""
    if "," in line:
        return ","
    for candidate in (";", "\t"):
        if candidate in line:
            return candidate
    return ","
