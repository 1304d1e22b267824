"""CRC check values and the batched CRC against the one-frame functions."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.crc import (
    crc16_ccitt_false,
    crc16_modbus,
    crc32_ieee,
    crc_algorithm,
    crc_rows,
)

CHECK = b"123456789"


def test_published_check_values():
    # Check values for "123456789" from the catalogue of parametrised CRC algorithms
    # (CRC-16/CCITT-FALSE, CRC-16/MODBUS, CRC-32). The values are from memory; CRC-32 and
    # CRC-16/CCITT-FALSE agree with Python's binascii.crc32 and binascii.crc_hqx(data, 0xFFFF).
    assert crc16_ccitt_false(CHECK) == 0x29B1
    assert crc16_modbus(CHECK) == 0x4B37
    assert crc32_ieee(CHECK) == 0xCBF43926


def test_batched_crc_matches_published_check_values():
    rows = np.frombuffer(CHECK * 3, dtype=np.uint8).reshape(3, 9)
    # Same catalogue check values, computed by the numpy table loop.
    assert crc_rows("crc16-ccitt", rows).tolist() == [0x29B1] * 3
    assert crc_rows("crc16-modbus", rows).tolist() == [0x4B37] * 3
    assert crc_rows("crc32", rows).tolist() == [0xCBF43926] * 3


def test_modbus_sends_low_byte_first():
    # Modbus over serial line v1.02, 6.2.2: the CRC low-order byte is sent first.
    framed = crc_algorithm("crc16-modbus").append(CHECK, "big")
    assert framed[-2:] == bytes([0x37, 0x4B])


def test_other_checksums_follow_the_layout_byte_order():
    algorithm = crc_algorithm("crc16-ccitt")
    assert algorithm.append(CHECK, "big")[-2:] == bytes([0x29, 0xB1])
    assert algorithm.append(CHECK, "little")[-2:] == bytes([0xB1, 0x29])
    assert crc_algorithm("crc32").append(CHECK, "little")[-4:] == bytes([0x26, 0x39, 0xF4, 0xCB])


def test_unknown_name_is_refused_with_the_allowed_names():
    assert crc_algorithm("none") is None
    with pytest.raises(ValueError, match="crc16-modbus"):
        crc_algorithm("crc8")


@settings(max_examples=60, deadline=None)
@given(length=st.integers(1, 64), count=st.integers(1, 8), seed=st.integers(0, 2**32 - 1))
def test_batched_crc_equals_one_frame_crc(length, count, seed):
    rows = np.random.default_rng(seed).integers(0, 256, size=(count, length), dtype=np.uint8)
    for name, single in (("crc16-ccitt", crc16_ccitt_false), ("crc16-modbus", crc16_modbus),
                         ("crc32", crc32_ieee)):
        expected = [single(row.tobytes()) for row in rows]
        assert crc_rows(name, rows).tolist() == expected


def test_single_bit_errors_are_all_caught():
    # Every CRC here detects every single-bit error (common practice: any CRC
    # whose polynomial has more than one term does).
    frame = bytes(range(40))
    for name in ("crc16-ccitt", "crc16-modbus", "crc32"):
        compute = crc_algorithm(name).compute
        good = compute(frame)
        for bit in range(len(frame) * 8):
            flipped = bytearray(frame)
            flipped[bit // 8] ^= 1 << (bit % 8)
            assert compute(bytes(flipped)) != good
