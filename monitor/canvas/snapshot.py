"""Render the three panels of a stretch of data to an image, headless (EGL, no display)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from monitor.canvas import backend
from monitor.canvas.history import History
from monitor.canvas.plotcanvas import PlotCanvas, ViewState
from monitor.canvas.time_axis import TimeAxis


def render_snapshot(t_host: np.ndarray, raw: np.ndarray, filtered: np.ndarray,
                    channels: Sequence[str], units: Sequence[str], rate_hz: float,
                    designs_per_channel: Sequence[Sequence], size: tuple[int, int] = (1280, 800),
                    selected: int = 0, title: str = "tunetrace snapshot",
                    overlay: bool = False, decimate: bool = True,
                    time_axis: TimeAxis | None = None) -> np.ndarray:
    """The plot of every sample given, as an (H, W, 4) uint8 RGBA image.

    t_host: (n,) s; raw, filtered: (n, channels); units: one string per channel;
    rate_hz: sample rate (Hz); designs_per_channel: per channel, the active
    (not bypassed) filters.design.StageDesign list the response panel shows;
    selected: channel of the spectrum and response panels.
    time_axis: what the time ticks count; None reads seconds from the first
    sample given (a recording cut at --start passes TimeAxis(origin=t_first) so
    the ticks keep the file's own seconds). A snapshot is always of recorded
    data, so it never reads "now" unless TimeAxis() (live) is passed.
    Raises backend.BackendUnavailable when headless OpenGL cannot start.
    """
    t_host = np.asarray(t_host, np.float64)
    raw = np.asarray(raw, np.float64).reshape(len(t_host), -1)
    filtered = np.asarray(filtered, np.float64).reshape(raw.shape)
    if raw.shape[1] != len(channels):
        raise ValueError(f"raw has {raw.shape[1]} columns but channels names {len(channels)}")
    if len(t_host) < 2:
        raise ValueError(f"t_host holds {len(t_host)} samples; a plot needs at least 2")
    if not 0 <= selected < len(channels):
        raise ValueError(f"selected = {selected!r} must be a channel index 0..{len(channels) - 1}")
    app = backend.use(backend.HEADLESS)
    history = History(len(channels), len(t_host))
    history.append(0, t_host, raw, filtered)
    if time_axis is None:
        time_axis = TimeAxis(origin=float(t_host[0]))
    plot = PlotCanvas(channels, units, rate_hz, size=size, title=title, overlay=overlay, app=app,
                      time_axis=time_axis)
    try:
        state = ViewState(window_s=float(t_host[-1] - t_host[0]), selected=selected,
                          decimate=decimate)
        designs = list(designs_per_channel[selected]) if designs_per_channel else []
        plot.status = f"{len(t_host)} samples, {t_host[-1] - t_host[0]:.3g} s at {rate_hz:g} Hz"
        plot.show_traces(history, state)
        plot.show_spectrum(history, selected, designs)
        plot.show_response(selected, designs)
        plot.decorate(selected)
        return plot.render()
    finally:
        plot.close()
