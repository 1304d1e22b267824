"""COBS, SLIP and sync-word framers: reference encodings, round trips, resynchronisation."""

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.framing_binary import (
    CobsFramer,
    SlipFramer,
    StuffingError,
    SyncFramer,
    cobs_decode,
    cobs_encode,
    make_framer,
    slip_decode,
    slip_encode,
    sync_encode,
)

RUN_254 = bytes(range(1, 255))          # 01..FE
RUN_255 = bytes(range(1, 256))          # 01..FF

# (data, encoded with delimiter). The first two are the examples of the issue,
# the rest the usual reference set for COBS (Cheshire and Baker 1999 defines
# the scheme; the byte strings of the long runs are recalled from memory of the
# common reference examples).
COBS_REFERENCE = [
    (b"\x00", b"\x01\x01\x00"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33\x00"),
    (b"\x00\x00", b"\x01\x01\x01\x00"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01\x00"),
    (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44\x00"),
    (RUN_254, b"\xff" + RUN_254 + b"\x00"),
    (b"\x00" + RUN_254, b"\x01\xff" + RUN_254 + b"\x00"),
    (RUN_255, b"\xff" + RUN_254 + b"\x02\xff\x00"),
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01\x00"),
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01\x00"),
]


@pytest.mark.parametrize(("data", "encoded"), COBS_REFERENCE)
def test_cobs_reference_encodings(data, encoded):
    assert cobs_encode(data) == encoded
    assert cobs_decode(encoded[:-1]) == data
    assert CobsFramer().feed(encoded) == [data]


def test_cobs_254_run_with_optional_trailing_code_decodes_the_same():
    # Some encoders close a 254-byte run with an extra 01 code (common practice).
    assert cobs_decode(b"\xff" + RUN_254 + b"\x01") == RUN_254


@pytest.mark.parametrize(("block", "reason"), [
    (b"\x05\x11\x22", "past the frame end"),
    (b"\x02\x11\x09", "past the frame end"),
])
def test_cobs_bad_stuffing_raises(block, reason):
    with pytest.raises(StuffingError, match=reason):
        cobs_decode(block)


def test_slip_escapes_follow_rfc_1055():
    # RFC 1055: END = C0, ESC = DB, ESC_END = DC, ESC_ESC = DD.
    assert slip_encode(b"\x01\xc0\x02\xdb\x03") == b"\xc0\x01\xdb\xdc\x02\xdb\xdd\x03\xc0"
    assert slip_decode(b"\x01\xdb\xdc\x02\xdb\xdd\x03") == b"\x01\xc0\x02\xdb\x03"
    assert slip_decode(b"\xdb\xdd\xdb\xdc") == b"\xdb\xc0"


@pytest.mark.parametrize("block", [b"\x01\xdb", b"\x01\xdb\x05\x02"])
def test_slip_bad_escape_raises(block):
    with pytest.raises(StuffingError):
        slip_decode(block)


@pytest.mark.parametrize(("encode", "framer_class"), [(cobs_encode, CobsFramer),
                                                     (slip_encode, SlipFramer)])
@settings(max_examples=150, deadline=None)
@given(frames=st.lists(st.binary(min_size=1, max_size=600), min_size=1, max_size=6),
       chunk=st.integers(1, 50))
def test_round_trip_through_the_framer_in_any_chunking(encode, framer_class, frames, chunk):
    wire = b"".join(encode(f) for f in frames)
    assert wire.count(framer_class.delimiter) >= len(frames)
    framer = framer_class()
    got = []
    for i in range(0, len(wire), chunk):
        got += framer.feed(wire[i:i + chunk])
    assert got == frames
    assert framer.bad.count == 0


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=1000))
def test_cobs_overhead_is_at_most_one_byte_per_254(data):
    # Cheshire and Baker 1999: worst-case overhead ceil(n/254) bytes (plus the delimiter).
    encoded = cobs_encode(data)
    assert len(encoded) - 1 <= len(data) + max(1, -(-len(data) // 254))
    assert b"\x00" not in encoded[:-1]


def test_cobs_framer_counts_bad_stuffing_and_carries_on():
    framer = CobsFramer()
    good = cobs_encode(b"\x01\x02\x00\x03")
    wire = good + b"\x07\x01\x02\x00" + good  # a code byte pointing past the frame end
    assert framer.feed(wire) == [b"\x01\x02\x00\x03"] * 2
    assert framer.bad.count == 1
    assert "past the frame end" in framer.bad.last_reason


def test_cut_frame_at_port_open_is_skipped_not_counted():
    framer = CobsFramer()
    good = cobs_encode(b"\x10\x20\x30")
    assert framer.feed(b"\x09\x44" + b"\x00" + good) == [b"\x10\x20\x30"]
    assert framer.bad.count == 0
    assert framer.skipped_start == 1


def test_overlong_run_without_delimiter_is_counted_once_and_dropped():
    framer = CobsFramer(max_frame=64)
    good = cobs_encode(b"\x05" * 10)
    out = framer.feed(good)
    for _ in range(10):
        out += framer.feed(b"\x01" * 50)
    out += framer.feed(b"\x00" + good)
    assert out == [b"\x05" * 10] * 2
    assert framer.overlong == 1
    assert framer.bad.count == 1


def test_sync_framer_resynchronises_after_garbage_and_false_sync():
    frame = bytes(range(20))
    framer = SyncFramer(frame_length=20, check=frame.__eq__)
    # garbage holding a false sync word with a plausible length
    garbage = b"\x13\xa5\x5a\x14" + b"\x99" * 7
    wire = sync_encode(frame) + garbage + sync_encode(frame) + sync_encode(frame)
    got = []
    for i in range(0, len(wire), 5):
        got += framer.feed(wire[i:i + 5])
    assert got == [frame] * 3
    # the stray byte before the false sync word, then the false frame; the rest
    # of the false frame is not counted again as stray bytes
    assert framer.bad.count == 2
    assert framer.bad.last_reason == "checksum mismatch"


def test_sync_framer_counts_bad_length_and_stray_bytes():
    frame = b"\x01" * 8
    framer = SyncFramer(frame_length=8)
    wire = (sync_encode(frame) + b"\xa5\x5a\x30" + sync_encode(frame)
            + b"\x11\x22\x33" + sync_encode(frame))
    assert framer.feed(wire) == [frame] * 3
    assert framer.bad.count == 2
    assert framer.garbage_bytes == 3 + 3


def test_sync_framer_without_fixed_length_uses_the_length_field():
    framer = SyncFramer(length_bytes=2)
    frames = [b"\x01", b"\x02" * 300, b"\x03" * 7]
    wire = b"".join(sync_encode(f, length_bytes=2) for f in frames)
    assert framer.feed(wire) == frames


def test_make_framer_refuses_unknown_names():
    assert isinstance(make_framer("slip"), SlipFramer)
    with pytest.raises(ValueError, match="cobs, slip or sync"):
        make_framer("hdlc")
    with pytest.raises(ValueError, match="length_bytes"):
        SyncFramer(length_bytes=3)


def test_sync_framer_counts_a_corrupt_frame_once_even_with_false_syncs_inside():
    frame = b"\x01\x02" + b"\xa5\x5a\x10" + bytes(11)    # holds a sync word and length 16
    corrupt = b"\x01\x03" + frame[2:]
    framer = SyncFramer(frame_length=16, check=frame.__eq__)
    wire = sync_encode(frame) + sync_encode(corrupt) + sync_encode(frame)
    assert framer.feed(wire[:20]) + framer.feed(wire[20:]) == [frame, frame]
    assert framer.bad.count == 1
