"""Child process of test_live_window: a live pipeline on the simulated board, the plot
window through glfw on the X display in $DISPLAY, and a JSON report on stdout.

Run with `--no-display` (and DISPLAY unset) to report what open() says without one.
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np
from canvas_pixels import colour_mask, crop
from vispy.util import keys

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.canvas import backend, palette
from monitor.canvas.live import LivePlot
from monitor.pipeline import Pipeline, ReplaceChain, text_source
from monitor.sources import open_byte_source

CHAIN = """
[[stage]]
kind = "median"
window = 5

[[stage]]
kind = "butterworth"
order = 2
cutoff_hz = 8.0
"""
RETUNED = CHAIN.replace("8.0", "3.0")


def wait_for(condition, seconds: float) -> bool:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.02)
    return False


def pump_for(plot: LivePlot, seconds: float, frames: int = 0) -> None:
    """Pump as the UI does (about 120 times a second) for `seconds`, and then on until
    `frames` frames were drawn since open() or the plot closed (at most 60 s)."""
    start = time.monotonic()
    while plot.is_open and time.monotonic() - start < 60:
        if time.monotonic() - start >= seconds and plot.frames >= frames:
            break
        plot.pump()
        time.sleep(1 / 120)


def press(plot: LivePlot, key, text: str) -> None:
    """A key press in the plot window, as the window system delivers it."""
    plot.canvas.canvas.events.key_press(key=key, text=text, modifiers=())


def main() -> int:
    source = text_source(open_byte_source("sim://?rate=250&seed=1"), declared_rate=250.0)
    pipeline = Pipeline(source, chain_spec=parse_chain(CHAIN), rate_hz=250.0)
    pipeline.start()
    out: dict[str, object] = {}
    try:
        if not wait_for(lambda: pipeline.ring is not None and pipeline.ring.total > 200, 15):
            out["error"] = "no samples from the simulated board"
            return 1
        selected = [0]
        plot = LivePlot(pipeline, lambda: selected[0], window_s=2.0, size=(960, 640))
        out["open"] = plot.open()
        if "--no-display" in sys.argv:
            out["is_open"] = plot.is_open
            return 0
        started = time.monotonic()
        pump_for(plot, 0.5, frames=30)
        out["frames"] = plot.frames
        out["seconds_for_frames"] = time.monotonic() - started
        image = plot.canvas.render()
        lane = plot.canvas.layout.lanes[0]
        out["lane0_raw_px"] = int(crop(colour_mask(image, palette.raw_colour(0)), lane).sum())
        out["lane0_filtered_px"] = int(
            crop(colour_mask(image, palette.filtered_colour(0)), lane).sum())
        out["shows_running_chain"] = plot.shown_chain is pipeline.chain

        # a retune: the response panel follows the new chain object
        schema = pipeline.schema
        retuned = ChainSet(parse_chain(RETUNED), schema.channels, 250.0)
        pipeline.submit(ReplaceChain(retuned))
        out["retune_applied"] = wait_for(lambda: pipeline.chain is retuned, 5)
        pump_for(plot, 0.3, frames=plot.frames + 3)
        out["response_follows_retune"] = plot.shown_chain is retuned
        out["marker_after_retune"] = [m[0] for m in plot.canvas.response.markers]

        selected[0] = 2
        pump_for(plot, 0.3, frames=plot.frames + 3)
        out["response_title_after_select"] = plot.canvas.response.title

        # keys in the plot window: freeze, window length, overlay, follow
        press(plot, keys.SPACE, " ")
        shown = plot.canvas.window
        pump_for(plot, 0.4, frames=plot.frames + 3)
        out["frozen_holds_view"] = plot.state.frozen and plot.canvas.window == shown
        press(plot, keys.SPACE, " ")
        pump_for(plot, 0.2, frames=plot.frames + 3)
        out["unfrozen_moves_on"] = plot.canvas.window[1] > shown[1]
        press(plot, None, "]")
        out["window_after_double"] = plot.state.window_s
        press(plot, None, "o")
        pump_for(plot, 0.1, frames=plot.frames + 2)
        out["lanes_in_overlay"] = len(plot.canvas.layout.lanes)
        press(plot, None, "o")
        pump_for(plot, 0.1, frames=plot.frames + 2)
        out["lanes_after_overlay"] = len(plot.canvas.layout.lanes)

        # the window is resized: the panels are laid out for the new size
        plot.canvas.canvas.size = (1100, 720)
        pump_for(plot, 0.3, frames=plot.frames + 3)
        out["size_after_resize"] = list(plot.canvas.size)
        out["lane_width_after_resize"] = plot.canvas.layout.lanes[0].w
        image = plot.canvas.render()
        lane = plot.canvas.layout.lanes[0]
        out["lane0_filtered_px_after_resize"] = int(
            crop(colour_mask(image, palette.filtered_colour(0)), lane).sum())

        # the user closes the window; the stream goes on; the plot opens again
        plot.canvas.canvas.close()
        pump_for(plot, 0.1)
        out["closed_by_user"] = not plot.is_open
        out["close_reason"] = plot.reason
        before = pipeline.ring.total
        time.sleep(0.5)
        out["samples_while_closed"] = pipeline.ring.total - before
        out["reopen"] = plot.open()
        pump_for(plot, 0.2, frames=5)
        out["frames_after_reopen"] = plot.frames

        # an error while drawing closes the plot with a reason, never the stream
        def broken() -> int:
            raise RuntimeError("selection failed")

        plot.get_selected_channel = broken
        pump_for(plot, 0.2)
        out["open_after_error"] = plot.is_open
        out["error_reason"] = plot.reason
        before = pipeline.ring.total
        time.sleep(0.3)
        out["samples_after_error"] = pipeline.ring.total - before
        out["pipeline_alive"] = pipeline.is_alive()
        plot.get_selected_channel = lambda: 0
        out["reopen_after_error"] = plot.open()
        pump_for(plot, 0.3)

        # an error inside vispy's drawing reaches pump() too, not just a log line
        def broken_draw(event) -> None:
            raise ValueError("shader trouble")

        plot.canvas.canvas.events.draw.connect(broken_draw)
        pump_for(plot, 0.2)
        out["draw_error_reason"] = plot.reason
        out["reopen_after_draw_error"] = plot.open()
        pump_for(plot, 0.2)
        plot.close()
        out["closed"] = not plot.is_open

        try:
            backend.use(backend.HEADLESS)
            out["second_backend"] = None
        except backend.BackendUnavailable as exc:
            out["second_backend"] = str(exc)
        out["image_mean"] = float(np.mean(image[..., :3]))
        return 0
    finally:
        pipeline.stop()
        print(json.dumps(out))


if __name__ == "__main__":
    sys.exit(main())
