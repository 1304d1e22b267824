"""Where each panel sits on the canvas, in pixels (origin top left, y down).

The time lanes fill the upper part; the spectrum (left) and the response
(magnitude over phase, right) share the lower part. Plot areas leave room on
the left for value labels and below for the axis labels.
"""

from __future__ import annotations

from dataclasses import dataclass

HEADER_PX = 26       # title and cursor readout strip
LEFT_PX = 70         # y tick labels
RIGHT_PX = 14
AXIS_PX = 20         # x tick labels below a plot area
TITLE_PX = 16        # panel title above spectrum/response plot areas
GAP_PX = 6           # between lanes
TIME_SHARE = 0.58    # fraction of the height below the header given to the time lanes
MIN_SIZE = (480, 360)


@dataclass(frozen=True)
class Rect:
    """A pixel rectangle: left x, top y, width w, height h."""

    x: int
    y: int
    w: int
    h: int

    def contains(self, px: float, py: float) -> bool:
        return self.x <= px < self.x + self.w and self.y <= py < self.y + self.h


@dataclass(frozen=True)
class Layout:
    """Plot areas of every panel for one canvas size and lane count."""

    size: tuple[int, int]
    header: Rect
    lanes: tuple[Rect, ...]
    spectrum: Rect
    magnitude: Rect
    phase: Rect


def compute_layout(size: tuple[int, int], lanes: int) -> Layout:
    """Panels for a canvas of size (width, height) px with `lanes` time lanes (>= 1)."""
    width, height = int(size[0]), int(size[1])
    if width < MIN_SIZE[0] or height < MIN_SIZE[1]:
        raise ValueError(f"size = {width}x{height} is too small; the plot needs at least "
                         f"{MIN_SIZE[0]}x{MIN_SIZE[1]} pixels")
    if lanes < 1:
        raise ValueError(f"lanes = {lanes!r} must be at least 1")
    body_top = HEADER_PX
    body_h = height - HEADER_PX
    time_h = int(body_h * TIME_SHARE)
    plot_w = width - LEFT_PX - RIGHT_PX
    lane_area = time_h - AXIS_PX
    lane_h = (lane_area - GAP_PX * (lanes - 1)) // lanes
    lane_rects = tuple(Rect(LEFT_PX, body_top + i * (lane_h + GAP_PX), plot_w, lane_h)
                       for i in range(lanes))
    lower_top = body_top + time_h + TITLE_PX
    lower_h = height - lower_top - AXIS_PX
    half = (width - 2 * LEFT_PX - 2 * RIGHT_PX) // 2
    spectrum = Rect(LEFT_PX, lower_top, half, lower_h)
    right_x = LEFT_PX + half + RIGHT_PX + LEFT_PX
    mag_h = int((lower_h - GAP_PX) * 0.6)
    magnitude = Rect(right_x, lower_top, half, mag_h)
    phase = Rect(right_x, lower_top + mag_h + GAP_PX, half, lower_h - mag_h - GAP_PX)
    return Layout((width, height), Rect(0, 0, width, HEADER_PX), lane_rects, spectrum,
                  magnitude, phase)
