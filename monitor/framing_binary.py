"""Binary framers: bytes from the link -> whole frames, with resynchronisation.

Three ways a board marks where a frame starts and ends:

- COBS (Consistent Overhead Byte Stuffing, Cheshire and Baker 1999): every
  frame is stuffed so it contains no zero byte and ends with one 0x00.
- SLIP (RFC 1055): frames end with END 0xC0; END and ESC inside a frame are
  sent as ESC ESC_END (DB DC) and ESC ESC_ESC (DB DD).
- sync word + length: a fixed two-byte sync word, a length field (bytes that
  follow, checksum included), then the frame.

Each framer has the framer interface of DEVELOPERS.md: `feed(data) -> list of
frames` (unstuffed, without delimiters or header) and `bad: BadFrames`. Bad
stuffing, overlong frames and impossible lengths are counted in `bad`, never
raised, and the framer carries on at the next delimiter or sync word.
"""

from __future__ import annotations

from collections.abc import Callable

from monitor.counters import BadFrames

FRAMINGS: tuple[str, ...] = ("text", "cobs", "slip", "sync")
DEFAULT_MAX_FRAME = 4096
# Largest binary frame (payload and checksum, bytes) a layout may describe. The widest
# stream, filters.limits.MAX_CHANNELS = 4096 float64 values with a time, a counter and
# a CRC-32, is 32 788 bytes; 64 KiB holds it with room for padding, and a read of the
# source (FramedSource takes up to 64 KiB at once) holds one whole frame.
MAX_FRAME_BYTES = 1 << 16
DEFAULT_SYNC_WORD = b"\xa5\x5a"

SLIP_END = 0xC0
SLIP_ESC = 0xDB
SLIP_ESC_END = 0xDC
SLIP_ESC_ESC = 0xDD


class StuffingError(ValueError):
    """A frame whose byte stuffing is impossible (the reason is the message)."""


def cobs_encode(data: bytes) -> bytes:
    """COBS-stuff `data` and append the 0x00 delimiter.

    A frame that ends in a full 254-byte run gets no trailing code byte, as in
    the usual reference examples (FF 01..FE 00).
    """
    out = bytearray()
    segments = data.split(b"\x00")
    last = len(segments) - 1
    for index, segment in enumerate(segments):
        pos = 0
        while len(segment) - pos >= 254:
            out.append(0xFF)
            out += segment[pos:pos + 254]
            pos += 254
        rest = segment[pos:]
        if index == last and pos > 0 and not rest:
            break
        out.append(len(rest) + 1)
        out += rest
    out.append(0)
    return bytes(out)


def cobs_decode(block: bytes) -> bytes:
    """Undo COBS stuffing of one frame given without its delimiter.

    Works by slicing whole runs (one step per code byte, not per data byte).
    Raises StuffingError for a zero inside the frame or a code byte that
    points past its end.
    """
    out = bytearray()
    n = len(block)
    i = 0
    while i < n:
        code = block[i]
        if code == 0:
            raise StuffingError(f"zero byte inside a COBS frame at offset {i}")
        end = i + code
        if end > n:
            raise StuffingError(f"COBS code {code} at offset {i} runs past the frame end")
        out += block[i + 1:end]
        i = end
        if code != 0xFF and i < n:
            out.append(0)
    return bytes(out)


def slip_encode(data: bytes) -> bytes:
    """SLIP-escape `data` (RFC 1055) between a leading and a trailing END."""
    escaped = data.replace(b"\xdb", b"\xdb\xdd").replace(b"\xc0", b"\xdb\xdc")
    return b"\xc0" + escaped + b"\xc0"


def slip_decode(block: bytes) -> bytes:
    """Undo SLIP escapes of one frame given without its END bytes.

    Raises StuffingError for ESC followed by anything but ESC_END or ESC_ESC
    (RFC 1055 leaves it undefined; we count it as a corrupt frame).
    """
    if b"\xdb" not in block:
        return block
    parts = block.split(b"\xdb")
    out = bytearray(parts[0])
    for part in parts[1:]:
        if not part:
            raise StuffingError("SLIP ESC not followed by ESC_END or ESC_ESC")
        if part[0] == SLIP_ESC_END:
            out.append(SLIP_END)
        elif part[0] == SLIP_ESC_ESC:
            out.append(SLIP_ESC)
        else:
            raise StuffingError(f"SLIP ESC followed by 0x{part[0]:02X}")
        out += part[1:]
    return bytes(out)


class _DelimitedFramer:
    """Splits on a one-byte delimiter and unstuffs each piece; shared by COBS and SLIP.

    max_frame: longest stuffed frame in bytes; longer runs without a delimiter
               are counted once as overlong and dropped up to the next delimiter.
    The piece before the first delimiter ever seen may be the tail of a frame
    cut when the port opened: if it does not unstuff it is counted in
    `skipped_start`, not in `bad`.
    """

    delimiter: bytes = b""

    def __init__(self, max_frame: int = DEFAULT_MAX_FRAME) -> None:
        if not 2 <= max_frame <= 1 << 20:
            raise ValueError(f"max_frame {max_frame} is out of range; allowed 2..1048576 bytes")
        self.max_frame = max_frame
        self.bad = BadFrames()
        self.overlong = 0
        self.skipped_start = 0
        self._pending = b""
        self._discarding = False
        self._seen_delimiter = False

    def _unstuff(self, block: bytes) -> bytes:
        raise NotImplementedError

    def feed(self, data: bytes) -> list[bytes]:
        """Frames completed by `data`, unstuffed, in arrival order."""
        if self._pending:
            data = self._pending + data
        pieces = data.split(self.delimiter)
        self._pending = pieces.pop()
        frames: list[bytes] = []
        for piece in pieces:
            first = not self._seen_delimiter
            self._seen_delimiter = True
            if self._discarding:
                self._discarding = False
                continue
            if not piece:
                continue  # back-to-back delimiters: idle fill or a flush byte
            if len(piece) > self.max_frame:
                self._count_overlong(piece)
                continue
            try:
                frames.append(self._unstuff(piece))
            except StuffingError as exc:
                if first:
                    self.skipped_start += 1
                else:
                    self.bad.add(piece, str(exc))
        if len(self._pending) > self.max_frame:
            if not self._discarding:
                self._count_overlong(self._pending)
                self._discarding = True
            self._pending = b""
        return frames

    def _count_overlong(self, piece: bytes) -> None:
        self.overlong += 1
        self.bad.add(piece, f"no frame delimiter within {self.max_frame} bytes")


class CobsFramer(_DelimitedFramer):
    """COBS frames ending in 0x00 (Cheshire and Baker 1999); see _DelimitedFramer."""

    delimiter = b"\x00"

    def _unstuff(self, block: bytes) -> bytes:
        return cobs_decode(block)


class SlipFramer(_DelimitedFramer):
    """SLIP frames ending in END 0xC0 (RFC 1055); see _DelimitedFramer."""

    delimiter = b"\xc0"

    def _unstuff(self, block: bytes) -> bytes:
        return slip_decode(block)


def sync_encode(frame: bytes, sync_word: bytes = DEFAULT_SYNC_WORD, length_bytes: int = 1) -> bytes:
    """`frame` behind the sync word and a little-endian length field of `length_bytes`."""
    return sync_word + len(frame).to_bytes(length_bytes, "little") + frame


class SyncFramer:
    """Frames behind a sync word and a little-endian length field.

    sync_word:    the bytes that open every frame (default A5 5A).
    length_bytes: 1 or 2; the field counts the bytes after it (checksum included).
    frame_length: when the layout fixes the frame size, any other length is bad.
    max_length:   the longest frame accepted when frame_length is not fixed.
    check:        optional frame -> bool (e.g. the decoder's CRC check); a frame
                  that fails is counted bad and the search restarts one byte
                  after its sync word, so a false sync word inside garbage or a
                  corrupt length costs no intact frame behind it. A false
                  sync word inside a frame already counted bad is not counted
                  again, so one corrupt frame is one bad frame.
    """

    def __init__(self, sync_word: bytes = DEFAULT_SYNC_WORD, length_bytes: int = 1,
                 frame_length: int | None = None, max_length: int | None = None,
                 check: Callable[[bytes], bool] | None = None) -> None:
        if not 1 <= len(sync_word) <= 8:
            raise ValueError(f"sync_word of {len(sync_word)} bytes is out of range; allowed 1..8")
        if length_bytes not in (1, 2):
            raise ValueError(f"length_bytes {length_bytes} is not allowed; use 1 or 2")
        limit = (1 << (8 * length_bytes)) - 1
        if frame_length is not None and not 1 <= frame_length <= limit:
            raise ValueError(f"frame_length {frame_length} is out of range; allowed 1..{limit}")
        if max_length is not None and not 1 <= max_length <= limit:
            raise ValueError(f"max_length {max_length} is out of range; allowed 1..{limit}")
        self.sync_word = bytes(sync_word)
        self.length_bytes = length_bytes
        self.frame_length = frame_length
        self.max_length = max_length or limit
        self.check = check
        self.bad = BadFrames()
        self.garbage_bytes = 0
        self.skipped_start = 0
        self._buffer = b""
        self._stray = b""
        self._failed = False
        self._started = False
        self._quiet = 0

    def feed(self, data: bytes) -> list[bytes]:
        """Frames completed by `data`, without sync word and length, in arrival order."""
        buf = self._buffer + data if self._buffer else data
        sync = self.sync_word
        header = len(sync) + self.length_bytes
        frames: list[bytes] = []
        pos = 0
        quiet = self._quiet  # a false sync word before this offset lies inside a failed frame
        while True:
            start = buf.find(sync, pos)
            if start < 0:
                # keep a tail that may be the first bytes of a sync word
                keep = max(pos, len(buf) - len(sync) + 1)
                self._skip(buf[pos:keep])
                pos = keep
                break
            self._skip(buf[pos:start])
            if len(buf) - start < header:
                pos = start
                break
            length = int.from_bytes(buf[start + len(sync):start + header], "little")
            bad_length = (length != self.frame_length if self.frame_length is not None
                          else not 1 <= length <= self.max_length)
            if bad_length:
                expected = self.frame_length or f"1..{self.max_length}"
                self._fail(buf[start:start + header], f"length {length}, expected {expected}",
                           start < quiet)
                self._skip(buf[start:start + 1])
                pos = start + 1
                continue
            end = start + header + length
            if end > len(buf):
                pos = start
                break
            frame = buf[start + header:end]
            if self.check is not None and not self.check(frame):
                self._fail(frame, "checksum mismatch", start < quiet)
                quiet = max(quiet, end)
                self._skip(buf[start:start + 1])
                pos = start + 1
                continue
            self._good()
            frames.append(frame)
            pos = end
        self._buffer = buf[pos:]
        self._quiet = max(0, quiet - pos)
        return frames

    def _skip(self, stray: bytes) -> None:
        if stray:
            self.garbage_bytes += len(stray)
            self._stray = (self._stray + stray)[-200:]

    def _fail(self, frame: bytes, reason: str, inside_failed: bool) -> None:
        """Count a failed frame, unless it starts inside one already counted."""
        if not inside_failed:
            self._end_stray_run()
            self.bad.add(frame, reason)
        self._failed = True

    def _good(self) -> None:
        self._end_stray_run()
        self._failed = False

    def _end_stray_run(self) -> None:
        """A frame (good or failed) ends a run of stray bytes: count the run once,
        unless it is the rest of a failed frame or the cut tail at port open."""
        if self._stray and not self._failed:
            if self._started:
                self.bad.add(self._stray, "stray bytes before a sync word")
            else:
                self.skipped_start += 1
        self._stray = b""
        self._started = True


def make_framer(framing: str, *, frame_length: int | None = None,
                check: Callable[[bytes], bool] | None = None,
                sync_word: bytes = DEFAULT_SYNC_WORD,
                max_frame: int = DEFAULT_MAX_FRAME) -> CobsFramer | SlipFramer | SyncFramer:
    """The binary framer called `framing` ("cobs", "slip" or "sync").

    frame_length, check and sync_word serve the sync framer (see SyncFramer);
    the delimited framers leave length and checksum to the decoder, but take max_frame
    at least as long as a frame of frame_length bytes can be once stuffed.
    """
    if frame_length is not None and not 1 <= frame_length <= MAX_FRAME_BYTES:
        raise ValueError(f"frame_length {frame_length} is out of range; allowed 1.."
                         f"{MAX_FRAME_BYTES}")
    if framing == "cobs":
        # COBS adds one code byte per 254 data bytes, plus the first (Cheshire and Baker)
        stuffed = frame_length + frame_length // 254 + 1 if frame_length else 0
        return CobsFramer(max(max_frame, stuffed))
    if framing == "slip":
        # SLIP doubles an END or ESC byte at worst (RFC 1055)
        return SlipFramer(max(max_frame, 2 * frame_length if frame_length else 0))
    if framing == "sync":
        return SyncFramer(sync_word, frame_length=frame_length, check=check)
    raise ValueError(f"framing '{framing}' is not a binary framing; use cobs, slip or sync")
