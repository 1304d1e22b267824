"""One plot area: a vispy ViewBox at a fixed pixel rectangle, its data-to-pixel mapping and axes.

Data lines live inside the ViewBox (clipped to it); grid, ticks and labels
are drawn in canvas pixels by Marks from the same mapping, so what a test
computes from `to_px` is where the pixels land.
"""

from __future__ import annotations

import math

import numpy as np

from monitor.canvas import palette
from monitor.canvas.layout import Rect
from monitor.canvas.marks import Marks, flat_2d
from monitor.canvas.ticks import format_hz, format_linear, linear_ticks, log_ticks


def _time_camera(interactive: bool):
    """A PanZoomCamera whose mouse wheel zooms x (time) only; drag pans, right-drag zooms both."""
    from vispy.scene import cameras

    class TimeCamera(cameras.PanZoomCamera):
        def viewbox_mouse_event(self, event):
            if event.type == "mouse_wheel" and self.interactive and not event.handled:
                center = self._scene_transform.imap(event.pos)
                self.zoom(((1 + self.zoom_factor) ** (-event.delta[1] * 30), 1.0), center)
                event.handled = True
                return
            super().viewbox_mouse_event(event)

    return TimeCamera(interactive=interactive)


class PlotArea:
    """A clipped data view at `rect` (pixels); x and y ranges in data units.

    interactive: the mouse zooms (wheel: x only) and pans it.
    """

    def __init__(self, scene, rect: Rect, interactive: bool = False) -> None:
        from vispy.scene import widgets

        self.rect = rect
        self.view = widgets.ViewBox(parent=scene, pos=(rect.x, rect.y), size=(rect.w, rect.h),
                                    border_width=0)
        self.view.camera = _time_camera(interactive)
        self._set = (0.0, 1.0, 0.0, 1.0)
        self.set_range(*self._set)

    def line(self, colour: palette.Color, width: float, connect: str = "strip"):
        """A new line visual inside this area (data coordinates)."""
        from vispy.scene import visuals

        line = visuals.Line(pos=np.zeros((2, 2), np.float32), color=colour, width=width,
                            method="gl", connect=connect, parent=self.view.scene)
        flat_2d(line)
        return line

    def set_range(self, x0: float, x1: float, y0: float, y1: float) -> None:
        """Show data x in [x0, x1] and y in [y0, y1] exactly (no margin)."""
        if not x1 > x0:
            x1 = x0 + 1.0
        if not y1 > y0:
            y0, y1 = y0 - 0.5, y0 + 0.5
        self._set = (float(x0), float(x1), float(y0), float(y1))
        self.view.camera.rect = (x0, y0, x1 - x0, y1 - y0)

    @property
    def range(self) -> tuple[float, float, float, float]:
        """(x0, x1, y0, y1) shown now (after any mouse zoom or pan)."""
        r = self.view.camera.rect
        return (r.left, r.right, r.bottom, r.top)

    def moved_by_user(self) -> bool:
        """True when the camera shows something other than the last set_range."""
        now, was = self.range, self._set
        span = max(was[1] - was[0], 1e-12), max(was[3] - was[2], 1e-12)
        pairs = enumerate(zip(now, was, strict=True))
        return any(abs(a - b) > 1e-6 * span[i // 2] for i, (a, b) in pairs)

    def to_px(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Canvas pixel coordinates (origin top left) of data points x, y."""
        x0, x1, y0, y1 = self.range
        r = self.rect
        px = r.x + (np.asarray(x, float) - x0) / (x1 - x0) * r.w
        py = r.y + (y1 - np.asarray(y, float)) / (y1 - y0) * r.h
        return px, py

    def to_data(self, px: float, py: float) -> tuple[float, float]:
        """Data coordinates under canvas pixel (px, py)."""
        x0, x1, y0, y1 = self.range
        r = self.rect
        return x0 + (px - r.x) / r.w * (x1 - x0), y1 - (py - r.y) / r.h * (y1 - y0)

    # -- axes -------------------------------------------------------------------------

    def y_axis(self, marks: Marks, max_ticks: int = 5, unit: str = "") -> None:
        """Horizontal grid lines and value labels on the left edge."""
        x0, x1, y0, y1 = self.range
        values, step = linear_ticks(y0, y1, max_ticks)
        _, py = self.to_px(np.zeros_like(values), values)
        r = self.rect
        labels = format_linear(values, step)
        for value_px, text in zip(py, labels, strict=True):
            marks.grid(r.x, value_px, r.x + r.w, value_px)
            marks.label(f"{text} {unit}".rstrip(), r.x - 4, value_px, anchor="right")

    def x_axis_linear(self, marks: Marks, offset: float = 0.0, max_ticks: int = 8,
                      labels: bool = True, unit: str = "", zero: str | None = None) -> None:
        """Vertical grid lines at 1-2-5 ticks of (x - offset); labels below when asked.

        Labels carry `unit`; the tick at zero reads `zero` when given.
        """
        x0, x1, _, _ = self.range
        values, step = linear_ticks(x0 - offset, x1 - offset, max_ticks)
        px, _ = self.to_px(values + offset, np.zeros_like(values))
        r = self.rect
        texts = format_linear(values, step)
        for value_px, text in zip(px, texts, strict=True):
            marks.grid(value_px, r.y, value_px, r.y + r.h)
            if labels:
                shown = zero if zero is not None and text == "0" else f"{text} {unit}".rstrip()
                marks.label(shown, value_px, r.y + r.h + 9,
                            anchor="right" if value_px > r.x + r.w - 20 else "center")

    def x_axis_log_hz(self, marks: Marks, labels: bool = True) -> None:
        """Grid at decades (and fainter 2..9 multiples) of an x axis holding log10(Hz)."""
        x0, x1, _, _ = self.range
        decades, minor = log_ticks(10.0 ** x0, 10.0 ** x1)
        r = self.rect
        px, _ = self.to_px(np.log10(decades), np.zeros_like(decades))
        for value_px, hz in zip(px, decades, strict=True):
            marks.grid(value_px, r.y, value_px, r.y + r.h)
            if labels:
                marks.label(f"{format_hz(hz)} Hz", value_px, r.y + r.h + 9)
        minor_px, _ = self.to_px(np.log10(minor), np.zeros_like(minor))
        for value_px in minor_px:
            marks.grid(value_px, r.y + r.h - 4, value_px, r.y + r.h)

    def vertical_marker(self, marks: Marks, x: float, colour: palette.Color,
                        text: str | None = None, row: int = 0, side: str = "right") -> None:
        """A full-height marker line at data x, with an optional label near the top.

        side: "right" puts the label just right of the line, "left" just left of it.
        """
        x0, x1, _, _ = self.range
        if not (x0 <= x <= x1) or not math.isfinite(x):
            return
        px, _ = self.to_px([x], [0.0])
        r = self.rect
        marks.mark(px[0], r.y, px[0], r.y + r.h, colour)
        if text:
            if side == "right":
                marks.label(text, px[0] + 3, r.y + 7 + 10 * row, anchor="left", colour=colour)
            else:
                marks.label(text, px[0] - 3, r.y + 7 + 10 * row, anchor="right", colour=colour)
