"""Text framing: bytes from the link -> complete lines, without their terminators.

Rules (DESIGN.md, issue 2):
- LF, CRLF and CR all end a line; a CR at the end of one chunk followed by an
  LF at the start of the next is one terminator, not an extra empty line.
- Everything before the first terminator after connect may be the tail of a
  line the board was in the middle of when the port opened. It is not among the
  lines `feed` returns: `take_cut()` hands it to the decoder, which keeps it when
  it is whole (a header, or a row of the stream's width; monitor.text_header).
  A caller that never asks drops it. Replay of a file or stdin, where nothing
  can be cut, keeps it as a line with `drop_partial_first=False`.
- `restart()` after the link dropped and came back: the unfinished line from
  before is cut off (one bad frame) and the bytes before the next terminator
  are a cut again.
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
    drop_partial_first: keep everything before the first line terminator apart, for
                        take_cut(), instead of returning it as a line.
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
        self._discarding_first = False      # ... and that line is the cut first one
        self._first_pending = drop_partial_first
        self._cut: bytes | None = None      # the bytes before the first terminator

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
            if not self._discarding_first and len(parts[0]) <= self.max_line:
                self._cut = parts[0]        # maybe the tail of a line we joined mid-way
            parts[0] = b""
            self._first_pending = False
            self._discarding_first = False
        self._buf = b""
        self._extend(tail)
        lines = list(filter(None, parts))
        if _BLANK.search(data) or parts[0].isspace():   # rare: only then look at every line
            # an overlong line is overlong even when blank, as when it arrives split
            lines = [p for p in lines if not p.isspace() or len(p) > self.max_line]
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

    def take_cut(self) -> bytes | None:
        """The bytes before the first line end after open or restart(), once (None when
        they have not ended yet, were over max_line, or were already taken)."""
        cut, self._cut = self._cut, None
        return cut

    def restart(self) -> None:
        """The link dropped and will come back: an unfinished line is cut off (counted
        bad), and the bytes before the next line end are a cut line again."""
        if self._buf and not self._first_pending and not self._buf.isspace():
            self.bad.add(self._buf, "line cut off when the link dropped")
        self._buf = b""
        self._after_cr = False
        self._discarding = False
        self._discarding_first = False
        self._first_pending = True
        self._cut = None

    def _extend(self, tail: bytes) -> None:
        if self._discarding:
            return
        self._buf += tail
        if len(self._buf) > self.max_line:
            if not self._first_pending:
                self._count_overlong(self._buf)
            else:
                self._discarding_first = True
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
