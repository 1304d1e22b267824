"""Bench part "binary": COBS + CRC-16 frames decoded against numpy.frombuffer on bare payloads.

Data: frames of the simulated board's layout with 8 float32 channels plus a
16-bit counter and a 32-bit microsecond time ("<HI8f", 38 bytes), CRC-16/
CCITT-FALSE appended, COBS-stuffed (about 41 bytes on the wire). The wire is
fed in 4096-byte reads, as a USB CDC endpoint hands them over, through the
framer and the decoder exactly as the pipeline calls them.

Reference, same run: numpy.frombuffer of the same samples without framing or
CRC, read through the same structured dtype into a float64 array: the cost of
the data itself, with nothing to find or check.

Target: >= 5 MB/s of wire bytes on one core (5x USB full-speed, about 1 MB/s).

Measured here: about 20-30 MB/s. The COBS framer unstuffs one frame at a time by
slicing whole runs (a few code bytes per 41-byte frame); a numpy variant that
follows the code chains of all frames of a read at once was tried and measured
no faster on 4 KB reads, so the simpler one stays.
"""

from __future__ import annotations

import numpy as np

from monitor.bench import best_of
from monitor.decoding_binary import BinaryDecoder
from monitor.framing_binary import CobsFramer
from monitor.sim.binary import encode_samples, sim_layout

TARGET_MB_PER_S = 5.0
CHANNELS = 8
READ_BYTES = 4096


def run(quick: bool) -> dict[str, float | int | str | bool]:
    """Metrics: binary_decode_mb_per_s, binary_frames_per_s, binary_reference_mb_per_s,
    binary_ratio (decode / reference speed), binary_ok (decode meets 5 MB/s; full runs only)."""
    n = 5_000 if quick else 200_000
    repeats = 1 if quick else 3
    rng = np.random.default_rng(8)
    values = rng.normal(0.0, 50.0, size=(n, CHANNELS))
    counters = np.arange(n)
    wire = encode_samples(values, counters, counters * 4000, "cobs", "crc16-ccitt")
    reads = [wire[i:i + READ_BYTES] for i in range(0, len(wire), READ_BYTES)]
    layout, fields = sim_layout(CHANNELS)

    decoded_rows = []

    def decode_all() -> None:
        framer = CobsFramer()
        decoder = BinaryDecoder(layout, fields, crc="crc16-ccitt",
                                time_field="t_us", time_unit="us", counter_field="seq")
        rows = 0
        for chunk in reads:
            block = decoder.decode(framer.feed(chunk), 0.0)
            if block is not None:
                rows += len(block)
        decoded_rows.append(rows)

    record = np.dtype([("seq", "<u2"), ("t_us", "<u4"), ("v", "<f4", (CHANNELS,))])
    samples = np.empty(n, dtype=record)
    samples["seq"], samples["t_us"], samples["v"] = counters, counters * 4000, values
    bare = samples.tobytes()

    def reference() -> None:
        records = np.frombuffer(bare, dtype=record)
        records["v"].astype(np.float64)
        records["t_us"].astype(np.float64)

    decode_s = best_of(repeats, decode_all)
    reference_s = best_of(repeats, reference)
    if decoded_rows[-1] != n:
        raise RuntimeError(f"binary bench decoded {decoded_rows[-1]} of {n} frames")
    decode_mb = len(wire) / decode_s / 1e6
    reference_mb = len(bare) / reference_s / 1e6
    return {
        "binary_frame_bytes_on_wire": round(len(wire) / n, 2),
        "binary_decode_mb_per_s": decode_mb,
        "binary_frames_per_s": n / decode_s,
        "binary_reference_mb_per_s": reference_mb,
        "binary_ratio": decode_mb / reference_mb,
        "binary_ok": bool(decode_mb >= TARGET_MB_PER_S),
    }
