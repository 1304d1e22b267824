"""Text formatting shared by the recording writer and offline apply.

Values are written with Python's float repr: the shortest text that reads back
to the identical float64 (round trip guaranteed since Python 3.1), so a value
that arrived as "12.031" is written as "12.031" and not "12.031000000000001"
as '%.17g' would. repr costs about 0.8 us per value on this machine, about 1.3x
'%.17g'; the recording rate is bounded by the serial link, so the readable,
smaller file wins.
"""

from __future__ import annotations

import numpy as np


def format_rows(values: np.ndarray) -> list[str]:
    """One comma-joined text per row, each value repr-exact.

    values: (n, k) float64 (or int64 for counters), k >= 1. Returns n strings
    without line terminators.
    """
    n = values.shape[0]
    if n == 0:
        return []
    # repr of the nested list runs the float repr in C for every value; the
    # separators are then fixed with two C-level string operations, which is
    # about 15% faster than joining each row in Python.
    text = repr(values.tolist())
    return text[2:-2].replace(", ", ",").split("],[")


def format_seconds(t: np.ndarray) -> list[str]:
    """Seconds with 6 decimals (microseconds), one string per element of (n,) float64."""
    n = t.shape[0]
    if n == 0:
        return []
    return (("%.6f\n" * n) % tuple(t.tolist()))[:-1].split("\n")


def join_columns(*columns: list[str]) -> str:
    """Join per-row strings column-wise with commas, one row per line, newline-terminated."""
    parts = [c for c in columns if c]
    if not parts:
        return ""
    if len(parts) == 1:
        return "\n".join(parts[0]) + "\n"
    return "\n".join([",".join(row) for row in zip(*parts, strict=True)]) + "\n"
