"""Terminal trace of one channel: raw (faint) against filtered (strong), in braille."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.widget import Widget

from monitor.tui.braille import cell_text, render_cells, value_range

RAW_STYLE = "#5a6b7d"
FILTERED_STYLE = "bold #ffb347"
AXIS_STYLE = "#8a96a3"
WINDOWS_S: tuple[float, ...] = (0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 60.0, 120.0)
LABEL_WIDTH = 10


def _label(value: float) -> str:
    return f"{value:>{LABEL_WIDTH - 1}.4g} "


class TraceView(Widget):
    """Draws `show(t, raw, filtered)`; t, raw, filtered: (n,) float64 of one channel.

    Holds the last data it got, so a freeze simply stops calling `show`.
    """

    DEFAULT_CSS = """
    TraceView { width: 1fr; height: 1fr; min-height: 6; border: round #3a4a5c; padding: 0 0; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._t = np.empty(0)
        self._raw = np.empty(0)
        self._filtered = np.empty(0)
        self.caption = ""

    def show(self, t: np.ndarray, raw: np.ndarray, filtered: np.ndarray, caption: str) -> None:
        """Replace the drawn data and redraw."""
        self._t, self._raw, self._filtered = t, raw, filtered
        self.caption = caption
        self.border_title = caption
        self.refresh()

    def render(self) -> Text:
        width = max(self.content_size.width - LABEL_WIDTH, 1)
        height = max(self.content_size.height - 1, 1)
        if len(self._raw) == 0:
            return Text("waiting for samples...", style=AXIS_STYLE)
        low, high = value_range([self._raw, self._filtered])
        codes, owner = render_cells([self._raw, self._filtered], width, height, low, high)
        rows = cell_text(codes)
        text = Text(no_wrap=True, overflow="crop")
        for r, row in enumerate(rows):
            if r == 0:
                label = _label(high)
            elif r == height - 1:
                label = _label(low)
            elif r == height // 2:
                label = _label((low + high) / 2)
            else:
                label = " " * LABEL_WIDTH
            text.append(label, style=AXIS_STYLE)
            _append_runs(text, row, owner[r])
            text.append("\n")
        span = float(self._t[-1] - self._t[0]) if len(self._t) > 1 else 0.0
        left = f"{'':{LABEL_WIDTH}}-{span:.3g} s"
        text.append(left, style=AXIS_STYLE)
        text.append("   raw ", style=AXIS_STYLE)
        text.append("\u28ff", style=RAW_STYLE)
        text.append("  filtered ", style=AXIS_STYLE)
        text.append("\u28ff", style=FILTERED_STYLE)
        used = len(left) + 7 + 1 + 11 + 1
        text.append(" " * max(LABEL_WIDTH + width - used - 3, 1) + "now", style=AXIS_STYLE)
        return text


def _append_runs(text: Text, row: str, owner: np.ndarray) -> None:
    """Append one row, one style per run of cells with the same owner series."""
    styles = (RAW_STYLE, FILTERED_STYLE)
    start = 0
    for i in range(1, len(row) + 1):
        if i == len(row) or owner[i] != owner[start]:
            who = int(owner[start])
            text.append(row[start:i], style=styles[who] if who >= 0 else "")
            start = i
