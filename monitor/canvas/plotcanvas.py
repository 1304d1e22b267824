"""The plot: time lanes, spectrum and response on one vispy SceneCanvas.

PlotCanvas draws from a History (the plot's copy of the newest samples).
The live window and the headless snapshot both use it; only how frames are
paced and shown differs. Call it from one thread (the one that made it).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from monitor.canvas import palette
from monitor.canvas.decimate import BucketCache, pack_columns, pack_every, samples_per_bucket
from monitor.canvas.history import History
from monitor.canvas.layout import MIN_SIZE, compute_layout
from monitor.canvas.legend import text_px
from monitor.canvas.marks import Marks
from monitor.canvas.response_panel import ResponsePanel, chain_curves, stage_markers
from monitor.canvas.spectrum_panel import MAX_SEGMENTS, NPERSEG, SpectrumPanel, welch_db
from monitor.canvas.time_axis import TimeAxis
from monitor.canvas.time_panel import TimePanel

SPECTRUM_SAMPLES = (MAX_SEGMENTS + 1) * NPERSEG // 2


@dataclass
class ViewState:
    """What the user chose to see.

    window_s: rolling window length (s); following: the view tracks the newest
    sample and autoscales (False after a mouse zoom or pan); frozen: no new
    samples are taken in (the stream goes on); overlay: all channels in one
    lane; selected: channel index of the spectrum and response; decimate:
    min/max per pixel column (False draws every sample, the benchmark's
    reference); cursor: mouse position in canvas pixels, or None.
    """

    window_s: float = 10.0
    following: bool = True
    frozen: bool = False
    overlay: bool = False
    selected: int = 0
    decimate: bool = True
    cursor: tuple[float, float] | None = field(default=None)


class PlotCanvas:
    """Three panels for `channels` (names) with `units`, sampled at `rate_hz`, on a SceneCanvas.

    size: (width, height) px. show: open as a window (needs the window backend).
    time_axis: what the time ticks count; the default is a live stream (seconds
    before now); give TimeAxis(origin=t_first, started=...) for a recording.
    It may be replaced between frames (`plot.time_axis = ...`).
    """

    def __init__(self, channels: Sequence[str], units: Sequence[str], rate_hz: float,
                 size: tuple[int, int] = (1280, 800), show: bool = False,
                 title: str = "tunetrace", overlay: bool = False, app=None,
                 time_axis: TimeAxis | None = None) -> None:
        from vispy import scene

        if not rate_hz > 0:
            raise ValueError(f"rate_hz = {rate_hz!r} must be a positive number of Hz")
        self.channels = tuple(channels)
        self.units = tuple(units) + ("",) * (len(self.channels) - len(units))
        self.rate_hz = float(rate_hz)
        self.title = title
        self._time_axis = time_axis if time_axis is not None else TimeAxis()
        self.canvas = scene.SceneCanvas(size=size, show=show, title=title, keys=None,
                                        bgcolor=palette.PANEL, app=app, resizable=show)
        # vispy would log an exception in a draw or input handler and carry on; let it
        # reach the caller instead (LivePlot.pump closes the plot with the reason).
        self.canvas.events.ignore_callback_errors = False
        self.size = (int(size[0]), int(size[1]))
        self.resized_to: tuple[int, int] | None = None   # set by a window resize, see resize()
        self._offscreen = None   # vispy FrameBuffer for render(), made on first use
        self._populate(overlay)
        self.canvas.events.resize.connect(self._on_resize)

    def _on_resize(self, event) -> None:
        size = (int(event.size[0]), int(event.size[1]))
        if size != self.size:
            self.resized_to = size

    def resize(self, size: tuple[int, int]) -> None:
        """Lay the panels out again for a canvas of `size` (width, height) px.

        Sizes below layout.MIN_SIZE keep the smallest layout (the window clips it).
        """
        self.size = (max(int(size[0]), MIN_SIZE[0]), max(int(size[1]), MIN_SIZE[1]))
        self.resized_to = None
        self._offscreen = None
        self.rebuild(self.channels)
        self.refresh_clipping()

    def _populate(self, overlay: bool) -> None:
        """Create the panels' visuals for the current channels and overlay choice."""
        self.layout = compute_layout(self.size, 1 if overlay else len(self.channels))
        self.overlay = overlay
        self.time = TimePanel(self.canvas.scene, self.layout.lanes, self.channels, self.units,
                              overlay=overlay, time_axis=self._time_axis)
        self.spectrum = SpectrumPanel(self.canvas.scene, self.layout.spectrum, self.rate_hz)
        self.response = ResponsePanel(self.canvas.scene, self.layout.magnitude,
                                      self.layout.phase, self.rate_hz)
        self.marks = Marks(self.canvas.scene)
        self.cache = BucketCache()
        self.status = ""
        self.readout = ""
        self.window: tuple[int, int] = (0, 0)   # absolute sample indices shown

    @property
    def time_axis(self) -> TimeAxis:
        """What the time ticks count (live: seconds before now; recording: from its start)."""
        return self._time_axis

    @time_axis.setter
    def time_axis(self, axis: TimeAxis) -> None:
        self._time_axis = axis
        self.time.time_axis = axis

    def areas(self) -> list:
        """Every PlotArea of the panels."""
        return [*self.time.lanes, self.spectrum.area, self.response.magnitude,
                self.response.phase]

    def refresh_clipping(self) -> None:
        """Recompute each area's clip rectangle in framebuffer pixels.

        A ViewBox computes it when its transforms change; a window that appears
        after the panels were built (glfw) can leave it stale, and then the
        clipped data draws nowhere. Calling its resize handler recomputes it.
        """
        for area in self.areas():
            area.view.on_resize(None)

    def rebuild(self, channels: Sequence[str], units: Sequence[str] | None = None,
                overlay: bool | None = None) -> None:
        """Replace every panel (new channels, or lanes <-> overlay) in the same canvas."""
        for child in list(self.canvas.scene.children):
            child.parent = None
        self.channels = tuple(channels)
        units = tuple(units) if units is not None else self.units
        self.units = units[:len(self.channels)] + ("",) * (len(self.channels) - len(units))
        self._populate(self.overlay if overlay is None else overlay)

    def set_rate(self, rate_hz: float) -> None:
        """Adopt a new sample rate (the frequency axes change; call show_spectrum/response)."""
        if not rate_hz > 0:
            raise ValueError(f"rate_hz = {rate_hz!r} must be a positive number of Hz")
        self.rate_hz = float(rate_hz)
        self.spectrum.set_rate(self.rate_hz)
        self.response.set_rate(self.rate_hz)

    # -- data ---------------------------------------------------------------------------

    def show_traces(self, history: History, state: ViewState) -> None:
        """Put the visible part of `history` into the time lanes (decimated unless told not)."""
        if not len(history):
            return
        origin = history.origin or 0.0
        t_newest = float(history.slice(history.end - 1, history.end)[0][0]) - origin
        self.time.newest_x = t_newest
        if self._time_axis.is_recording:
            self.time.origin_x = self._time_axis.origin - origin
        if state.following:
            x0, x1 = t_newest - state.window_s, t_newest
        else:
            x0, x1 = self.time.lanes[0].range[:2]
        i0, i1 = history.index_at(x0), history.index_at(x1 + 1e-9)
        i0 = max(history.start, i0 - 1)   # one sample before the edge keeps the line entering
        i1 = min(history.end, i1 + 1)
        self.window = (i0, i1)
        k = len(self.channels)
        columns = self.layout.lanes[0].w
        if state.decimate and i1 - i0 > 2 * columns:
            # Bucket size from the window length (steady while it rolls), not from i1 - i0.
            spb = samples_per_bucket((x1 - x0) * self.rate_hz, columns)
            buckets = self.cache.update(history, i0, i1, spb, origin)
            lo, hi = np.fmin.reduce(buckets.mins, axis=0), np.fmax.reduce(buckets.maxs, axis=0)
        else:
            buckets = None
            t, values = history.slice(i0, i1)
            lo, hi = np.fmin.reduce(values, axis=0), np.fmax.reduce(values, axis=0)
        if state.following:
            extremes = np.column_stack([np.fmin(lo[:k], lo[k:]), np.fmax(hi[:k], hi[k:])])
            self.time.set_view(x0, x1, extremes)
        if buckets is None:
            verts, connect = pack_every(t - origin, values), "strip"
        else:
            pixel = np.array([self.time.pixel_height(c) for c in range(k)] * 2, np.float32)
            verts, connect = pack_columns(buckets, 0.5 * pixel), "segments"
        self.time.set_traces(verts[:k], verts[k:], connect)

    def show_spectrum(self, history: History, selected: int, designs: Sequence) -> None:
        """Welch PSD of the selected channel over the visible window (its newest part)."""
        i0, i1 = self.window
        _, values = history.slice(max(i0, i1 - SPECTRUM_SAMPLES), i1)
        k = len(self.channels)
        freqs, db = welch_db(values[:, [selected, k + selected]], self.rate_hz)
        name = self.channels[selected]
        unit = self.units[selected] or "unit"
        title = f"spectrum of {name}: Welch PSD, dB re 1 {unit}²/Hz"
        self.spectrum.set_data(freqs, db[:, 0], db[:, 1], selected, title, stage_markers(designs))

    def show_response(self, selected: int, designs: Sequence) -> None:
        """Magnitude and phase of the selected channel's active stage designs."""
        name = self.channels[selected]
        what = f"{len(designs)} stage{'s' if len(designs) != 1 else ''}" if designs else "no stages"
        self.response.set_curves(chain_curves(designs, self.rate_hz), selected,
                                 f"response of {name}'s chain ({what}): |H| dB, phase °",
                                 stage_markers(designs))

    # -- annotation and output -------------------------------------------------------------

    def cursor_text(self, history: History, px: float, py: float) -> str:
        """Readout of time and values under canvas pixel (px, py) in a lane, else ''."""
        lane = self.time.lane_at(px, py)
        if lane is None or not len(history):
            return ""
        x, _ = self.time.lanes[lane].to_data(px, py)
        index = min(history.index_at(x), history.end - 1)
        t, values = history.slice(index, index + 1)
        if not len(t):
            return ""
        k = len(self.channels)
        seconds = self.time.seconds_at(t[0] - (history.origin or 0.0))
        parts = [f"t {seconds:.3f} s" if self._time_axis.is_recording else f"t {seconds:+.3f} s"]
        for c in self.time.channels_in(lane):
            unit = f" {self.units[c]}" if self.units[c] else ""
            parts.append(f"{self.channels[c]} raw {values[0, c]:.5g}{unit} "
                         f"filtered {values[0, k + c]:.5g}{unit}")
        return "   ".join(parts)

    def decorate(self, selected: int, cursor: tuple[float, float] | None = None) -> None:
        """Grid, ticks, titles, markers, status and readout for the data now shown."""
        marks = self.marks
        marks.begin()
        for rect in (*self.layout.lanes, self.layout.spectrum, self.layout.magnitude,
                     self.layout.phase):
            marks.frame(rect)
        self.time.decorate(marks, selected)
        self.spectrum.decorate(marks)
        self.response.decorate(marks)
        header = self.layout.header
        marks.label(self.title, 8, header.h / 2, anchor="left", colour=palette.TEXT)
        readout_x = header.w / 2 - 120
        if self._time_axis.is_recording:   # live ticks say "now"; a recording's say from when
            caption_x = 8 + text_px(self.title) + 24
            caption = self._time_axis.caption()
            marks.label(caption, caption_x, header.h / 2, anchor="left", colour=palette.TEXT)
            readout_x = max(readout_x, caption_x + text_px(caption) + 24)
        if self.status:
            marks.label(self.status, header.w - 8, header.h / 2, anchor="right")
        if cursor is not None and self.time.lane_at(*cursor) is not None:
            top, bottom = self.layout.lanes[0], self.layout.lanes[-1]
            marks.mark(cursor[0], top.y, cursor[0], bottom.y + bottom.h, palette.READOUT)
            if self.readout:
                marks.label(self.readout, readout_x, header.h / 2, anchor="left",
                            colour=palette.READOUT)
        marks.flush()

    def draw_offscreen(self) -> None:
        """Draw the scene into this canvas's offscreen buffer and wait until it is finished.

        Works with any backend (an EGL canvas has no on-screen surface); the
        buffer is made once, not per frame as SceneCanvas.render() does.
        """
        from vispy import gloo
        from vispy.gloo import gl

        canvas = self.canvas
        canvas.set_current()
        if self._offscreen is None:
            shape = (self.size[1], self.size[0])
            self._offscreen = gloo.FrameBuffer(color=gloo.RenderBuffer(shape),
                                               depth=gloo.RenderBuffer(shape))
        canvas.push_fbo(self._offscreen, (0, 0), self.size)
        try:
            canvas.context.clear(color=canvas.bgcolor, depth=True)
            canvas.draw_visual(canvas.scene)
            canvas.context.flush()
            gl.glFinish()
        finally:
            canvas.pop_fbo()

    def render(self) -> np.ndarray:
        """Draw offscreen and read back: (H, W, 4) uint8, alpha forced opaque."""
        self.draw_offscreen()
        self.canvas.push_fbo(self._offscreen, (0, 0), self.size)
        try:
            image = np.array(self._offscreen.read())
        finally:
            self.canvas.pop_fbo()
        image[..., 3] = 255
        return image

    def close(self) -> None:
        self.canvas.close()

