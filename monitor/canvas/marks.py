"""Grid lines, markers and labels of the whole canvas, drawn in canvas pixels.

Panels add what they need each frame; `flush` hands the visuals new data
only when something changed, so a still frame re-uploads nothing. All grid
lines are one visual, all markers one, everything drawn over the data (the legend's ground and line
keys) one, and labels one per alignment, which keeps the draw-call count (and
so the software renderer's cost) low.
"""

from __future__ import annotations

import numpy as np

from monitor.canvas import palette

FONT_PT = 7
_ANCHORS = ("left", "center", "right")


def _snap(*coords: float) -> tuple[float, ...]:
    """Whole pixels: crisp lines, and a still frame compares equal to the last one."""
    return tuple(float(round(float(c))) for c in coords)


def flat_2d(visual) -> None:
    """Draw in plain painter's order: everything is at z = 0, so no depth test."""
    visual.set_gl_state(depth_test=False, blend=True)


class Marks:
    """Collects segments and labels for one frame; `flush()` updates the visuals."""

    def __init__(self, scene) -> None:
        from vispy.scene import visuals
        from vispy.visuals.text.text import FontManager

        self._grid_visual = visuals.Line(pos=np.zeros((2, 2), np.float32), connect="segments",
                                         color=palette.GRID, width=1, method="gl", parent=scene)
        self._grid_visual.order = -2
        flat_2d(self._grid_visual)
        self._mark_visual = visuals.Line(pos=np.zeros((2, 2), np.float32), connect="segments",
                                         color=np.zeros((2, 4), np.float32), width=1,
                                         method="gl", parent=scene)
        flat_2d(self._mark_visual)
        self._mark_visual.order = -1  # under the data, over the grid
        self._over_visual = visuals.Line(pos=np.zeros((2, 2), np.float32), connect="segments",
                                         color=np.zeros((2, 4), np.float32), width=1,
                                         method="gl", parent=scene)
        flat_2d(self._over_visual)
        self._over_visual.order = 2   # over the data lines, under the labels
        self._texts = {}
        fonts = FontManager()   # one glyph atlas for the three label visuals of this canvas
        for anchor in _ANCHORS:
            text = visuals.Text("", pos=(0, 0), color=palette.TEXT, font_size=FONT_PT,
                                anchor_x=anchor, anchor_y="center", parent=scene,
                                font_manager=fonts)
            text.order = 3
            self._texts[anchor] = text
        self._shown: dict[str, object] = {}
        self.begin()

    def begin(self) -> None:
        """Start collecting a new frame's marks."""
        self._grid: list[tuple[float, float, float, float]] = []
        self._marks: list[tuple[float, float, float, float]] = []
        self._mark_colours: list[palette.Color] = []
        self._over: list[tuple[float, float, float, float]] = []
        self._over_colours: list[palette.Color] = []
        self._labels: dict[str, list[tuple[str, float, float, palette.Color]]] = {
            a: [] for a in _ANCHORS}

    def grid(self, x0: float, y0: float, x1: float, y1: float) -> None:
        """A grid segment from (x0, y0) to (x1, y1), pixels."""
        self._grid.append(_snap(x0, y0, x1, y1))

    def frame(self, rect) -> None:
        """The outline of a plot area (a layout.Rect), in the frame colour."""
        x0, y0, x1, y1 = rect.x - 1, rect.y - 1, rect.x + rect.w, rect.y + rect.h
        for segment in ((x0, y0, x1, y0), (x1, y0, x1, y1), (x1, y1, x0, y1), (x0, y1, x0, y0)):
            self.mark(*segment, palette.FRAME)

    def mark(self, x0: float, y0: float, x1: float, y1: float, colour: palette.Color) -> None:
        """A marker segment (cutoff, Nyquist, cursor), drawn over the grid and under the data."""
        self._marks.append(_snap(x0, y0, x1, y1))
        self._mark_colours.append(colour)

    def over(self, x0: float, y0: float, x1: float, y1: float, colour: palette.Color) -> None:
        """A 1 px segment drawn over the data (legend keys), in call order."""
        self._over.append(_snap(x0, y0, x1, y1))
        self._over_colours.append(colour)

    def fill(self, rect, colour: palette.Color) -> None:
        """Cover a layout.Rect with `colour` over the data (one 1 px row per pixel row)."""
        for y in range(rect.y, rect.y + rect.h):
            self.over(rect.x, y, rect.x + rect.w, y, colour)

    def label(self, text: str, x: float, y: float, anchor: str = "center",
              colour: palette.Color = palette.TEXT) -> None:
        """Text centred vertically at y; anchor says which end of it sits at x."""
        self._labels[anchor].append((text, round(float(x)), round(float(y)), colour))

    def flush(self) -> None:
        """Give the visuals this frame's marks where they differ from the last frame's."""
        self._set_segments("grid", self._grid_visual, self._grid, None)
        self._set_segments("marks", self._mark_visual, self._marks, self._mark_colours)
        self._set_segments("over", self._over_visual, self._over, self._over_colours)
        for anchor, items in self._labels.items():
            if self._shown.get(anchor) == items:
                continue
            self._shown[anchor] = list(items)
            text = self._texts[anchor]
            if not items:
                text.visible = False
                continue
            text.visible = True
            text.text = [i[0] for i in items]
            text.pos = np.array([(i[1], i[2]) for i in items], np.float32)
            text.color = np.array([i[3] for i in items], np.float32)

    def drawn_labels(self) -> list[tuple[str, float, float, str]]:
        """(text, x, y, anchor) of every label the text visuals hold now, in canvas pixels."""
        out = []
        for anchor, visual in self._texts.items():
            if not visual.visible:
                continue
            texts = [visual.text] if isinstance(visual.text, str) else list(visual.text)
            pos = np.asarray(visual.pos, float).reshape(-1, 2)
            out += [(t, float(p[0]), float(p[1]), anchor) for t, p in zip(texts, pos, strict=True)]
        return out

    def _set_segments(self, key, visual, segments, colours) -> None:
        if self._shown.get(key) == (segments, colours):
            return
        self._shown[key] = (list(segments), None if colours is None else list(colours))
        if not segments:
            visual.visible = False
            return
        visual.visible = True
        pos = np.asarray(segments, np.float32).reshape(-1, 2)
        if colours is None:
            visual.set_data(pos=pos)
        else:
            visual.set_data(pos=pos, color=np.repeat(np.asarray(colours, np.float32), 2, axis=0))
