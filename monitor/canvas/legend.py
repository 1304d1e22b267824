"""The legend of a time lane: a short key line per series, "raw" thin and faint, "filtered" strong.

Each lane gets its own legend at its top right, one row per channel it shows,
with the keys in that channel's colours (the channel's name leads the row when
the lane holds several, as in overlay). The legend sits on a patch of the
panel ground drawn over the data, so a trace running under it cannot be
mistaken for a key. Positions are canvas pixels; text widths are estimated
from the label font (marks.FONT_PT) so the keys never run into the words.
"""

from __future__ import annotations

from collections.abc import Sequence

from monitor.canvas import palette
from monitor.canvas.layout import Rect
from monitor.canvas.marks import Marks

CHAR_PX = 5.0      # upper estimate of one character of the 7 pt label font, px
ROW_PX = 12        # one legend row
KEY_PX = 18        # length of a key line
PAD_PX = 4         # inside the legend's patch
GAP_PX = 10        # between the raw and the filtered entry
RAW_WORD = "raw"
FILTERED_WORD = "filtered"


def text_px(text: str) -> int:
    """Estimated width (px) of `text` in the label font."""
    return int(round(CHAR_PX * len(text)))


def legend_layout(lane: Rect, channels: Sequence[int],
                  names: Sequence[str] | None = None) -> tuple[Rect, list[tuple]]:
    """(patch, rows) of the legend of `lane` showing `channels` (indices), in canvas pixels.

    Each row is (channel, centre y, raw key x, raw word right x, filtered key x, name).
    names: one per channel, written at the start of its row (None: no names,
    for a lane that shows one channel and is titled already).
    """
    right = lane.x + lane.w - PAD_PX - 2
    filtered_w, raw_w = text_px(FILTERED_WORD), text_px(RAW_WORD)
    rows = []
    left = right
    for i, k in enumerate(channels):
        centre = lane.y + 2 + PAD_PX // 2 + ROW_PX * i + ROW_PX // 2
        x_filtered_key = right - filtered_w - 4 - KEY_PX
        x_raw_word = x_filtered_key - GAP_PX
        x_raw_key = x_raw_word - raw_w - 4 - KEY_PX
        name = names[i] if names is not None else ""
        start = x_raw_key - (text_px(name) + 6 if name else 0)
        left = min(left, start)
        rows.append((k, centre, x_raw_key, x_raw_word, x_filtered_key, name))
    patch = Rect(int(left - PAD_PX), lane.y + 2, int(right + PAD_PX - left + PAD_PX),
                 ROW_PX * len(rows) + PAD_PX)
    return patch, rows


def draw_legend(marks: Marks, lane: Rect, channels: Sequence[int],
                names: Sequence[str] | None = None) -> Rect:
    """Draw the legend of a lane showing `channels` (indices); returns the patch it covers.

    names: as for legend_layout.
    """
    patch, rows = legend_layout(lane, channels, names)
    right = lane.x + lane.w - PAD_PX - 2
    marks.fill(patch, palette.PANEL)
    for k, centre, x_raw_key, x_raw_word, x_filtered_key, name in rows:
        raw, filtered = palette.raw_colour(k), palette.filtered_colour(k)
        # key lines as wide as the traces: RAW_WIDTH and FILTERED_WIDTH rows of pixels
        for dy in range(int(palette.RAW_WIDTH)):
            marks.over(x_raw_key, centre + dy, x_raw_key + KEY_PX, centre + dy, raw)
        for dy in range(int(palette.FILTERED_WIDTH)):
            marks.over(x_filtered_key, centre + dy, x_filtered_key + KEY_PX, centre + dy,
                       filtered)
        marks.label(RAW_WORD, x_raw_word, centre, anchor="right", colour=palette.TEXT)
        marks.label(FILTERED_WORD, right, centre, anchor="right", colour=palette.TEXT)
        if name:
            marks.label(name, x_raw_key - 6, centre, anchor="right", colour=filtered)
    return patch
