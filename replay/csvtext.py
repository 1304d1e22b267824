"""Text formatting shared by the recording writer and offline apply.

Both formats below read back to the identical float64.
Raw values are written with Python's float repr, the shortest such text (round
trip guaranteed since Python 3.1): a value that arrived as "12.031" is written
as "12.031", not "12.031000000000001" as '%.17g' would. Filtered values are
full-precision results that need 16-17 digits either way; for them '%.17g'
(17 significant digits always round-trip a double, IEEE 754-2008 clause 5.12.2)
costs about 0.6x the time of repr on this machine, which counts in `apply`.
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


def format_full_precision(values: np.ndarray) -> list[str]:
    """Like format_rows for (n, k) float64 results, with '%.17g' (faster, as exact)."""
    n, k = values.shape
    if n == 0:
        return []
    row = ",".join(["%.17g"] * k) + "\n"
    return ((row * n) % tuple(values.ravel().tolist()))[:-1].split("\n")


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
