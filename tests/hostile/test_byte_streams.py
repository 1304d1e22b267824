"""Hostile byte streams through every framer and decoder: good frames kept, bad ones counted.

Each test builds a stream of good frames, encoded here by encoders written from the
published definitions (COBS: Cheshire and Baker 1999; SLIP: RFC 1055; CRCs: binascii and
a bit-by-bit MODBUS loop, all pinned to the catalogue check values), interleaves hostile
pieces (random bytes, truncated frames, frames with a flipped bit, zero-length frames,
over-long frames, delimiter storms, frames of the wrong size with a valid CRC) and cuts the
stream into random chunks as serial reads deliver it. What each test expects is worked
out from the stream by the definition of the framing, never by asking tunetrace:

- COBS and SLIP split the stream at their delimiter (0x00; END 0xC0). A piece that is
  the whole encoding of a good frame yields that frame. Every other non-empty piece
  counts exactly one bad frame: bad stuffing (framer), longer than max_frame (framer,
  counted once however it was read), or, once unstuffed, the wrong size or a CRC
  mismatch (decoder). Empty pieces (idle fill, back-to-back delimiters) count nothing.
  A good COBS frame right after junk that does not end in 0x00 is part of that junk's
  piece: no receiver can separate it, so it is lost and the piece counts one. SLIP
  sends END before every frame (RFC 1055 section "SLIP protocol"), so junk before a
  frame never swallows it: every good SLIP frame is kept.
- The sync-word framer finds frames by their sync word and checks each candidate's
  length and CRC; after a failure it searches again from the byte after that sync word.
  Every good frame is kept. Each hostile region (the bytes between two good frames)
  counts at least one bad frame and at most one plus the number of sync words in it:
  every false sync word is a candidate frame the framer cannot know to be false.
- The text framer splits at LF, CRLF and CR. After a good header and the first rows
  (the stream's steady state), a whole line equal to a good row is that row; a line
  longer than max_line counts one bad frame (framer); a blank line or a repeat of the
  header counts nothing; any other line counts one bad frame (decoder: not UTF-8, wrong
  width, a field that is not a number), unless it happens to read as a row of the
  stream's width: text carries no checksum, so such a line is data (a flipped digit is
  a different number). A good line right after junk without a line end is lost in the
  junk's line, as in COBS.

Values are compared exactly (NaN equal to NaN); the counter field of binary frames is
checked against the sequence numbers the board sent, and `dropped` against the board
frames lost between the kept ones.
"""

from __future__ import annotations

import binascii
import re
import struct
from dataclasses import dataclass, field

import numpy as np
import pytest
from hostile_profile import hostile
from hypothesis import assume, given
from hypothesis import strategies as st

from monitor.decoding import TextDecoder
from monitor.decoding_binary import BinaryDecoder
from monitor.framing import TextFramer
from monitor.framing_binary import CobsFramer, SlipFramer, SyncFramer

# -- independent encoders, from the published definitions --------------------------------


def cobs_stuff(data: bytes) -> bytes:
    """COBS as in Cheshire and Baker 1999 (the paper's StuffData, from memory), plus the
    0x00 frame delimiter. Like the paper it closes a full 254-byte run with a 0x01 code."""
    out = bytearray()
    code_at, code = 0, 1
    out.append(0)                                  # placeholder for the first code byte
    for byte in data:
        if byte == 0:
            out[code_at], code_at, code = code, len(out), 1
            out.append(0)
        else:
            out.append(byte)
            code += 1
            if code == 0xFF:
                out[code_at], code_at, code = code, len(out), 1
                out.append(0)
    out[code_at] = code
    return bytes(out) + b"\x00"


def cobs_unstuff(piece: bytes) -> bytes | None:
    """The paper's UnStuffData on one zero-free piece: every block but a full 254-byte
    one (code 0xFF) ends in a zero, and the zero after the last block is not data. None
    when a code byte points past the piece's end (the only way such a piece is bad)."""
    out = bytearray()
    i = code = 0
    while i < len(piece):
        code = piece[i]
        if i + code > len(piece):
            return None
        out += piece[i + 1:i + code]
        i += code
        if code < 0xFF:
            out.append(0)
    return bytes(out[:-1] if code < 0xFF else out)


SLIP_END, SLIP_ESC, SLIP_ESC_END, SLIP_ESC_ESC = 0xC0, 0xDB, 0xDC, 0xDD   # RFC 1055


def slip_packet(data: bytes) -> bytes:
    """RFC 1055 send_packet: END, each byte with END and ESC escaped, END."""
    out = bytearray([SLIP_END])
    for byte in data:
        if byte == SLIP_END:
            out += bytes([SLIP_ESC, SLIP_ESC_END])
        elif byte == SLIP_ESC:
            out += bytes([SLIP_ESC, SLIP_ESC_ESC])
        else:
            out.append(byte)
    out.append(SLIP_END)
    return bytes(out)


def slip_unescape(piece: bytes) -> bytes | None:
    """RFC 1055 recv_packet on one END-free piece; None for ESC followed by anything but
    ESC_END or ESC_ESC (the RFC leaves that undefined; tunetrace counts it as corrupt)."""
    out = bytearray()
    it = iter(piece)
    for byte in it:
        if byte == SLIP_ESC:
            nxt = next(it, None)
            if nxt == SLIP_ESC_END:
                out.append(SLIP_END)
            elif nxt == SLIP_ESC_ESC:
                out.append(SLIP_ESC)
            else:
                return None
        else:
            out.append(byte)
    return bytes(out)


def crc16_modbus_bitwise(data: bytes) -> int:
    """CRC-16/MODBUS one bit at a time (reflected poly 0xA001, init 0xFFFF), no table."""
    crc = 0xFFFF
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = (crc >> 1) ^ 0xA001 if crc & 1 else crc >> 1
    return crc


# name -> (bytes of the checksum, function, byte order fixed by the trade or None)
CRCS = {
    "crc16-ccitt": (2, lambda d: binascii.crc_hqx(d, 0xFFFF), None),   # CCITT-FALSE
    "crc16-modbus": (2, crc16_modbus_bitwise, "little"),   # Modbus serial line v1.02, 6.2.2
    "crc32": (4, lambda d: binascii.crc32(d) & 0xFFFFFFFF, None),      # IEEE 802.3
}


def test_the_tests_own_encoders_match_published_values():
    # CRC check values over b"123456789" from the catalogue of parametrised CRC
    # algorithms (recalled from memory): CCITT-FALSE 29B1, MODBUS 4B37, CRC-32 CBF43926.
    assert CRCS["crc16-ccitt"][1](b"123456789") == 0x29B1
    assert CRCS["crc16-modbus"][1](b"123456789") == 0x4B37
    assert CRCS["crc32"][1](b"123456789") == 0xCBF43926
    # COBS examples of the scheme (Cheshire and Baker 1999; the byte strings are the
    # common reference examples, recalled from memory).
    assert cobs_stuff(b"\x00") == b"\x01\x01\x00"
    assert cobs_stuff(b"\x11\x22\x00\x33") == b"\x03\x11\x22\x02\x33\x00"
    assert cobs_stuff(b"\x11\x00\x00\x00") == b"\x02\x11\x01\x01\x01\x00"
    assert cobs_stuff(bytes(range(1, 255))) == b"\xff" + bytes(range(1, 255)) + b"\x01\x00"
    for data in (b"", b"\x00", b"\x11\x22\x00\x33", bytes(range(256)) * 3, b"\x00" * 300):
        assert cobs_unstuff(cobs_stuff(data)[:-1]) == data
    assert cobs_unstuff(b"\x05\x11\x22") is None
    # RFC 1055: END = C0, ESC = DB, ESC_END = DC, ESC_ESC = DD.
    assert slip_packet(b"\x01\xc0\xdb") == b"\xc0\x01\xdb\xdc\xdb\xdd\xc0"
    assert slip_unescape(b"\x01\xdb\xdc\xdb\xdd") == b"\x01\xc0\xdb"
    assert slip_unescape(b"\x01\xdb\x05") is None and slip_unescape(b"\xdb") is None


# -- the board's frames --------------------------------------------------------------------

BODY = "Hhfd"                          # seq, a raw ADC count, a float32 and a float64 reading
FIELDS = ["seq", "current_raw[count]", "load[kg]", "vib[g]"]
PAYLOAD = struct.calcsize("<" + BODY)
MAX_FRAME = 64              # over-long junk is longer than this; limits are drawn near it

# Bytes that mean something to a framer (COBS zero, SLIP END/ESC/ESC_END/ESC_ESC, the sync
# word, 0xFF). Generated bytes below 0x40 are mapped onto them, so about one byte in four
# of a payload, a CRC or a piece of junk is one a framer must stuff, escape or resync on.
FRAMING_BYTES = bytes([0x00, 0xC0, 0xDB, 0xDC, 0xDD, 0xA5, 0x5A, 0xFF])
_TO_FRAMING = bytes.maketrans(bytes(range(0x40)), FRAMING_BYTES * 8)


def framing_heavy(min_size: int, max_size: int) -> st.SearchStrategy[bytes]:
    return st.binary(min_size=min_size, max_size=max_size).map(
        lambda b: b.translate(_TO_FRAMING))


_READING = struct.Struct("<hfd")
readings = st.one_of(
    st.tuples(st.integers(-32768, 32767), st.floats(width=32), st.floats()),
    framing_heavy(_READING.size, _READING.size).map(_READING.unpack))


@dataclass(frozen=True)
class Wire:
    """How one test's board puts a frame on the wire."""

    order: str              # "<" or ">"
    crc: str

    def frame(self, seq: int, reading: tuple) -> bytes:
        """Payload packed by struct (the outside reference) plus its checksum."""
        payload = struct.pack(self.order + BODY, seq % 65536, *reading)
        size, compute, fixed = CRCS[self.crc]
        byteorder = fixed or ("little" if self.order == "<" else "big")
        return payload + compute(payload).to_bytes(size, byteorder)

    def check(self, frame: bytes) -> tuple | None:
        """(seq, reading) of a whole, CRC-correct frame, else None."""
        size, compute, fixed = CRCS[self.crc]
        if len(frame) != PAYLOAD + size:
            return None
        byteorder = fixed or ("little" if self.order == "<" else "big")
        payload = frame[:PAYLOAD]
        if compute(payload) != int.from_bytes(frame[PAYLOAD:], byteorder):
            return None
        seq, *reading = struct.unpack(self.order + BODY, payload)
        return seq, tuple(reading)

    def decoder(self) -> BinaryDecoder:
        return BinaryDecoder(self.order + BODY, FIELDS, crc=self.crc, counter_field="seq")


wires = st.builds(Wire, st.sampled_from("<>"), st.sampled_from(sorted(CRCS)))


@dataclass
class Stream:
    """A generated stream: its bytes, and the board's good frames in the order sent.

    goods: (board frame index, seq, reading, wire bytes, offset in `data`) per good frame.
    board frame index counts every frame the board sent (a corrupted copy of a frame is
    a frame the board sent and the link spoilt), so `dropped` can be predicted.
    """

    data: bytearray = field(default_factory=bytearray)
    goods: list[tuple[int, int, tuple, bytes, int]] = field(default_factory=list)
    sent: int = 0
    regions: list[bytes] = field(default_factory=list)   # hostile bytes between goods
    _region: bytearray = field(default_factory=bytearray)

    def good(self, seq0: int, reading: tuple, encoded: bytes) -> None:
        if self._region:
            self.regions.append(bytes(self._region))
            self._region.clear()
        self.goods.append((self.sent, seq0 + self.sent, reading, encoded, len(self.data)))
        self.data += encoded
        self.sent += 1

    def hostile(self, junk: bytes, board_frame: bool = False) -> None:
        self.data += junk
        self._region += junk
        self.sent += board_frame


def flip(data: bytes, bit: int) -> bytes:
    out = bytearray(data)
    out[bit // 8 % len(out)] ^= 1 << (bit % 8)
    return bytes(out)


@st.composite
def binary_streams(draw, wire: Wire, encode, empty_frame: bytes, storm: bytes):
    """A binary stream: two good frames first (steady state), hostile pieces among good
    frames, a good frame last (so every hostile piece is closed and judged)."""
    seq0 = draw(st.integers(65535 - 40, 65535) | st.integers(0, 65535))   # half cross the wrap
    stream = Stream()

    def good_frame() -> None:
        reading = draw(readings)
        stream.good(seq0, reading, encode(wire.frame(seq0 + stream.sent, reading)))

    for _ in range(2):
        good_frame()
    kinds = st.sampled_from(["good", "good", "random", "truncated", "flipped", "empty",
                             "overlong", "storm", "wrong-size"])
    for kind in draw(st.lists(kinds, min_size=1, max_size=30)):
        if kind == "good":
            good_frame()
            continue
        own = encode(wire.frame(seq0 + stream.sent, draw(readings)))
        if kind == "random":
            stream.hostile(draw(st.binary(min_size=1, max_size=90) | framing_heavy(1, 90)))
        elif kind == "truncated":                         # the rest never arrived
            stream.hostile(own[:draw(st.integers(1, len(own) - 1))], board_frame=True)
        elif kind == "flipped":                           # any bit, delimiters included
            stream.hostile(flip(own, draw(st.integers(0, 8 * len(own) - 1))),
                           board_frame=True)
        elif kind == "empty":
            stream.hostile(empty_frame)
        elif kind == "overlong":
            stream.hostile(encode(draw(st.binary(min_size=MAX_FRAME + 1,
                                                 max_size=3 * MAX_FRAME))))
        elif kind == "storm":
            stream.hostile(storm * draw(st.integers(1, 40)))
        else:                                             # valid CRC, wrong size
            size, compute, fixed = CRCS[wire.crc]
            payload = draw(st.binary(max_size=2 * PAYLOAD).filter(lambda p: len(p) != PAYLOAD))
            byteorder = fixed or ("little" if wire.order == "<" else "big")
            stream.hostile(encode(payload + compute(payload).to_bytes(size, byteorder)))
    good_frame()
    return stream


chunkings = st.lists(st.integers(1, 300), min_size=1, max_size=40)


def chunks_of(data: bytes, sizes: list[int]):
    pos, i = 0, 0
    while pos < len(data):
        yield data[pos:pos + sizes[i % len(sizes)]]
        pos += sizes[i % len(sizes)]
        i += 1


def feed_binary(framer, decoder: BinaryDecoder, data: bytes, sizes: list[int]):
    """Feed chunk by chunk as FramedSource does; (framer frames, values, counters)."""
    frames: list[bytes] = []
    values, counters = [], []
    for i, chunk in enumerate(chunks_of(data, sizes)):
        got = framer.feed(chunk)
        frames += got
        block = decoder.decode(got, float(i))
        if block is not None:
            values.append(block.values)
            counters.append(block.counter)
    flush = getattr(decoder, "flush", None)      # the end of the stream: frames held back
    block = flush(float(i + 1)) if flush is not None else None
    if block is not None:
        values.append(block.values)
        counters.append(block.counter)
    values = np.vstack(values) if values else np.empty((0, 3))
    return frames, values, np.concatenate(counters) if counters else np.empty(0, np.int64)


def expected_values(readings_list) -> np.ndarray:
    return np.array([[r[0], r[1], r[2]] for r in readings_list],
                    dtype=np.float64).reshape(-1, 3)


def check_counter(stream: Stream, kept: list[int], counters: np.ndarray,
                  decoder: BinaryDecoder) -> None:
    """The counter column: the sequence numbers the board sent (unwrapped across the
    16-bit wrap), and `dropped` = board frames lost between the first and last kept."""
    goods = [stream.goods[i] for i in kept]
    first_index, first_seq = goods[0][0], goods[0][1] % 65536
    assert counters.tolist() == [first_seq + g[0] - first_index for g in goods]
    assert decoder.dropped == goods[-1][0] - first_index + 1 - len(goods)


def spans(data: bytes, ends: re.Pattern) -> list[tuple[int, int]]:
    """(start, end) of every piece of `data` closed by a match of `ends`; the bytes after
    the last match (an unfinished piece) are not included."""
    out, pos = [], 0
    for match in ends.finditer(data):
        out.append((pos, match.start()))
        pos = match.end()
    return out


def good_spans(stream: Stream, delimiters: bytes) -> dict[tuple[int, int], int]:
    """(start, end) of each good frame without its delimiters -> its index in goods."""
    out = {}
    for index, (_, _, _, wire_bytes, offset) in enumerate(stream.goods):
        lead = len(wire_bytes) - len(wire_bytes.lstrip(delimiters))
        inner = wire_bytes.strip(delimiters)
        out[(offset + lead, offset + lead + len(inner))] = index
    return out


def limits(longest: int, top: int) -> st.SearchStrategy[int]:
    """A framer's length limit: often exactly the longest good frame (the boundary, which
    must be kept), else anything up to `top`."""
    return st.one_of(st.just(longest), st.integers(longest, top))


def judge_delimited(stream: Stream, delimiter: int, unstuff, wire: Wire, sizes,
                    draw) -> list[int]:
    """Feed the stream and hold the result to the COBS/SLIP rule of the module docstring,
    worked out from the bytes; returns the indices of the good frames kept."""
    data = bytes(stream.data)
    goods = good_spans(stream, bytes([delimiter]))
    max_frame = draw(limits(max(end - start for start, end in goods), MAX_FRAME + 16))
    decoder = wire.decoder()
    framer = (CobsFramer if delimiter == 0 else SlipFramer)(max_frame)
    frames, values, counters = feed_binary(framer, decoder, data, sizes)
    expect_frames, expect_rows, kept, bad = [], [], [], 0
    for start, end in spans(data, re.compile(re.escape(bytes([delimiter])))):
        piece = data[start:end]
        if not piece:
            continue                                      # idle fill: nothing to count
        unstuffed = unstuff(piece) if len(piece) <= max_frame else None
        if unstuffed is None:
            bad += 1                                      # bad stuffing or over-long
            continue
        expect_frames.append(unstuffed)
        judged = wire.check(unstuffed)
        if judged is None:
            bad += 1                                      # wrong size or CRC mismatch
            continue
        # only a whole good frame passes; junk posing as a frame (a CRC false accept,
        # vanishingly rare) leaves nothing to hold the framer to, so skip the example
        assume((start, end) in goods)
        kept.append(goods[(start, end)])
        expect_rows.append(judged[1])
    assert frames == expect_frames
    np.testing.assert_array_equal(values, expected_values(expect_rows))
    np.testing.assert_array_equal(values, expected_values([stream.goods[i][2] for i in kept]))
    assert framer.bad.count + decoder.bad.count == bad
    assert framer.skipped_start == 0
    check_counter(stream, kept, counters, decoder)
    return kept


@hostile(200)
@given(data=st.data(), wire=wires, sizes=chunkings)
def test_cobs_stream_keeps_every_whole_good_frame_and_counts_every_bad_piece(data, wire,
                                                                             sizes):
    stream = data.draw(binary_streams(wire, cobs_stuff, empty_frame=b"\x01\x00",
                                      storm=b"\x00"))
    kept = judge_delimited(stream, 0x00, cobs_unstuff, wire, sizes, data.draw)
    # a good frame is lost only inside junk that did not end in 0x00 (it is that junk's
    # piece), and then the junk right before it is hostile
    for i, g in enumerate(stream.goods):
        if i not in kept:
            assert g[4] > 0 and stream.data[g[4] - 1] != 0


@hostile(200)
@given(data=st.data(), wire=wires, sizes=chunkings)
def test_slip_stream_keeps_every_good_frame_and_counts_every_bad_piece(data, wire, sizes):
    stream = data.draw(binary_streams(wire, slip_packet, empty_frame=b"\xc0\xc0",
                                      storm=b"\xc0"))
    kept = judge_delimited(stream, SLIP_END, slip_unescape, wire, sizes, data.draw)
    assert kept == list(range(len(stream.goods)))         # END before each frame: none lost


SYNC = b"\xa5\x5a"


def sync_frame(frame: bytes) -> bytes:
    """Sync word, one length byte (the bytes that follow), the frame."""
    return SYNC + bytes([len(frame)]) + frame


def count_sync(data: bytes) -> int:
    return sum(1 for i in range(len(data) - 1) if data[i:i + 2] == SYNC)


@hostile(200)
@given(data=st.data(), wire=wires, sizes=chunkings)
def test_sync_stream_keeps_every_good_frame_and_counts_each_hostile_region(data, wire, sizes):
    stream = data.draw(binary_streams(wire, sync_frame, empty_frame=SYNC + b"\x00",
                                      storm=SYNC))
    decoder = wire.decoder()
    framer = SyncFramer(SYNC, frame_length=decoder.frame_size, check=decoder.crc_ok)
    frames, values, counters = feed_binary(framer, decoder, bytes(stream.data), sizes)
    good_rows = [g[2] for g in stream.goods]
    assume(len(frames) <= len(good_rows))                  # a CRC false accept: see above
    np.testing.assert_array_equal(values, expected_values(good_rows))
    assert decoder.bad.count == 0                          # the framer's check did it all
    assert framer.skipped_start == 0
    # each region between good frames: at least one, at most one plus its sync words
    # (a sync word straddling a region's edge is counted in, by one byte either side)
    edges = [(g[4], g[4] + len(g[3])) for g in stream.goods]
    false_syncs = sum(count_sync(bytes(stream.data[end - 1:start + 1]))
                      for (_, end), (start, _) in zip(edges, edges[1:], strict=False))
    regions = sum(1 for (_, end), (start, _) in zip(edges, edges[1:], strict=False)
                  if start > end)
    assert regions == len(stream.regions)
    assert regions <= framer.bad.count <= regions + false_syncs
    if false_syncs == 0:
        assert framer.bad.count == regions
    check_counter(stream, list(range(len(stream.goods))), counters, decoder)


# -- every single-bit error of one frame, each framer (exhaustive, no generator) -----------

@pytest.mark.parametrize("crc", sorted(CRCS))
@pytest.mark.parametrize("framing", ["cobs", "slip", "sync"])
def test_every_single_bit_error_costs_the_frames_it_touches_and_counts(framing, crc):
    """A single flipped bit anywhere in the middle of three frames: the first frame is
    always kept; the third is kept unless the flip removed the COBS delimiter between
    them (then the merged piece counts one); the spoilt frame counts one bad frame, or
    two when the flip made a delimiter inside it (two bad pieces); for sync, exactly one
    when the sync word and length are intact (the false sync words all through the spoilt
    frame's payload are not frames of their own), else one plus any false sync word the
    flip made."""
    wire = Wire("<", crc)
    encode = {"cobs": cobs_stuff, "slip": slip_packet, "sync": sync_frame}[framing]
    inner = _READING.unpack(SYNC * 7)                   # the sync word all through frame 1
    frames = [encode(wire.frame(i, inner if i == 1 else (i - 7, 0.5 * i, -1.0 / (i + 3))))
              for i in range(3)]
    for bit in range(8 * len(frames[1])):
        decoder = wire.decoder()
        framer = {"cobs": lambda: CobsFramer(MAX_FRAME), "slip": lambda: SlipFramer(MAX_FRAME),
                  "sync": lambda d=decoder: SyncFramer(SYNC, frame_length=d.frame_size,
                                                       check=d.crc_ok)}[framing]()
        spoilt = flip(frames[1], bit)
        stream = frames[0] + spoilt + frames[2]
        _, values, counters = feed_binary(framer, decoder, stream, [7])
        bad = framer.bad.count + decoder.bad.count
        kept = [int(c) for c in counters]
        if framing == "cobs" and spoilt[-1] != 0:          # the delimiter itself flipped
            assert kept == [0] and bad == 1, bit
            continue
        assert kept == [0, 2], (bit, kept)
        if framing == "sync" and bit >= 8 * (len(SYNC) + 1):
            assert bad == 1, bit
        elif framing == "sync":
            assert 1 <= bad <= 1 + count_sync(frames[0][-1:] + spoilt + frames[2][:1]), bit
        else:
            delimiter = 0 if framing == "cobs" else SLIP_END
            inner = spoilt.strip(bytes([delimiter]))
            assert bad == len([p for p in inner.split(bytes([delimiter])) if p]), bit


# -- text ------------------------------------------------------------------------------------

HEADER = b"load[kg],current[A],vib[g]"
MAX_LINE = 128
LINE_END = re.compile(rb"\r\n|\r|\n")
# Bytes that numpy.loadtxt takes for whitespace inside a field but Python's float() of
# bytes does not: the model here (reads_as_row) follows float(), so generated junk carries
# '?' instead; the decoder's one verdict on such lines is tested on its own below.
_LOADTXT_ONLY_SPACE = bytes([0x1C, 0x1D, 0x1E, 0x1F, 0x85, 0xA0])
_NEUTRAL = bytes.maketrans(_LOADTXT_ONLY_SPACE, b"?" * len(_LOADTXT_ONLY_SPACE))


def text_row(reading: tuple) -> bytes:
    return b",".join(repr(float(v)).encode() for v in reading)


def reads_as_row(line: bytes) -> tuple | None:
    """The decoder's documented rule: UTF-8, three comma fields, each a number by
    Python's float() (without the 1_000 form a board never sends)."""
    try:
        line.decode("utf-8")
    except UnicodeDecodeError:
        return None
    fields = line.split(b",")
    if len(fields) != 3 or any(b"_" in f for f in fields):
        return None
    try:
        return tuple(float(f) for f in fields)
    except ValueError:
        return None


text_readings = st.tuples(st.floats(), st.floats(), st.floats())


@st.composite
def text_streams(draw):
    """Rows in steady state with hostile pieces among them; the last piece is a row."""
    stream = Stream()

    def good_row() -> None:
        reading = draw(text_readings)
        stream.good(0, tuple(float(v) for v in reading), text_row(reading) + b"\n")

    kinds = st.sampled_from(["good", "good", "random", "truncated", "flipped", "blank",
                             "overlong", "storm", "header", "not-utf8", "wide", "narrow"])
    ends = st.sampled_from([b"\n", b"\r\n", b"\r"])
    for kind in draw(st.lists(kinds, min_size=1, max_size=30)):
        own = text_row(draw(text_readings))
        if kind == "good":
            good_row()
        elif kind == "random":
            stream.hostile(draw(st.binary(min_size=1, max_size=90)).translate(_NEUTRAL))
        elif kind == "truncated":                    # cut anywhere, its end maybe lost too
            cut = own[:draw(st.integers(1, len(own)))]
            stream.hostile(cut + draw(st.sampled_from([b"", b"\n"])), board_frame=True)
        elif kind == "flipped":
            line = own + draw(ends)
            stream.hostile(flip(line, draw(st.integers(0, 8 * len(line) - 1)))
                           .translate(_NEUTRAL), board_frame=True)
        elif kind == "blank":
            stream.hostile(draw(st.sampled_from([b"\n", b"  \n", b"\t\r\n", b" \r"])))
        elif kind == "overlong":
            stream.hostile(b"9," * draw(st.integers(MAX_LINE // 2 + 1, MAX_LINE)) + draw(ends))
        elif kind == "storm":
            stream.hostile(b"".join(draw(st.lists(ends, min_size=1, max_size=40))))
        elif kind == "header":
            stream.hostile(HEADER + draw(ends))
        elif kind == "not-utf8":
            stream.hostile(own[:3] + b"\xff\xfe" + own[3:] + draw(ends))
        elif kind == "wide":
            stream.hostile(own + b",1.0" + draw(ends))
        else:
            stream.hostile(own.rsplit(b",", 1)[0] + draw(ends))
    good_row()
    return stream


def feed_text(framer: TextFramer, decoder: TextDecoder, data: bytes, sizes: list[int]):
    values = []
    for i, chunk in enumerate(chunks_of(data, sizes)):
        block = decoder.decode(framer.feed(chunk), float(i))
        if block is not None:
            values.append(block.values)
    return np.vstack(values) if values else np.empty((0, 3))


def steady_text_pair(max_line: int = MAX_LINE) -> tuple[TextFramer, TextDecoder]:
    """Framer and decoder after a good header and the first rows (the steady state)."""
    framer, decoder = TextFramer(max_line), TextDecoder()
    decoder.decode(framer.feed(b"\n" + HEADER + b"\n1.0,2.0,3.0\n4.0,5.0,6.0\n"), 0.0)
    assert decoder.schema is not None and decoder.schema.channels == ("load", "current", "vib")
    return framer, decoder


@hostile(200)
@given(draws=st.data(), stream=text_streams(), sizes=chunkings)
def test_text_stream_keeps_every_whole_good_line_and_counts_every_bad_one(draws, stream, sizes):
    longest = max(len(HEADER), *(len(g[3]) - 1 for g in stream.goods))
    max_line = draws.draw(limits(longest, MAX_LINE))
    framer, decoder = steady_text_pair(max_line)
    bad_before = framer.bad.count + decoder.bad.count
    values = feed_text(framer, decoder, bytes(stream.data), sizes)
    data = bytes(stream.data)
    goods = good_spans(stream, b"\r\n")
    rows, kept, bad = [], [], 0
    for start, end in spans(data, LINE_END):
        line = data[start:end]
        if len(line) > max_line:
            bad += 1                                      # framer: over-long, blank or not
        elif not line or line.isspace():
            continue                                      # idle blank line
        elif line.strip() == HEADER:
            continue                                      # the board re-sent its header
        elif (row := reads_as_row(line)) is None:
            bad += 1                                      # decoder: not a row
        else:
            rows.append(row)
            if (start, end) in goods:
                kept.append(goods[(start, end)])
                assert np.array_equal(row, stream.goods[kept[-1]][2], equal_nan=True)
    assert data.endswith(b"\n")
    np.testing.assert_array_equal(values, np.array(rows, dtype=np.float64).reshape(-1, 3))
    assert framer.bad.count + decoder.bad.count - bad_before == bad
    # every good row that arrived as a whole line is kept; one is lost only when the
    # hostile bytes right before it did not end their line
    for index, (_, _, _, _, offset) in enumerate(stream.goods):
        if index not in kept:
            assert offset > 0 and data[offset - 1] not in b"\r\n"


# numpy.loadtxt (the fast path) reads bytes as latin-1 and takes 0x1C-0x1F, 0x85 and 0xA0
# for whitespace, float() (the checked path) does not: such a line must get one verdict.
@pytest.mark.parametrize("junk", [b"\xa01.5,2.0,3.0", b"1.5\x1c,2.0,3.0", b"1.5,2.0,3.0\x85"])
def test_a_line_is_judged_the_same_whatever_else_arrived_with_it(junk):
    verdicts = []
    for batch in ([junk, b"4.0,5.0,6.0"], [junk, b"4.0,5.0,6.0", b"x"]):
        _, decoder = steady_text_pair()
        block = decoder.decode(batch, 1.0)
        verdicts.append((block.values[:, 0].tolist(), decoder.bad.count - (len(batch) == 3)))
    assert verdicts[0] == verdicts[1]


# a whitespace-only line over max_line is overlong whether it arrives in one read or two
def test_an_overlong_blank_line_is_counted_alike_in_one_read_or_two():
    line = b"1,2,3\n" + b" " * 200 + b"\n4,5,6\n"
    counts = []
    for sizes in ([len(line)], [150, len(line)]):
        framer, _ = steady_text_pair()
        before = framer.bad.count
        for chunk in chunks_of(line, sizes):
            framer.feed(chunk)
        counts.append(framer.bad.count - before)
    assert counts[0] == counts[1]
