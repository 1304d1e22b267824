"""Pixel helpers for plot tests: which pixels of a read-back image have a palette colour."""

from __future__ import annotations

import numpy as np

from monitor.canvas import palette


def colour_mask(image: np.ndarray, colour: palette.Color, tolerance: int = 3) -> np.ndarray:
    """(H, W) bool: pixels within `tolerance` (8-bit, per channel) of `colour`."""
    want = np.array(palette.to_bytes(colour), np.int16)
    return (np.abs(image[..., :3].astype(np.int16) - want) <= tolerance).all(axis=-1)


def crop(mask: np.ndarray, rect) -> np.ndarray:
    return mask[rect.y:rect.y + rect.h, rect.x:rect.x + rect.w]


def read_png(path) -> np.ndarray:
    """Decode an 8-bit RGB/RGBA PNG (the PNG specification, W3C; no Pillow here) -> (H, W, c)."""
    import struct
    import zlib

    data = open(path, "rb").read()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG file"
    pos, idat, header = 8, b"", None
    while pos < len(data):
        length, kind = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        pos += 12 + length
    width, height, depth, colour_type = header[:4]
    assert depth == 8 and colour_type in (2, 6), "only 8-bit RGB or RGBA"
    channels = 3 if colour_type == 2 else 4
    stride = width * channels
    raw = np.frombuffer(zlib.decompress(idat), np.uint8).reshape(height, stride + 1)
    out = np.zeros((height, stride), np.int32)
    for row in range(height):
        kind, line = raw[row, 0], raw[row, 1:].astype(np.int32)
        above = out[row - 1] if row else np.zeros(stride, np.int32)
        if kind == 0:
            out[row] = line
        elif kind == 2:
            out[row] = (line + above) % 256
        else:   # filters 1, 3, 4 depend on the pixel to the left: one pass along the row
            cur = np.zeros(stride, np.int32)
            for i in range(stride):
                left = cur[i - channels] if i >= channels else 0
                up_left = above[i - channels] if i >= channels else 0
                if kind == 1:
                    pred = left
                elif kind == 3:
                    pred = (left + above[i]) // 2
                else:
                    p = left + above[i] - up_left
                    pa, pb, pc = abs(p - left), abs(p - above[i]), abs(p - up_left)
                    pred = left if pa <= pb and pa <= pc else above[i] if pb <= pc else up_left
                cur[i] = (line[i] + pred) % 256
            out[row] = cur
    return out.astype(np.uint8).reshape(height, width, channels)
