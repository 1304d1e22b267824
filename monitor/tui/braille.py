"""Draw sample series into terminal cells with Unicode braille (2 x 4 dots per cell).

Written by hand: rich and textual have no plotting primitive, and a braille
raster is a few numpy lines. Pure numpy, no textual import, so it is testable
and cheap: one (4*height, 2*width) boolean grid per series, OR-ed per cell.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

BRAILLE_BASE = 0x2800
# Unicode braille: bit of the dot at (row 0..3, column 0..1) within a cell.
_DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.int32)


def value_range(series: Sequence[np.ndarray], pad: float = 0.05) -> tuple[float, float]:
    """(low, high) enclosing every finite value of `series`, padded by `pad` of the span."""
    finite = [s[np.isfinite(s)] for s in series if len(s)]
    finite = [f for f in finite if len(f)]
    if not finite:
        return -1.0, 1.0
    low = min(float(f.min()) for f in finite)
    high = max(float(f.max()) for f in finite)
    span = high - low
    if span <= 0:
        span = max(abs(high), 1.0) * 0.1
        return low - span, high + span
    return low - pad * span, high + pad * span


def dot_grid(values: np.ndarray, width: int, height: int,
             low: float, high: float) -> np.ndarray:
    """Dots lit by one series. values: (n,) float64, oldest first, spread over the width.

    Returns a (4*height, 2*width) bool grid, row 0 at the top (= `high`). Each dot
    column shows the min..max of its samples, joined to the previous column so a
    steep edge stays a line. NaN samples leave their column dark.
    """
    rows, cols = 4 * height, 2 * width
    grid = np.zeros((rows, cols), dtype=bool)
    n = len(values)
    if n == 0 or rows == 0 or cols == 0 or not high > low:
        return grid
    scaled = (high - np.asarray(values, dtype=np.float64)) / (high - low) * (rows - 1)
    column = (np.arange(n) * cols) // n if n >= cols else (np.arange(n) * cols) // max(n - 1, 1)
    column = np.minimum(column, cols - 1)
    finite = np.isfinite(scaled)
    lo = np.full(cols, np.inf)
    hi = np.full(cols, -np.inf)
    np.minimum.at(lo, column[finite], scaled[finite])
    np.maximum.at(hi, column[finite], scaled[finite])
    present = np.isfinite(lo)
    if not present.any():
        return grid
    # Join each lit column to the last lit one before it (carry the last sample forward).
    last = np.full(cols, np.nan)
    last_index = np.full(cols, -1)
    np.maximum.at(last_index, column[finite], np.nonzero(finite)[0])
    last[present] = scaled[last_index[present]]
    carried = _forward_fill(last)
    previous = np.concatenate([[np.nan], carried[:-1]])
    join = present & np.isfinite(previous)
    lo[join] = np.minimum(lo[join], previous[join])
    hi[join] = np.maximum(hi[join], previous[join])
    lo_row = np.clip(np.rint(lo), 0, rows - 1)
    hi_row = np.clip(np.rint(hi), 0, rows - 1)
    r = np.arange(rows)[:, None]
    grid[:] = present[None, :] & (r >= lo_row[None, :]) & (r <= hi_row[None, :])
    return grid


def _forward_fill(x: np.ndarray) -> np.ndarray:
    index = np.where(np.isfinite(x), np.arange(len(x)), 0)
    np.maximum.accumulate(index, out=index)
    out = x[index]
    out[~np.isfinite(x[index])] = np.nan
    return out


def cell_codes(grid: np.ndarray) -> np.ndarray:
    """(4*h, 2*w) bool dots -> (h, w) int32 braille bit patterns (0 = empty cell)."""
    rows, cols = grid.shape
    cells = grid.reshape(rows // 4, 4, cols // 2, 2)
    return np.einsum("hrwc,rc->hw", cells.astype(np.int32), _DOT_BITS)


def render_cells(series: Sequence[np.ndarray], width: int, height: int,
                 low: float, high: float) -> tuple[np.ndarray, np.ndarray]:
    """Overlay several series. Returns (codes (h, w) int32, owner (h, w) int8).

    codes: the union of every series' dots per cell; owner: index of the last
    series with a dot in the cell (later series are drawn on top), -1 if empty.
    """
    codes = np.zeros((height, width), dtype=np.int32)
    owner = np.full((height, width), -1, dtype=np.int8)
    for i, values in enumerate(series):
        own = cell_codes(dot_grid(values, width, height, low, high))
        codes |= own
        owner[own != 0] = i
    return codes, owner


def cell_text(codes: np.ndarray) -> list[str]:
    """Rows of braille characters; an empty cell is a space so the background shows."""
    chars = np.where(codes == 0, 0x20, BRAILLE_BASE + codes)
    return ["".join(map(chr, row)) for row in chars.tolist()]
