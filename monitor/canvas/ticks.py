"""Axis tick positions and labels: 1-2-5 steps on linear axes, decades on log axes.

Written by hand because vispy's AxisWidget has no logarithmic scale and the
panels need one tick layout for grid, labels and tests alike.
"""

from __future__ import annotations

import math

import numpy as np


def nice_step(span: float, max_ticks: int) -> float:
    """Smallest 1, 2 or 5 times a power of ten giving at most `max_ticks` intervals in `span`."""
    if not span > 0 or not math.isfinite(span):
        return 1.0
    raw = span / max(1, max_ticks)
    magnitude = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * magnitude >= raw * (1 - 1e-9):
            return m * magnitude
    return 10.0 * magnitude


def linear_ticks(lo: float, hi: float, max_ticks: int = 6) -> tuple[np.ndarray, float]:
    """Tick values inside [lo, hi] and the step between them."""
    step = nice_step(hi - lo, max_ticks)
    first = math.ceil(lo / step - 1e-9)
    last = math.floor(hi / step + 1e-9)
    if last - first > 1000:  # degenerate span; show the ends only
        return np.array([lo, hi]), hi - lo
    return np.arange(first, last + 1) * step, step


def format_linear(values: np.ndarray, step: float) -> list[str]:
    """Labels with as many decimals as the step needs."""
    decimals = max(0, -math.floor(math.log10(step) + 1e-9)) if step > 0 else 0
    out = []
    for v in values:
        text = f"{v:.{decimals}f}"
        out.append("0" if text.strip("-0.") == "" else text)
    return out


def log_ticks(lo: float, hi: float) -> tuple[np.ndarray, np.ndarray]:
    """(decades, minor 2..9 multiples) inside [lo, hi] for a log axis; lo > 0."""
    lo_exp, hi_exp = math.floor(math.log10(lo)), math.ceil(math.log10(hi))
    decades = 10.0 ** np.arange(lo_exp, hi_exp + 1)
    minor = (decades[:, None] * np.arange(2, 10)[None, :]).ravel()
    keep = lambda v: v[(v >= lo * (1 - 1e-9)) & (v <= hi * (1 + 1e-9))]  # noqa: E731
    return keep(decades), keep(minor)


def format_hz(value: float) -> str:
    """A frequency label: 0.1, 1, 10, 100, 1k, 10k."""
    if value >= 1000:
        return f"{value / 1000:g}k"
    return f"{value:g}"
