"""Lines of a recording file, read the way the live text framer reads a stream.

Rules (the same as monitor.framing for a live stream):
- LF, CRLF and a bare CR all end a line (files from old Mac tools end lines with CR;
  a CSV written on Windows with CRLF);
- a UTF-8 byte-order mark at the very start of the file is not part of the first line
  (spreadsheets write one); a UTF-16 or UTF-32 file is refused with the fix;
- a line is read only up to a cap: a longer one is returned as overlong (its bytes
  are skipped, never held), so a file that is one huge line costs bounded memory;
- a line with a NUL byte or another control character (tab excepted) is not text:
  binary garbage, a preallocated file's padding, a wrong-baud capture.

`read_head` reads a file's comment lines and header row under those rules and hands
them to replay.header as clean text; lines before the header row that are not text or
are overlong are skipped and counted (a bad row each), the way the live decoder counts
a garbled line. Hand-written: the csv module and io's universal newlines both read a
whole line whatever its length, and csv raises on a CR inside a line.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import BinaryIO

BOM_UTF8 = b"\xef\xbb\xbf"
MAX_HEAD_BYTES = 1 << 20      # comment lines + header row; a chain file fits many times
_READ = 1 << 16
_LINE_END = re.compile(rb"\r\n|\r|\n")
# C0 controls and DEL, tab excepted: never in a line of CSV text
_CONTROL = re.compile(rb"[\x00-\x08\x0a-\x1f\x7f]")
_UTF16_32_BOMS = (b"\xff\xfe", b"\xfe\xff", b"\x00\x00\xfe\xff")


class HeadError(ValueError):
    """The head of a file holds no usable header row; the message is one sentence."""


def last_line_end(data: bytes) -> int:
    """Index just past the last line terminator (LF or CR) of `data`, 0 when it has none.

    A CR that is the last byte may be the first half of a CRLF split across two reads:
    the LF then starts the next piece as an empty line, which every reader skips."""
    return max(data.rfind(b"\n"), data.rfind(b"\r")) + 1


def split_lines(data: bytes) -> list[bytes]:
    """`data` split at LF, CRLF and CR; the piece after the last terminator comes last
    (empty when `data` ends with one)."""
    return _LINE_END.split(data)


def normalize_line_ends(text: str) -> str:
    """CRLF and bare CR as LF, so that text splits into lines at '\\n' alone."""
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    return text


def is_text(line: bytes) -> bool:
    """False for a line holding a NUL byte or another control character (tab allowed)."""
    return _CONTROL.search(line) is None


def _is_head_text(line: bytes) -> bool:
    """A comment or header line: text, and UTF-8 or mostly ASCII (Latin-1 names have a
    few accented letters; random binary has about half its bytes above 0x7f)."""
    if not is_text(line):
        return False
    try:
        line.decode("utf-8")
    except UnicodeDecodeError:
        return 4 * sum(byte >= 0x80 for byte in line) <= len(line)
    return True


def size_text(n: int) -> str:
    """1048576 -> '1 MiB', 65536 -> '64 KiB', 300 -> '300 bytes'."""
    for shift, unit in ((20, "MiB"), (10, "KiB")):
        if n >= 1 << shift and n % (1 << shift) == 0:
            return f"{n >> shift} {unit}"
    return f"{n} bytes"


def shown(line: bytes | str, limit: int = 200) -> str:
    """A printable excerpt of a line for messages (undecodable bytes as U+FFFD)."""
    if isinstance(line, str):
        line = line[:limit].encode("utf-8", errors="surrogateescape")
    return line[:limit].decode("utf-8", errors="replace")


def iter_lines(f: BinaryIO, start: int, max_line: int, max_bytes: int | None = None
               ) -> Iterator[tuple[int, bytes | None]]:
    """(file offset just past the line, the line without its terminator) from byte `start`
    (a line start) of an open binary file; the line is None when it is longer than
    `max_line` bytes (its bytes are read in pieces and dropped). A last line without a
    terminator is yielded too; memory is bounded by max_line plus one read. With
    `max_bytes`, reading stops once more than that many bytes were read (a device such
    as /dev/zero never ends)."""
    f.seek(start)
    offset = start                 # file offset of buf[0]
    buf = b""
    overlong = False               # inside a line already found too long
    while True:
        data = f.read(_READ)
        buf += data
        while True:
            match = _LINE_END.search(buf)
            if match is None or (match.group() == b"\r" and match.end() == len(buf) and data):
                break              # no terminator yet, or a CR whose LF may follow
            line = buf[:match.start()]
            offset += match.end()
            buf = buf[match.end():]
            yield offset, (None if overlong or len(line) > max_line else line)
            overlong = False
        if not data:
            if buf or overlong:
                yield offset + len(buf), (None if overlong or len(buf) > max_line else buf)
            return
        pending_cr = buf.endswith(b"\r")      # may be the first half of a CRLF
        if len(buf) - pending_cr > max_line:
            overlong = True                    # drop the line's bytes, keep a pending CR
            keep = b"\r" if pending_cr else b""
            offset += len(buf) - len(keep)
            buf = keep
        if max_bytes is not None and offset + len(buf) - start > max_bytes:
            return


@dataclass
class Head:
    """The head of a file: clean text for replay.header.read_header, where data begins,
    and the lines before the header row that were skipped as binary or overlong."""

    text: bytes
    data_start: int
    skipped: int = 0
    last_skipped: str | None = None


def _decode_head_line(line: bytes) -> str:
    """A comment or header line as text: UTF-8, else Latin-1 (ISO 8859-1 maps every byte,
    so a name such as 'Temp [\u00b0C]' from a Windows logger survives whole; common practice
    for CSV of unknown 8-bit encoding)."""
    try:
        return line.decode("utf-8")
    except UnicodeDecodeError:
        return line.decode("latin-1")


def read_head(f: BinaryIO, path: str, max_line: int,
              max_head: int = MAX_HEAD_BYTES) -> Head:
    """Read the comment lines and the header row (the first non-blank line not starting
    with '#') of an open binary file. Raises HeadError (one sentence) when there is none."""
    first = f.read(4)
    if first.startswith(_UTF16_32_BOMS):
        raise HeadError(f"{path} is UTF-16 or UTF-32 text; save it as UTF-8 (or plain "
                        "ASCII) CSV and read that.")
    start = len(BOM_UTF8) if first.startswith(BOM_UTF8) else 0
    kept: list[str] = []
    skipped, overlong, last = 0, 0, None
    for end, line in iter_lines(f, start, max_line, max_head):
        if line is not None and _is_head_text(line):
            text = _decode_head_line(line)
            kept.append(text)
            if text.strip() and not text.startswith("#"):
                clean = "\n".join(kept) + "\n"
                return Head(clean.encode("utf-8"), end, skipped, last)
        else:
            skipped += 1
            overlong += line is None
            last = "(a line longer than the limit)" if line is None else shown(line)
    if f.tell() - start > max_head:
        raise HeadError(f"{path} has no header row in its first {size_text(max_head)}; "
                        "give a CSV file whose first line names its columns.")
    if not skipped:
        raise HeadError(f"{path} has no header row; a CSV file needs a first line "
                        "naming its columns.")
    what = (f"longer than {size_text(max_line)}" if overlong == skipped else
            "binary (control bytes)" if not overlong else "binary or overlong")
    raise HeadError(f"{path} has no header row, only {skipped} "
                    f"line{'s' if skipped > 1 else ''} {what}; give a CSV text file "
                    "whose first line names its columns.")
