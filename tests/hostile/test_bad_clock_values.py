"""One bad value in a device-time or counter column is one bad frame, never a broken clock.

Attacks: NaN, inf, an absurd jump ahead, a jump back that the next frame does not
follow, in the time column (text with and without --time-unit/--time-bits, binary
float and integer fields); NaN, 1e20, negative, fractional values and a one-frame jump
in a counter column (text and binary). Each must cost exactly that frame (counted,
shown as the last bad frame) and leave every other frame, the time base, the measured
rate and the dropped count as if it had not been sent. Real board behaviour still
works as before: a reset (clock or counter back to zero, then counting on) is a gap,
a pause or lost frames is a forward step that the next frames follow.

What is expected is worked out from the frames the board meant to send (the clean
stream), never by asking tunetrace.
"""

from __future__ import annotations

import csv
import io
import os
import struct
import subprocess
import sys
import time

import numpy as np
import pytest
from hostile_profile import hostile
from hypothesis import given
from hypothesis import strategies as st

from monitor.decoding import TextDecoder
from monitor.decoding_binary import BinaryDecoder
from monitor.devicetime import DeviceClock, SequenceCounter
from monitor.framed_source import FramedSource
from monitor.framing_binary import CobsFramer
from monitor.sources import open_byte_source

RATE = 250.0
STEP_MS = 4.0


def text_rows(n: int, start_ms: float = 0.0) -> list[tuple[int, float, float]]:
    """(seq, t_ms, load kg) of a weigh-station board at 250 Hz."""
    return [(k, start_ms + STEP_MS * k, round(12.0 + 0.01 * (k % 7), 4)) for k in range(n)]


def line(row) -> bytes:
    return ",".join(str(v) for v in row).encode()


def decode_all(decoder, frames, reads: int = 3):
    """Feed `frames` in `reads` reads, then flush; the blocks' rows, t_dev and counters."""
    parts = np.array_split(np.arange(len(frames)), reads)
    blocks = [decoder.decode([frames[i] for i in part], float(j)) for j, part in
              enumerate(parts)]
    blocks.append(decoder.flush(99.0))
    blocks = [b for b in blocks if b is not None]
    values = np.vstack([b.values for b in blocks])
    t_dev = np.concatenate([b.t_dev for b in blocks]) if blocks[0].t_dev is not None else None
    counter = (np.concatenate([b.counter for b in blocks]) if blocks[0].counter is not None
               else None)
    return values, t_dev, counter


TEXT_ATTACKS = {
    "nan time": (1, b"nan"), "inf time": (1, b"inf"), "-inf time": (1, b"-inf"),
    "time far ahead": (1, b"4000000000000"), "time far back": (1, b"-999999"),
    "nan counter": (0, b"nan"), "huge counter": (0, b"1e20"), "negative counter": (0, b"-3"),
    "fractional counter": (0, b"17.5"), "counter far ahead": (0, b"40000"),
}


@pytest.mark.parametrize("attack", sorted(TEXT_ATTACKS))
@pytest.mark.parametrize("unwrap", [False, True])
def test_one_bad_text_value_costs_one_frame(attack, unwrap):
    field, value = TEXT_ATTACKS[attack]
    clean = text_rows(60)
    frames = [b"seq,t_ms,load[kg]"] + [line(r) for r in clean]
    victim = 31
    fields = frames[1 + victim].split(b",")
    fields[field] = value
    frames[1 + victim] = b",".join(fields)
    options = ({"clock": DeviceClock("ms", 32), "sequence": SequenceCounter(16)}
               if unwrap else {})
    decoder = TextDecoder(time_column="t_ms", counter_column="seq", **options)
    values, t_dev, counter = decode_all(decoder, frames)
    keep = [r for k, r in enumerate(clean) if k != victim]
    np.testing.assert_array_equal(values[:, 0], [r[2] for r in keep])
    np.testing.assert_allclose(t_dev, [r[1] / 1000 for r in keep], rtol=0, atol=1e-12)
    assert counter.tolist() == [r[0] for r in keep]
    assert decoder.bad.count == 1 and decoder.bad.last == frames[1 + victim]
    assert ("t_ms" if field == 1 else "seq") in decoder.bad.last_reason
    # one lost frame, by the counter: exactly the one we spoilt (sample 31 never arrived)
    assert decoder.dropped == 1
    assert decoder.device_rate() == pytest.approx(RATE)
    assert not [g for g in decoder.take_gaps() if "jumped back" in g]


def test_a_real_reset_and_a_real_pause_are_handled_as_before():
    before = text_rows(30)
    after_reset = [(k, STEP_MS * k, 3.0) for k in range(30)]            # board reset
    after_pause = [(k + 50, STEP_MS * (k + 50), 3.5) for k in range(30, 60)]  # 50 lost
    frames = [b"seq,t_ms,load"] + [line(r) for r in before + after_reset + after_pause]
    decoder = TextDecoder(time_column="t_ms", counter_column="seq",
                          clock=DeviceClock("ms", 32), sequence=SequenceCounter(16))
    values, t_dev, counter = decode_all(decoder, frames, reads=7)
    assert len(values) == 90 and decoder.bad.count == 0
    gaps = decoder.take_gaps()
    assert sum("jumped back" in g for g in gaps) == 2                  # clock and counter
    assert decoder.sequence.restarts == 1 and decoder.dropped == 50
    assert np.all(np.diff(t_dev) > 0)                                   # time base whole


def test_a_bad_first_value_does_not_become_the_time_base():
    clean = text_rows(40)
    frames = [b"seq,t_ms,load"] + [line(r) for r in clean]
    frames[1] = b"0,9e15,12.0"
    decoder = TextDecoder(time_column="t_ms", counter_column="seq",
                          clock=DeviceClock("ms", None))
    values, t_dev, _ = decode_all(decoder, frames, reads=1)
    np.testing.assert_allclose(t_dev, [r[1] / 1000 for r in clean[1:]])
    assert decoder.bad.count == 1 and not decoder.take_gaps()


def test_record_from_stdin_stores_no_broken_counter_or_clock(tmp_path):
    clean = text_rows(300)
    frames = [b"seq,t_ms,load[kg]"] + [line(r) for r in clean]
    frames[101] = b"100,nan,12.0"
    frames[201] = b"1e20,800.0,12.0"
    out = tmp_path / "rec.csv"
    result = subprocess.run([sys.executable, "-m", "monitor", "record", "-", "-o", str(out),
                             "--time-column", "t_ms", "--time-unit", "ms",
                             "--counter-column", "seq", "--counter-bits", "16"],
                            input=b"\n".join(frames) + b"\n", capture_output=True, timeout=60)
    assert result.returncode == 0, result.stderr.decode()
    text = out.read_text()
    assert "-9223372036854775808" not in text and "nan" not in text.lower().split("# ")[-1]
    rows = list(csv.DictReader(io.StringIO("\n".join(
        x for x in text.splitlines() if not x.startswith("#")))))
    keep = [r for k, r in enumerate(clean) if k not in (100, 200)]
    assert [int(r["seq"]) for r in rows] == [r[0] for r in keep]
    np.testing.assert_allclose([float(r["t_ms"]) for r in rows], [r[1] / 1000 for r in keep])
    assert "298 frames, 2 bad" in (result.stdout + result.stderr).decode()


# -- binary frames --------------------------------------------------------------------------

def cobs(data: bytes) -> bytes:
    """COBS (Cheshire and Baker 1999) for frames under 254 bytes, plus the 0x00 delimiter."""
    out, block = bytearray(), bytearray()
    for byte in data + b"\x00":
        if byte == 0:
            out += bytes([len(block) + 1]) + block
            block.clear()
        else:
            block.append(byte)
    return bytes(out) + b"\x00"


def binary_frames(layout: str, rows) -> list[bytes]:
    return [struct.pack(layout, *row) for row in rows]


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), 1e9, -50.0])
def test_one_bad_float_time_field_costs_one_frame(bad):
    rows = [(k, 0.004 * k, 12.0 + k) for k in range(50)]
    frames = binary_frames("<Hdf", rows)
    frames[20] = struct.pack("<Hdf", 20, bad, 32.0)
    decoder = BinaryDecoder("<Hdf", ["seq", "t_s", "load[kg]"], time_field="t_s",
                            time_unit="s", counter_field="seq")
    values, t_dev, counter = decode_all(decoder, frames, reads=4)
    keep = [r for r in rows if r[0] != 20]
    np.testing.assert_allclose(t_dev, [r[1] for r in keep])
    assert values[:, 0].tolist() == [r[2] for r in keep]
    assert decoder.bad.count == 1 and decoder.bad.last == frames[20]
    assert decoder.device_rate() == pytest.approx(RATE)
    assert decoder.clock.resets == 0 and decoder.dropped == 1


@pytest.mark.parametrize("field,bad", [("t", 2**31 + 12345), ("t", 3), ("seq", 40000),
                                       ("seq", 7)])
def test_one_bad_integer_time_or_counter_field_costs_one_frame(field, bad):
    rows = [(1000 + k, 4000 * k + 10**6, 12.0 + k) for k in range(50)]
    spoilt = list(rows[25])
    spoilt[0 if field == "seq" else 1] = bad
    frames = binary_frames("<HIf", rows)
    frames[25] = struct.pack("<HIf", *spoilt)
    decoder = BinaryDecoder("<HIf", ["seq", "t_us", "load"], time_field="t_us",
                            time_unit="us", counter_field="seq")
    values, t_dev, counter = decode_all(decoder, frames, reads=5)
    keep = [r for k, r in enumerate(rows) if k != 25]
    assert counter.tolist() == [r[0] for r in keep]
    np.testing.assert_allclose(t_dev, [r[1] * 1e-6 for r in keep])
    assert decoder.bad.count == 1 and decoder.dropped == 1
    assert decoder.clock.resets == 0 and decoder.counter.restarts == 0
    assert not decoder.take_gaps()[1:]          # only the one lost frame, no reset


def test_binary_frames_with_a_bad_clock_over_a_pty():
    master, slave = os.openpty()
    decoder = BinaryDecoder("<HIf", ["seq", "t_us", "load[kg]"], time_field="t_us",
                            time_unit="us", counter_field="seq")
    source = FramedSource(open_byte_source(os.ttyname(slave)), CobsFramer(), decoder, RATE)
    rows = [(k, 4000 * k, 12.0) for k in range(200)]
    frames = binary_frames("<HIf", rows)
    frames[120] = struct.pack("<HIf", 120, 0xFFFFFF00, 99.0)     # one absurd timestamp
    try:
        os.write(master, b"\x00" + b"".join(cobs(f) for f in frames))
        got, end = [], time.monotonic() + 10
        while sum(len(b) for b in got) < 199 and time.monotonic() < end:
            block = source.read_block(0.05)
            if block is not None:
                got.append(block)
    finally:
        source.close()
        for fd in (master, slave):
            os.close(fd)
    t_dev = np.concatenate([b.t_dev for b in got])
    expected = [r[1] * 1e-6 for r in rows if r[0] != 120]            # one time base
    np.testing.assert_allclose(t_dev, expected, rtol=0, atol=1e-9)
    assert len(t_dev) == 199 and source.bad.count == 1 and decoder.clock.resets == 0


# -- generated streams ----------------------------------------------------------------------

@st.composite
def clock_streams(draw):
    """(layout, spoilt raw times, bad indices, resets) of a jittered board clock with real
    resets and pauses (at least five frames apart) and wraps, and single spoilt values
    (never within three frames of a reset or pause or of each other, nor in the first
    three or the last frame)."""
    bits = draw(st.sampled_from([None, 16, 32]))
    layout = {None: "<dd", 16: "<Hd", 32: "<Id"}[bits]
    modulus = float(1 << bits) if bits else None
    step = draw(st.sampled_from([1.0, 4.0] if bits == 16 else [1.0, 4.0, 250.0]))
    room = (modulus / 2 - 4 * step) / step if modulus else 5000.0   # steps a jump may span
    n = draw(st.integers(30, 200))
    t = draw(st.floats(0, modulus - 1 if modulus else 1e6))
    raw, events = [], {}
    for k in range(n):
        kind = None
        spaced = not any(k - e < 5 for e in events)          # a board settles between
        if 5 < k < n - 5 and spaced and draw(st.integers(0, 40)) == 0:
            kind = events[k] = draw(st.sampled_from(["reset", "pause"]))
        if kind == "reset":
            # back by ten steps at least: a reset by a step or two, followed by frames
            # that go on from the old track, cannot be told from one spoilt value
            t = t - step * draw(st.integers(10, int(room))) if modulus else 0.0
        elif kind == "pause":
            t += step * draw(st.integers(200, int(min(room, 1500))))
        elif k:
            t += step * draw(st.floats(0.9, 1.1))
        raw.append(float(round(t) % modulus) if modulus else t)
    bad: set[int] = set()
    for k in draw(st.lists(st.integers(3, n - 2), max_size=6)):
        if not any(abs(k - e) <= 3 for e in events) and not any(abs(k - b) <= 2 for b in bad):
            bad.add(k)
    spoilt = list(raw)
    for k in sorted(bad):
        kind = draw(st.sampled_from(["ahead", "back"] + ([] if modulus else ["nan", "inf"])))
        if kind in ("nan", "inf"):
            spoilt[k] = float(kind)
            continue
        jump = step * draw(st.integers(150, int(min(room, 5000))))
        value = raw[k] + (jump if kind == "ahead" else -jump)
        spoilt[k] = float(round(value) % modulus) if modulus else value
    return layout, spoilt, sorted(bad), sum(e == "reset" for e in events.values())


@hostile(100)
@given(stream=clock_streams(), reads=st.integers(1, 12))
def test_any_clock_keeps_every_good_frame_and_counts_each_spoilt_one(stream, reads):
    layout, spoilt, bad, resets = stream
    decoder = BinaryDecoder(layout, ["t", "x"], time_field="t", time_unit="ms")
    frames = binary_frames(layout, [(v if layout == "<dd" else int(v), float(k))
                                    for k, v in enumerate(spoilt)])
    values, t_dev, _ = decode_all(decoder, frames, reads=reads)
    assert values[:, 0].tolist() == [float(k) for k in range(len(spoilt)) if k not in bad]
    assert decoder.bad.count == len(bad)
    assert decoder.clock.resets == resets
    assert np.all(np.isfinite(t_dev)) and np.all(np.diff(t_dev) >= 0)
