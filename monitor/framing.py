"""Text framing: bytes from the link -> complete lines, without their terminators.

Rules (DESIGN.md, issue 2):
- LF, CRLF and CR all end a line; a CR at the end of one chunk followed by an
  LF at the start of the next is one terminator, not an extra empty line.
- Everything before the first terminator after connect is a partial line and
  is dropped (the board was mid-line when we opened the port). Replay of a
  file or stdin keeps it with `drop_partial_first=False`.
- A line longer than `max_line` bytes is discarded, counted in `overlong` and
  in `bad`, and so is the rest of it up to its terminator.
- Blank (empty or whitespace-only) lines are ignored.

Written by hand because no library frames a byte stream incrementally with
these rules; the work per chunk is a few C-level bytes methods, not a loop
over bytes.
"""

from __future__ import annotations

import re

from monitor.counters import BadFrames

DEFAULT_MAX_LINE = 4096
_BLANK = re.compile(rb"\n[ \t\x0b\x0c]+\n")   # a whitespace-only line after the first


class TextFramer:
    """Incremental line splitter for text streams.

    max_line:           longest accepted line in bytes (terminator excluded), >= 1.
    drop_partial_first: drop everything before the first line terminator.
    feed(data) -> list of complete, non-blank lines (bytes, terminators removed).
    """

    def __init__(self, max_line: int = DEFAULT_MAX_LINE, *,
                 drop_partial_first: bool = True) -> None:
        if not isinstance(max_line, int) or max_line < 1:
            raise ValueError(f"max_line = {max_line!r} must be a whole number of bytes >= 1")
        self.max_line = max_line
        self.bad = BadFrames()
        self.overlong = 0
        self._buf = b""                     # the incomplete line so far
        self._after_cr = False              # last chunk ended with CR
        self._discarding = False            # inside an overlong line, waiting for its end
        self._first_pending = drop_partial_first

    def feed(self, data: bytes) -> list[bytes]:
        """Add received bytes; return the lines they complete, oldest first."""
        if not data:
            return []
        if self._after_cr and data[:1] == b"\n":
            data = data[1:]                 # the LF of a CRLF split across two reads
            if not data:
                self._after_cr = False
                return []
        self._after_cr = data[-1:] == b"\r"
        if b"\r" in data:
            data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
        parts = data.split(b"\n")
        tail = parts.pop()
        if not parts:                       # no terminator in this chunk
            self._extend(tail)
            return []
        if self._discarding:
            parts[0] = b""                  # the end of an overlong line
            self._discarding = False
        else:
            parts[0] = self._buf + parts[0]
        if self._first_pending:
            parts[0] = b""                  # the partial line we joined in the middle of
            self._first_pending = False
        self._buf = b""
        self._extend(tail)
        lines = list(filter(None, parts))
        if _BLANK.search(data) or parts[0].isspace():   # rare: only then look at every line
            lines = [p for p in lines if not p.isspace()]
        if lines and (len(data) > self.max_line or len(parts[0]) > self.max_line) \
                and max(map(len, lines)) > self.max_line:
            lines = self._without_overlong(lines)
        return lines

    def flush(self) -> list[bytes]:
        """End of stream: return the unterminated last line, if any (for files and stdin)."""
        line, self._buf = self._buf, b""
        if self._discarding or self._first_pending or not line or line.isspace():
            return []
        return [line]

    def _extend(self, tail: bytes) -> None:
        if self._discarding:
            return
        self._buf += tail
        if len(self._buf) > self.max_line:
            if not self._first_pending:
                self._count_overlong(self._buf)
            self._buf = b""
            self._discarding = True

    def _without_overlong(self, lines: list[bytes]) -> list[bytes]:
        kept = []
        for line in lines:
            if len(line) > self.max_line:
                self._count_overlong(line)
            else:
                kept.append(line)
        return kept

    def _count_overlong(self, line: bytes) -> None:
        self.overlong += 1
        self.bad.add(line, f"line longer than {self.max_line} bytes without an end")
