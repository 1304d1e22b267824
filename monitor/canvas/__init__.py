"""The plot: time lanes, spectrum and response, live in a window or headless to an image.

`LivePlot` (monitor.canvas.live) is the window the terminal UI pumps;
`render_snapshot` (monitor.canvas.snapshot) renders headless through EGL.
Both import vispy only when used, so importing this package is cheap.
"""

from __future__ import annotations

__all__ = ["LivePlot", "render_snapshot"]


def __getattr__(name: str):
    if name == "LivePlot":
        from monitor.canvas.live import LivePlot

        return LivePlot
    if name == "render_snapshot":
        from monitor.canvas.snapshot import render_snapshot

        return render_snapshot
    raise AttributeError(name)
