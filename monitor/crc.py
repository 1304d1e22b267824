"""Frame checksums: CRC-16/CCITT-FALSE, CRC-16/MODBUS and CRC-32 (IEEE 802.3).

Parameters follow the catalogue of parametrised CRC algorithms (width, poly,
init, refin/refout, xorout):

    crc16-ccitt   CRC-16/CCITT-FALSE  16  0x1021  0xFFFF  false  0x0000
    crc16-modbus  CRC-16/MODBUS       16  0x8005  0xFFFF  true   0x0000
    crc32         CRC-32 (802.3)      32  0x04C11DB7 0xFFFFFFFF true 0xFFFFFFFF

One frame at a time uses the standard library where it does the job
(binascii.crc_hqx with initial 0xFFFF is CCITT-FALSE; binascii.crc32 is
IEEE 802.3) and a 256-entry table for MODBUS, which binascii lacks. Many frames
of one length at a time use `crc_rows`, a table-driven loop over byte
positions that runs across all frames at once in numpy; no library offers a
batched CRC, hence the hand-written table.
"""

from __future__ import annotations

import binascii
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import numpy as np

CRC_NAMES: tuple[str, ...] = ("none", "crc16-ccitt", "crc16-modbus", "crc32")


def _reflected_table(poly_reflected: int) -> list[int]:
    """Table for a reflected (LSB-first) CRC: entry i is i shifted through 8 steps."""
    table = []
    for i in range(256):
        crc = i
        for _ in range(8):
            crc = (crc >> 1) ^ poly_reflected if crc & 1 else crc >> 1
        table.append(crc)
    return table


def _normal_table(poly: int, width: int) -> list[int]:
    """Table for a non-reflected (MSB-first) CRC of `width` bits."""
    top = 1 << (width - 1)
    mask = (1 << width) - 1
    table = []
    for i in range(256):
        crc = i << (width - 8)
        for _ in range(8):
            crc = ((crc << 1) ^ poly) & mask if crc & top else (crc << 1) & mask
        table.append(crc)
    return table


_MODBUS_TABLE = _reflected_table(0xA001)          # 0x8005 bit-reversed
_CCITT_TABLE = _normal_table(0x1021, 16)
_CRC32_TABLE = _reflected_table(0xEDB88320)       # 0x04C11DB7 bit-reversed


# reflected algorithms for crc_rows: (table, init, xorout)
_REFLECTED = {
    "crc16-modbus": (_MODBUS_TABLE, 0xFFFF, 0),
    "crc32": (_CRC32_TABLE, 0xFFFFFFFF, 0xFFFFFFFF),
}


def crc16_ccitt_false(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of `data` (poly 0x1021, init 0xFFFF, no reflection, no xorout)."""
    return binascii.crc_hqx(data, 0xFFFF)


def crc16_modbus(data: bytes) -> int:
    """CRC-16/MODBUS of `data` (poly 0x8005 reflected, init 0xFFFF, no xorout)."""
    crc = 0xFFFF
    table = _MODBUS_TABLE
    for byte in data:
        crc = (crc >> 8) ^ table[(crc ^ byte) & 0xFF]
    return crc


def crc32_ieee(data: bytes) -> int:
    """CRC-32 as in IEEE 802.3 and zlib (poly 0x04C11DB7 reflected, init and xorout 0xFFFFFFFF)."""
    return binascii.crc32(data) & 0xFFFFFFFF


@dataclass(frozen=True)
class CrcAlgorithm:
    """One checksum as it sits at the end of a frame.

    name:        one of CRC_NAMES except "none".
    size:        bytes the checksum takes at the end of the frame (2 or 4).
    compute:     bytes -> int, the checksum of one frame's covered bytes.
    fixed_order: "little" when the trade fixes the byte order on the wire
                 (MODBUS sends the low byte first, Modbus over serial line
                 specification v1.02, 6.2.2); None when it follows the layout.
    """

    name: str
    size: int
    compute: Callable[[bytes], int]
    fixed_order: str | None = None

    def byte_order(self, layout_order: str) -> str:
        """Byte order of the checksum on the wire: "little" or "big"."""
        return self.fixed_order or layout_order

    def append(self, payload: bytes, layout_order: str = "little") -> bytes:
        """`payload` with its checksum appended in the wire byte order."""
        value = self.compute(payload)
        return payload + value.to_bytes(self.size, self.byte_order(layout_order))


_ALGORITHMS: dict[str, CrcAlgorithm] = {
    "crc16-ccitt": CrcAlgorithm("crc16-ccitt", 2, crc16_ccitt_false),
    "crc16-modbus": CrcAlgorithm("crc16-modbus", 2, crc16_modbus, fixed_order="little"),
    "crc32": CrcAlgorithm("crc32", 4, crc32_ieee),
}


def crc_algorithm(name: str) -> CrcAlgorithm | None:
    """The checksum called `name` (see CRC_NAMES); None for "none".

    Raises ValueError naming the allowed names for anything else.
    """
    if name == "none":
        return None
    try:
        return _ALGORITHMS[name]
    except KeyError:
        raise ValueError(
            f"crc '{name}' is not known; use one of {', '.join(CRC_NAMES)}"
        ) from None


def crc_rows(name: str, rows: np.ndarray) -> np.ndarray:
    """Checksum of every row of `rows`: (n, length) uint8 -> (n,) uint32.

    One table lookup per byte position across all rows, so the Python loop runs
    `length` times whatever n is. Matches the one-frame functions exactly.
    """
    import numpy as np  # here, not at the top: the CLI imports this module at startup

    rows = np.ascontiguousarray(rows, dtype=np.uint8)
    n, length = rows.shape
    if name == "crc16-ccitt":            # MSB first
        table = np.asarray(_CCITT_TABLE, dtype=np.uint32)
        crc = np.full(n, 0xFFFF, dtype=np.uint32)
        for j in range(length):
            crc = ((crc << 8) & 0xFFFF) ^ table[(crc >> 8) ^ rows[:, j]]
        return crc
    if name in _REFLECTED:               # LSB first
        table_list, init, xorout = _REFLECTED[name]
        table = np.asarray(table_list, dtype=np.uint32)
        crc = np.full(n, init, dtype=np.uint32)
        for j in range(length):
            crc = (crc >> 8) ^ table[(crc ^ rows[:, j]) & 0xFF]
        return crc ^ np.uint32(xorout)
    crc_algorithm(name)  # raises for unknown names
    raise ValueError(f"crc '{name}' has no checksum to compute")
