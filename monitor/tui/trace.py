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


GLYPH = "\u28ff"                 # a full braille cell: the colour sample of a series
# the legend's forms, widest first: (text, style) pieces; words are never cut, a form is
# either drawn whole or not at all
LEGEND_FORMS: tuple[tuple[tuple[str, Style], ...], ...] = (
    (("raw ", AXIS_STYLE), (GLYPH, RAW_STYLE), ("  filtered ", AXIS_STYLE),
     (GLYPH, FILTERED_STYLE)),
    (("raw ", AXIS_STYLE), (GLYPH, RAW_STYLE), (" filt ", AXIS_STYLE), (GLYPH, FILTERED_STYLE)),
    (("raw", AXIS_STYLE), (GLYPH, RAW_STYLE), (" filt", AXIS_STYLE), (GLYPH, FILTERED_STYLE)),
)
NOW = "now"
GAP_AFTER_TIME = 3               # spaces between the left time label and the legend
GAP_BEFORE_NOW = 2               # at least this many before "now"


def _label(value: float) -> str:
    return f"{value:>{LABEL_WIDTH - 1}.4g} "


def trace_rows(raw: np.ndarray, filtered: np.ndarray, span_s: float, width: int,
               height: int) -> list[list[Segment]]:
    """Segments of every row: y labels, the braille raster, then a time axis with a legend
    (`legend_row`); every row is exactly `width` cells.

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
    rows.append(legend_row(span_s, width))
    return rows


def _form_width(form: tuple[tuple[str, Style], ...]) -> int:
    return sum(len(text) for text, _ in form)


def legend_row(span_s: float, width: int) -> list[Segment]:
    """The bottom row, exactly `width` cells: "-5 s" under the plot's left edge, the widest
    legend form that fits, "now" at the right end.

    The legend goes after the time label when it fits there, else into the (empty) label
    column on the left if it fits that, else it is left out; the time labels always come
    first (from width 8 on), and a word is never cut.
    """
    left = f"-{span_s:.3g} s"
    if width < len(left) + 1 + len(NOW):            # no room for both time labels
        return [Segment(f"{NOW:>{width}}" if width >= len(NOW) else " " * max(width, 0),
                        AXIS_STYLE)]
    tail = 1 + len(NOW)
    at = LABEL_WIDTH if LABEL_WIDTH + len(left) + tail <= width else width - len(left) - tail
    placed: tuple[int, tuple[tuple[str, Style], ...]] | None = None
    for form in LEGEND_FORMS:                       # after the time label
        start = at + len(left) + GAP_AFTER_TIME
        if start + _form_width(form) + GAP_BEFORE_NOW + len(NOW) <= width:
            placed = (start, form)
            break
    else:
        for form in LEGEND_FORMS:                   # in the label column, the time label after
            moved = max(at, _form_width(form) + 1)  # (one cell right of the plot's edge at most)
            if moved <= LABEL_WIDTH + 1 and moved + len(left) + tail <= width:
                at, placed = moved, (moved - 1 - _form_width(form), form)
                break
    pieces: list[tuple[int, str, Style]] = [(at, left, AXIS_STYLE),
                                            (width - len(NOW), NOW, AXIS_STYLE)]
    if placed is not None:
        column = placed[0]
        for text, style in placed[1]:
            pieces.append((column, text, style))
            column += len(text)
    segments: list[Segment] = []
    column = 0
    for start, text, style in sorted(pieces, key=lambda p: p[0]):
        if start > column:
            segments.append(Segment(" " * (start - column), AXIS_STYLE))
        segments.append(Segment(text, style))
        column = start + len(text)
    return segments


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
        self._strips = [Strip(row, width) for row in rows]

    def render_line(self, y: int) -> Strip:
        if self._drawn_size != (self.content_size.width, self.content_size.height):
            self._draw()
        return self._strips[y] if y < len(self._strips) else Strip.blank(self.content_size.width)
