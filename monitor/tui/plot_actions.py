"""The plot window from the terminal: open it when a display is present, pump it at 60 Hz.

A mixin for TunetraceApp. vispy runs on textual's thread: `LivePlot.pump()`
is called from `set_interval(1/60)` and draws a frame when one is due.
"""

from __future__ import annotations

import os
from typing import Any

PLOT_HZ = 60.0
NO_DISPLAY = "no display (DISPLAY is unset): the plot window is not opened"


class PlotActions:
    """Mixed into TunetraceApp; uses its `pipeline`, `selected`, `say` and timers."""

    plot: Any
    pipeline: Any

    def action_open_plot(self) -> None:
        if self.plot is not None and self.plot.is_open:
            self.say("the plot window is already open")
            return
        if not os.environ.get("DISPLAY"):
            self.say(NO_DISPLAY)
            return
        ring = self.pipeline.ring
        if ring is None or ring.total < 2 or self.pipeline.rate() is None:
            if not self._plot_waiting:            # try again once data flows
                self._plot_waiting = True
                self.say("the plot window opens once samples arrive")
                self.set_timer(0.5, self._retry_plot)
            return
        try:
            from monitor.canvas import LivePlot
        except ImportError as exc:
            self.say(f"the plot window is not available: {exc}")
            return
        if self.plot is None:
            self.plot = LivePlot(self.pipeline, lambda: self.selected)
        why = self.plot.open()
        if why is not None:
            self.say(why)
            return
        self._plot_reported = False
        if self._plot_timer is None:
            self._plot_timer = self.set_interval(1 / PLOT_HZ, self._pump_plot)
        self.say("plot window open")

    def _retry_plot(self) -> None:
        self._plot_waiting = False
        self.action_open_plot()

    def _pump_plot(self) -> None:
        """60 Hz: let the plot draw a frame if one is due; say once why it closed."""
        if self.plot is None:
            return
        if self.plot.is_open:
            self.plot.pump()
        elif not self._plot_reported:
            self._plot_reported = True
            self.say(f"{self.plot.reason or 'the plot window closed'}; o opens it again")

    def on_unmount(self) -> None:
        if self.plot is not None:
            self.plot.close("the session ended")

