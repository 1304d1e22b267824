"""Binary frames over a real pseudo-terminal opened by pyserial: bit errors, drops, garbage.

The board side writes to the pty master from a thread; the monitor side opens
the slave by its device path through monitor.sources (pyserial underneath),
frames and decodes exactly as the pipeline does. Every intact frame must come
out, every corrupt frame and garbage burst must be counted once, and every
frame that never arrived must be seen as dropped by the counter.
"""

from __future__ import annotations

import os
import threading
import time

import numpy as np
import pytest

from monitor.decoding_binary import BinaryDecoder
from monitor.framing_binary import cobs_encode, make_framer, slip_encode, sync_encode
from monitor.sim.binary import encode_samples, sim_layout
from monitor.sources import open_byte_source

N = 1500
CHANNELS = 3
CRC = "crc16-ccitt"
SPECIAL = {
    "cobs": {0x00},
    "slip": {0xC0, 0xDB, 0xDC, 0xDD},
    "sync": {0xA5, 0x5A},
}


def frame_bytes(framing, payload_with_crc):
    encode = {"cobs": cobs_encode, "slip": slip_encode, "sync": sync_encode}[framing]
    return encode(payload_with_crc)


def safe_positions(framing, encoded):
    """Byte offsets of one encoded frame where a bit flip damages only the payload."""
    if framing == "cobs":
        codes, i = set(), 0
        body = encoded[:-1]
        while i < len(body):
            codes.add(i)
            i += body[i]
        return [j for j in range(len(body)) if j not in codes]
    if framing == "slip":
        return [j for j in range(1, len(encoded) - 1)
                if encoded[j] not in SPECIAL["slip"] and encoded[j - 1] != 0xDB]
    return list(range(3, len(encoded)))


def build_session(framing, seed):
    """The wire and what a correct monitor must make of it."""
    rng = np.random.default_rng(seed)
    values = rng.normal(0.0, 20.0, size=(N, CHANNELS))
    counters = np.arange(N) + 65536 - 700          # the 16-bit counter wraps mid-session
    t_us = (2**32 - 3_000_000) + np.arange(N) * 4000  # so does the 32-bit microsecond clock
    frames = [encode_samples(values[i:i + 1], counters[i:i + 1], t_us[i:i + 1], framing, CRC)
              for i in range(N)]
    fate = np.array(["ok"] * N, dtype=object)
    picks = rng.choice(np.arange(5, N - 5), size=90, replace=False)
    fate[picks[:40]] = "corrupt"
    fate[picks[40:70]] = "drop"
    fate[picks[70:]] = "garbage-after"
    wire = bytearray()
    garbage_count = 0
    for i, frame in enumerate(frames):
        if fate[i] == "drop":
            continue
        if fate[i] == "corrupt":
            frame = bytearray(frame)
            while True:
                j = int(rng.choice(safe_positions(framing, bytes(frame))))
                flipped = frame[j] ^ (1 << int(rng.integers(0, 8)))
                if flipped not in SPECIAL[framing]:
                    frame[j] = flipped
                    break
            frame = bytes(frame)
        wire += frame
        if fate[i] == "garbage-after":
            # a burst of noise; for the delimited framings it ends at the next delimiter
            burst = bytes(b for b in rng.integers(1, 256, size=int(rng.integers(3, 30)),
                                                  dtype=np.uint8).tobytes()
                          if b not in SPECIAL[framing])
            if framing == "cobs":
                burst = burst[:-1] + b"\x00" if len(burst) > 1 else b"\x07\x00"
            elif framing == "slip":
                burst = b"\xdb\x01" + burst + b"\xc0"
            wire += burst
            garbage_count += 1
    intact = fate != "drop"
    intact &= fate != "corrupt"
    expected = {
        "values": values[intact].astype(np.float32),
        "t_us": t_us[intact],
        "counters": counters[intact],
        "bad": int((fate == "corrupt").sum()) + garbage_count,
        "dropped": int(((fate == "drop") | (fate == "corrupt")).sum()),
    }
    return bytes(wire), expected


@pytest.mark.parametrize("framing", ["cobs", "slip", "sync"])
def test_pty_carries_binary_frames_with_errors_drops_and_garbage(framing):
    wire, expected = build_session(framing, seed={"cobs": 1, "slip": 2, "sync": 3}[framing])
    master, slave = os.openpty()
    source = open_byte_source(os.ttyname(slave), 921600, reconnect=False)
    layout, fields = sim_layout(CHANNELS)
    decoder = BinaryDecoder(layout, fields, crc=CRC, time_field="t_us", time_unit="us",
                            counter_field="seq")
    framer = make_framer(framing, frame_length=decoder.frame_size, check=decoder.crc_ok)

    def board():
        view = memoryview(wire)
        for start in range(0, len(view), 777):   # uneven writes cut frames anywhere
            os.write(master, view[start:start + 777])

    writer = threading.Thread(target=board, daemon=True)
    writer.start()
    blocks = []
    want = len(expected["counters"])
    deadline = time.monotonic() + 30.0
    try:
        while sum(len(b) for b in blocks) < want and time.monotonic() < deadline:
            data = source.read(0.2)
            if data:
                block = decoder.decode(framer.feed(data), time.monotonic())
                if block is not None:
                    blocks.append(block)
        writer.join(5.0)
    finally:
        source.close()
        os.close(master)
        os.close(slave)

    values = np.concatenate([b.values for b in blocks])
    np.testing.assert_array_equal(values, expected["values"])
    t_dev = np.concatenate([b.t_dev for b in blocks])
    np.testing.assert_allclose(t_dev, expected["t_us"] * 1e-6, atol=1e-9)   # no jump at the wrap
    counter = np.concatenate([b.counter for b in blocks])
    np.testing.assert_array_equal(counter - counter[0],
                                  expected["counters"] - expected["counters"][0])
    assert framer.bad.count + decoder.bad.count == expected["bad"]
    assert decoder.dropped == expected["dropped"]
    gaps = decoder.take_gaps()
    assert gaps and all("dropped" in g for g in gaps)
    assert decoder.timing().rate_hz == pytest.approx(250.0)
