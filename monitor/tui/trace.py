"""Terminal trace of one channel: raw (faint) against filtered (strong), in braille.

Drawn with textual's line API: `show` rasterises once into one Strip per
row (segments with pre-built styles), and `render_line` hands them out, so a
10 Hz redraw costs one numpy raster and no markup parsing.
"""

from __future__ import annotations

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

from monitor.tui.braille import cell_text, render_cells, value_range

RAW_STYLE = Style.parse("#5a6b7d")
FILTERED_STYLE = Style.parse("bold #ffb347")
AXIS_STYLE = Style.parse("#8a96a3")
SERIES_STYLES = (RAW_STYLE, FILTERED_STYLE)
WINDOWS_S: tuple[float, ...] = (0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 60.0, 120.0)
LABEL_WIDTH = 10


def _label(value: float) -> str:
    return f"{value:>{LABEL_WIDTH - 1}.4g} "


def trace_rows(raw: np.ndarray, filtered: np.ndarray, span_s: float, width: int,
               height: int) -> list[list[Segment]]:
    """Segments of every row: y labels, the braille raster, then a time axis with a legend.

    raw, filtered: (n,) float64 oldest first; width, height: cells including labels/axis.
    """
    plot_w = max(width - LABEL_WIDTH, 1)
    plot_h = max(height - 1, 1)
    low, high = value_range([raw, filtered])
    codes, owner = render_cells([raw, filtered], plot_w, plot_h, low, high)
    labels = {0: _label(high), plot_h // 2: _label((low + high) / 2), plot_h - 1: _label(low)}
    texts = cell_text(codes)
    rows = [[Segment(labels.get(r, " " * LABEL_WIDTH), AXIS_STYLE)] for r in range(plot_h)]
    # one segment per run of cells drawn by the same series, found for all rows at once
    change = np.ones(owner.shape, dtype=bool)
    change[:, 1:] = owner[:, 1:] != owner[:, :-1]
    run_row, run_start = np.nonzero(change)
    run_end = np.r_[run_start[1:], plot_w]
    run_end[np.r_[run_row[1:] != run_row[:-1], True]] = plot_w
    for r, a, b, series in zip(run_row.tolist(), run_start.tolist(), run_end.tolist(),
                               owner[run_row, run_start].tolist(), strict=True):
        rows[r].append(Segment(texts[r][a:b], SERIES_STYLES[series] if series >= 0 else None))
    left = f"{'':{LABEL_WIDTH}}-{span_s:.3g} s   raw "
    legend = [Segment(left, AXIS_STYLE), Segment("\u28ff", RAW_STYLE),
              Segment("  filtered ", AXIS_STYLE), Segment("\u28ff", FILTERED_STYLE)]
    used = sum(len(s.text) for s in legend)
    legend.append(Segment(" " * max(width - used - 3, 1) + "now", AXIS_STYLE))
    rows.append(legend)
    return rows


class TraceView(Widget):
    """Draws `show(raw, filtered, span_s, caption)` for one channel; keeps the last picture.

    A freeze simply stops calling `show`; a resize redraws from the kept data.
    """

    DEFAULT_CSS = """
    TraceView { width: 1fr; height: 1fr; min-height: 6; border: round #3a4a5c; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._raw = np.empty(0)
        self._filtered = np.empty(0)
        self._span_s = 0.0
        self._strips: list[Strip] = []
        self._drawn_size: tuple[int, int] | None = None

    def show(self, raw: np.ndarray, filtered: np.ndarray, span_s: float, caption: str) -> None:
        """Replace the drawn data (raw, filtered: (n,) float64) and redraw."""
        self._raw, self._filtered, self._span_s = raw, filtered, span_s
        self.border_title = caption
        self._draw()
        self.refresh()

    def _draw(self) -> None:
        width, height = self.content_size.width, self.content_size.height
        self._drawn_size = (width, height)
        if len(self._raw) == 0 or width <= 0 or height <= 0:
            self._strips = [Strip([Segment("waiting for samples...", AXIS_STYLE)])]
            return
        rows = trace_rows(self._raw, self._filtered, self._span_s, width, height)
        # every row is exactly `width` cells (braille and labels are one cell per character)
        self._strips = [Strip(row, width) for row in rows[:-1]]
        self._strips.append(Strip(rows[-1]).crop_extend(0, width, None))   # the legend row

    def render_line(self, y: int) -> Strip:
        if self._drawn_size != (self.content_size.width, self.content_size.height):
            self._draw()
        return self._strips[y] if y < len(self._strips) else Strip.blank(self.content_size.width)
