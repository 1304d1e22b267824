"""The time panel: raw and filtered traces, one lane per channel or all in one overlay lane.

x is seconds since the first sample seen (t_host - origin). For a live
stream the tick labels read as seconds before the newest sample, so a
following view shows still labels ("-8 s ... now") while the traces roll; for
a recording they read seconds from its first row (time_axis.TimeAxis). Lanes
share x (linked cameras) and autoscale y each on its own. Each lane has a
legend of its line styles at its top right (legend.draw_legend).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from monitor.canvas import palette
from monitor.canvas.area import PlotArea
from monitor.canvas.layout import Rect
from monitor.canvas.legend import draw_legend
from monitor.canvas.marks import Marks
from monitor.canvas.time_axis import TimeAxis

PAD = 0.08     # fraction of a lane's value span left free above and below the traces
SHRINK = 0.6   # autoscale shrinks the range once the data fills less than this of it


def autoscale(lo: float, hi: float,
              current: tuple[float, float] | None = None) -> tuple[float, float]:
    """A y range showing [lo, hi] with some room; a flat trace gets a unit-wide range.

    With the `current` range: keep it while the data fits and fills at least
    SHRINK of it (so axes do not twitch with every frame's noise; common practice).
    """
    if current is not None and np.isfinite(lo) and np.isfinite(hi):
        c0, c1 = current
        if c0 <= lo and hi <= c1 and (hi - lo) >= SHRINK * (c1 - c0) * (1 - 2 * PAD):
            return current
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return -1.0, 1.0
    span = hi - lo
    if span <= 1e-12 * max(1.0, abs(hi)):
        half = max(abs(hi) * 0.05, 0.5)
        return lo - half, hi + half
    return lo - PAD * span, hi + PAD * span


class TimePanel:
    """Lanes of raw (faint, thin) and filtered (strong) traces.

    channels/units: names and unit strings in column order; overlay: one lane for all;
    time_axis: what the x ticks count (default: a live stream, seconds before now).
    """

    def __init__(self, scene, lane_rects: Sequence[Rect], channels: Sequence[str],
                 units: Sequence[str], overlay: bool = False, interactive: bool = True,
                 time_axis: TimeAxis | None = None) -> None:
        self.channels = tuple(channels)
        self.units = tuple(units) + ("",) * (len(channels) - len(units))
        self.overlay = overlay
        self.lanes = [PlotArea(scene, r, interactive=interactive) for r in lane_rects]
        for other in self.lanes[1:]:
            self.lanes[0].view.camera.link(other.view.camera, axis="x")
        self.raw_lines, self.filtered_lines = [], []
        for k in range(len(self.channels)):
            area = self.lanes[self.lane_of(k)]
            self.raw_lines.append(area.line(palette.raw_colour(k), palette.RAW_WIDTH))
        for k in range(len(self.channels)):   # filtered after raw: drawn on top
            area = self.lanes[self.lane_of(k)]
            self.filtered_lines.append(area.line(palette.filtered_colour(k),
                                                 palette.FILTERED_WIDTH))
        self.newest_x = 0.0
        self.time_axis = time_axis if time_axis is not None else TimeAxis()
        self.origin_x = 0.0    # x of t_host == time_axis.origin (recordings; set with the data)
        self.legend_rects: list[Rect] = []   # where each lane's legend was drawn last
        self._autoscaled: list[tuple[float, float] | None] = [None] * len(self.lanes)

    def restart_autoscale(self) -> None:
        """Forget the autoscaled ranges (after a zoom, before following again)."""
        self._autoscaled = [None] * len(self.lanes)

    def lane_of(self, channel: int) -> int:
        """Index of the lane that shows `channel`."""
        return 0 if self.overlay else channel

    def channels_in(self, lane: int) -> list[int]:
        return [k for k in range(len(self.channels)) if self.lane_of(k) == lane]

    def lane_at(self, px: float, py: float) -> int | None:
        """The lane under canvas pixel (px, py), or None."""
        for i, area in enumerate(self.lanes):
            if area.rect.contains(px, py):
                return i
        return None

    def moved_by_user(self) -> bool:
        return any(area.moved_by_user() for area in self.lanes)

    def set_traces(self, raw: np.ndarray, filtered: np.ndarray, connect: str = "strip") -> None:
        """Vertices per channel: raw, filtered: (channels, m, 2) float32 in (x, value).

        connect: "strip" (one polyline) or "segments" (pairs: decimated columns).
        """
        for k in range(len(self.channels)):
            for line, verts in ((self.raw_lines[k], raw[k]), (self.filtered_lines[k], filtered[k])):
                ok = len(verts) >= 2
                line.set_data(pos=verts if ok else np.zeros((2, 2), np.float32),
                              connect=connect if ok else "strip")

    def pixel_height(self, channel: int) -> float:
        """One pixel of `channel`'s lane in its data units."""
        area = self.lanes[self.lane_of(channel)]
        _, _, y0, y1 = area.range
        return (y1 - y0) / area.rect.h

    def set_view(self, x0: float, x1: float, extremes: np.ndarray) -> None:
        """Show x in [x0, x1], autoscale each lane; extremes: (channels, 2) data lo, hi."""
        for lane, area in enumerate(self.lanes):
            ks = self.channels_in(lane)
            lo = np.nanmin(extremes[ks, 0]) if ks else np.nan
            hi = np.nanmax(extremes[ks, 1]) if ks else np.nan
            self._autoscaled[lane] = autoscale(lo, hi, self._autoscaled[lane])
            area.set_range(x0, x1, *self._autoscaled[lane])

    def decorate(self, marks: Marks, selected: int) -> None:
        """Grid, ticks and lane titles for the current view; the selected channel is marked."""
        for lane, area in enumerate(self.lanes):
            last = lane == len(self.lanes) - 1
            ks = self.channels_in(lane)
            units = {self.units[k] for k in ks}
            area.y_axis(marks, max_ticks=3 if len(self.lanes) > 4 else 5,
                        unit=units.pop() if len(units) == 1 else "")
            if self.time_axis.is_recording:
                area.x_axis_linear(marks, offset=self.origin_x, labels=last, unit="s")
            else:
                area.x_axis_linear(marks, offset=self.newest_x, labels=last, unit="s",
                                   zero="now")
            r = area.rect
            for i, k in enumerate(ks):
                name = self.channels[k] + (f" [{self.units[k]}]" if self.units[k] else "")
                if k == selected:
                    name = "> " + name
                marks.label(name, r.x + 4 + 110 * i, r.y + 7, anchor="left",
                            colour=palette.filtered_colour(k))
        self.legend_rects = []
        for lane, area in enumerate(self.lanes):
            ks = self.channels_in(lane)
            names = [self.channels[k] for k in ks] if len(ks) > 1 else None
            self.legend_rects.append(draw_legend(marks, area.rect, ks, names))

    def seconds_at(self, x: float) -> float:
        """What the time axis reads at lane x: seconds of the recording, or (live) seconds
        relative to the newest sample (negative before it)."""
        return x - (self.origin_x if self.time_axis.is_recording else self.newest_x)
