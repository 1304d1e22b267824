"""Binary frames of the simulated board: COBS, SLIP or sync-word frames with counter, time and CRC.

Payload of one sample (little-endian, like the Cortex-M boards it stands for):
    seq   uint16  sample counter, wraps at 65536
    t_us  uint32  device time in microseconds, wraps at 2**32 (about 71.6 min)
    one float32 per channel (load [kg], current [A], vib [g], ...)
then the CRC over the payload, if any. `sim_layout(channels)` gives the layout
and field names for the decoder, so `sim://?format=cobs` needs no options.
"""

from __future__ import annotations

import numpy as np

from monitor.crc import crc_algorithm
from monitor.framing_binary import cobs_encode, slip_encode, sync_encode
from monitor.sim.weighstation import channel_names

SIM_COUNTER_FIELD = "seq"
SIM_COUNTER_BITS = 16
SIM_TIME_FIELD = "t_us"
SIM_TIME_UNIT = "us"
SIM_TIME_BITS = 32

_ENCODERS = {"cobs": cobs_encode, "slip": slip_encode, "sync": sync_encode}


def sim_layout(channels: int) -> tuple[str, list[str]]:
    """(struct layout, field names with units) of the simulated board's payload."""
    names = [f"{name}[{unit}]" for name, unit in channel_names(channels)]
    return f"<HI{channels}f", [SIM_COUNTER_FIELD, SIM_TIME_FIELD, *names]


def encode_samples(values: np.ndarray, counters: np.ndarray, t_us: np.ndarray,
                   framing: str, crc: str, flip: np.ndarray | None = None) -> bytes:
    """Frames for n samples, concatenated as the board would send them.

    values:   (n, k) float64, sent as float32.
    counters: (n,) int, sent modulo 2**16.
    t_us:     (n,) int device time in microseconds, sent modulo 2**32.
    framing:  "cobs", "slip" or "sync"; crc: "none", "crc16-ccitt",
              "crc16-modbus" or "crc32".
    flip:     optional (n,) bool: these frames get one payload bit flipped after
              the CRC is computed, as a bit error on the line would (the CRC
              catches it; without a CRC the wrong value goes through).
    """
    if framing not in _ENCODERS:
        raise ValueError(f"framing '{framing}' is not one of {', '.join(_ENCODERS)}")
    algorithm = crc_algorithm(crc)
    values = np.asarray(values, dtype=np.float64)
    if values.ndim != 2:
        raise ValueError(f"values must be (n, k); got shape {values.shape}")
    n, k = values.shape
    record = np.dtype([("seq", "<u2"), ("t_us", "<u4"), ("v", "<f4", (k,))])
    payloads = np.empty(n, dtype=record)
    payloads["seq"] = np.asarray(counters, dtype=np.int64) % (1 << SIM_COUNTER_BITS)
    payloads["t_us"] = np.asarray(t_us, dtype=np.int64) % (1 << SIM_TIME_BITS)
    payloads["v"] = values
    raw = payloads.tobytes()
    size = record.itemsize
    encode = _ENCODERS[framing]
    out = []
    flipped = set(np.flatnonzero(flip).tolist()) if flip is not None else ()
    for index, start in enumerate(range(0, n * size, size)):
        payload = raw[start:start + size]
        if algorithm is not None:
            payload = algorithm.append(payload, "little")
        if index in flipped:
            bit = (index * 7919) % (8 * size)           # spread over the payload
            damaged = bytearray(payload)
            damaged[bit // 8] ^= 1 << (bit % 8)
            payload = bytes(damaged)
        out.append(encode(payload))
    return b"".join(out)
