"""BinaryDecoder: layouts, CRC checking and stripping, device time and counter, bad frames."""

import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.crc import crc_algorithm
from monitor.decoding_binary import BinaryDecoder, parse_layout
from monitor.framing_binary import SyncFramer, make_framer
from monitor.sim.binary import encode_samples, sim_layout

FIELDS = ["seq", "t_us", "load[kg]", "current [A]", "vib[g]"]


def frames_for(layout, rows, crc="none"):
    """Payloads packed by the struct module itself (the outside reference)."""
    algorithm = crc_algorithm(crc)
    order = "big" if layout[0] in ">!" else "little"
    out = []
    for row in rows:
        payload = struct.pack(layout, *row)
        out.append(algorithm.append(payload, order) if algorithm else payload)
    return out


@pytest.mark.parametrize("crc", ["none", "crc16-ccitt", "crc16-modbus", "crc32"])
@pytest.mark.parametrize("layout", ["<HI3f", ">HI3f", "!HI3f", "<H2xI3d"])
def test_decodes_what_struct_packs(layout, crc):
    rows = [(i, 1000 * i, 0.5 * i, -1.25, 3.0e-3 * i) for i in range(50)]
    decoder = BinaryDecoder(layout, FIELDS, crc=crc, time_field="t_us", time_unit="us",
                            counter_field="seq")
    block = decoder.decode(frames_for(layout, rows, crc), t_host=12.5)
    assert decoder.schema.channels == ("load", "current", "vib")
    assert decoder.schema.units == ("kg", "A", "g")
    assert decoder.schema.time_column == "t_us" and decoder.schema.counter_column == "seq"
    expected = np.array([r[2:] for r in rows], dtype=np.float32 if "f" in layout else float)
    np.testing.assert_array_equal(block.values, expected.astype(np.float64))
    np.testing.assert_allclose(block.t_dev, np.arange(50) * 1e-3)
    np.testing.assert_array_equal(block.counter, np.arange(50))
    assert block.t_host.tolist() == [12.5] * 50
    assert decoder.bad.count == 0


def test_bad_crc_and_wrong_length_are_counted_and_the_rest_decoded():
    rows = [(i, 4000 * i, 1.0, 2.0, 3.0) for i in range(10)]
    frames = frames_for("<HI3f", rows, "crc16-ccitt")
    corrupt = bytearray(frames[3])
    corrupt[5] ^= 0x10
    frames[3] = bytes(corrupt)
    frames[6] = frames[6][:-1]
    decoder = BinaryDecoder("<HI3f", FIELDS, crc="crc16-ccitt", counter_field="seq")
    block = decoder.decode(frames, 0.0)
    assert len(block) == 8
    assert decoder.bad.count == 2
    assert decoder.dropped == 2
    assert block.counter.tolist() == [0, 1, 2, 4, 5, 7, 8, 9]
    assert len(decoder.take_gaps()) == 2


def test_all_bad_gives_none():
    decoder = BinaryDecoder("<3f", ["a", "b", "c"], crc="crc32")
    assert decoder.decode([b"\x02" * 3], 0.0) is None
    assert decoder.bad.last_reason == "3 bytes, expected 16"
    assert decoder.decode([b"\x01" * 16], 0.0) is None
    assert decoder.bad.last_reason == "checksum mismatch"
    assert decoder.bad.count == 2
    assert decoder.decode([], 0.0) is None


def test_crc_ok_serves_the_sync_framer():
    decoder = BinaryDecoder("<HI3f", FIELDS, crc="crc16-modbus")
    good = frames_for("<HI3f", [(1, 2, 3.0, 4.0, 5.0)], "crc16-modbus")[0]
    assert decoder.crc_ok(good)
    assert not decoder.crc_ok(good[:-1] + bytes([good[-1] ^ 1]))
    framer = SyncFramer(frame_length=decoder.frame_size, check=decoder.crc_ok)
    assert framer.feed(b"\xa5\x5a" + bytes([len(good)]) + good) == [good]


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 300), chunk=st.integers(1, 97),
       framing=st.sampled_from(["cobs", "slip", "sync"]),
       crc=st.sampled_from(["none", "crc16-ccitt", "crc16-modbus", "crc32"]),
       seed=st.integers(0, 1000))
def test_sim_frames_round_trip(n, chunk, framing, crc, seed):
    rng = np.random.default_rng(seed)
    values = rng.normal(0, 100, size=(n, 3))
    start = int(rng.integers(0, 2**32))
    counters = np.arange(n) + start
    t_us = counters * 4000
    wire = encode_samples(values, counters, t_us, framing, crc)
    layout, fields = sim_layout(3)
    decoder = BinaryDecoder(layout, fields, crc=crc, time_field="t_us", time_unit="us",
                            counter_field="seq")
    framer = make_framer(framing, frame_length=decoder.frame_size, check=decoder.crc_ok)
    blocks = [decoder.decode(framer.feed(wire[i:i + chunk]), 0.0)
              for i in range(0, len(wire), chunk)]
    blocks.append(decoder.flush(0.0))     # a session's first frame waits for its second
    blocks = [b for b in blocks if b is not None]
    got = np.concatenate([b.values for b in blocks])
    np.testing.assert_array_equal(got, values.astype(np.float32))
    t_dev = np.concatenate([b.t_dev for b in blocks])
    np.testing.assert_allclose(np.diff(t_dev), 0.004, atol=1e-9)
    assert decoder.dropped == 0 and decoder.bad.count == 0 and framer.bad.count == 0


def test_float_time_field_has_no_wrap_and_timing_is_reported():
    rows = [(0.002 * i, float(i)) for i in range(100)]
    decoder = BinaryDecoder("<df", ["t_s", "x"], time_field="t_s", time_unit="s")
    block = decoder.decode(frames_for("<df", rows), 0.0)
    np.testing.assert_allclose(block.t_dev, [r[0] for r in rows])
    assert decoder.timing().rate_hz == pytest.approx(500.0)
    assert block.counter is None


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"layout": "HI3f"}, "byte order"),
    ({"layout": "<HI3s"}, "allowed codes"),
    ({"layout": "<HI3f?z"}, "allowed codes"),
    ({"layout": "<HI2f"}, "one name per value"),
    ({"crc": "crc8"}, "crc16-ccitt"),
    ({"time_field": "clock"}, "not one of the fields"),
    ({"counter_field": "load"}, "integer field"),
    ({"fields": ["seq", "seq", "a", "b", "c"]}, "unique"),
    ({"time_field": "load", "time_bits": 16}, "integer time field"),
    ({"time_field": "t_us"}, "integer ticks; give their unit"),
    ({"time_field": "seq", "counter_field": "seq"}, "two different fields"),
    ({"counter_field": "seq", "counter_bits": 32}, "exceed the 16-bit field"),
])
def test_bad_options_name_what_to_fix(kwargs, message):
    options = {"layout": "<HI3f", "fields": FIELDS} | kwargs
    layout = options.pop("layout")
    fields = options.pop("fields")
    with pytest.raises(ValueError, match=message):
        BinaryDecoder(layout, fields, **options)


def test_layout_sizes_match_struct():
    for layout in ["<HI8f", ">b2xhq", "<?e3d", "<10H"]:
        _, items = parse_layout(layout)
        assert items[-1][1] + items[-1][2] == struct.calcsize(layout)


def test_bench_part_runs_quick_and_decodes_every_frame():
    from monitor.bench.binary import run

    metrics = run(quick=True)
    assert set(metrics) >= {"binary_decode_mb_per_s", "binary_reference_mb_per_s",
                            "binary_ratio", "binary_ok"}
    assert metrics["binary_decode_mb_per_s"] > 0 and metrics["binary_ratio"] > 0


@pytest.mark.parametrize("framing", ["cobs", "slip", "sync"])
def test_sim_bit_errors_are_caught_by_the_crc_and_seen_as_drops(framing):
    n = 400
    flip = np.zeros(n, dtype=bool)
    flip[[17, 18, 200, 399 - 5]] = True
    values = np.linspace(0.0, 1.0, 3 * n).reshape(n, 3)
    wire = encode_samples(values, np.arange(n), np.arange(n) * 4000, framing, "crc16-ccitt",
                          flip)
    layout, fields = sim_layout(3)
    decoder = BinaryDecoder(layout, fields, crc="crc16-ccitt", counter_field="seq",
                            time_field="t_us", time_unit="us")
    framer = make_framer(framing, frame_length=decoder.frame_size, check=decoder.crc_ok)
    block = decoder.decode(framer.feed(wire), 0.0)
    assert len(block) == n - 4
    np.testing.assert_array_equal(block.values, values[~flip].astype(np.float32))
    assert framer.bad.count + decoder.bad.count == 4
    assert decoder.dropped == 4
