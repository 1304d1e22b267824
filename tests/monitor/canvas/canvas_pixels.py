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
