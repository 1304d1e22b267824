"""The live plot window, pumped from the terminal UI's event loop.

Process model: one process. The reader thread fills the ring; the UI calls
`pump()` on its own thread (textual's set_interval(1/60)); each pump copies
only the samples that arrived since the last frame out of the ring, draws
one frame through glfw and returns. The reader never waits on the plot.
Closing the window or an exception while drawing marks the plot closed
with a reason (`reason`); the stream and any recording go on, and `open()`
may be called again.

Keys in the plot window: space freezes/unfreezes, r returns to following the
newest sample with autoscale, [ and ] halve and double the window, o toggles
one lane per channel / all in one lane. Mouse wheel zooms, drag pans (this
stops following until r).

Time axis: a live stream reads seconds before now. A recording being replayed
reads seconds from its first row: the plot asks the replay source which
t_host that first row maps to (`recording_clock()`), each frame, since a seek
or a loop maps it anew; the samples from before such a jump are dropped from
the plot, as one axis cannot label both sides of it.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np

from monitor.canvas import backend
from monitor.canvas.history import History
from monitor.canvas.plotcanvas import PlotCanvas, ViewState
from monitor.canvas.response_panel import active_designs
from monitor.canvas.time_axis import TimeAxis

RecordingClock = Callable[[], "tuple[float, float] | None"]

FRAME_S = 1 / 60          # at most this often a new frame
SPECTRUM_S = 0.25         # the Welch spectrum is recomputed this often
MIN_WINDOW_S = 0.05
DEFAULT_WINDOW_S = 10.0


def estimate_rate(t_host: np.ndarray) -> float | None:
    """Sample rate (Hz) from host timestamps (s): 1 / median spacing, or None."""
    spacing = np.diff(t_host)
    spacing = spacing[spacing > 0]
    if len(spacing) < 8:
        return None
    return float(1.0 / np.median(spacing))


class LivePlot:
    """The plot window of a running monitor.pipeline.Pipeline.

    get_selected_channel: returns the index (schema order) of the channel the
    UI has selected; the spectrum and response panels show that channel.
    window_s: initial rolling window (s); size: window size (width, height) px.
    recording_clock: for a recording, returns (origin, since) in host t_host
    seconds: where the recording's first row lies and the first sample under
    that mapping, or None while unknown; started: the recording's wall-clock
    start for the caption. By default both come from the pipeline's source
    when it has `recording_clock` (replay.player.ReplaySource); a live source
    has none and the axis reads seconds before now.
    """

    def __init__(self, pipeline, get_selected_channel: Callable[[], int],
                 window_s: float = DEFAULT_WINDOW_S, size: tuple[int, int] = (1280, 800),
                 recording_clock: RecordingClock | None = None,
                 started: str | None = None) -> None:
        if not window_s > 0:
            raise ValueError(f"window_s = {window_s!r} must be a positive number of seconds")
        self.pipeline = pipeline
        self.get_selected_channel = get_selected_channel
        self.size = size
        self.state = ViewState(window_s=float(window_s))
        self.reason: str | None = None     # why the plot closed; None while open or never opened
        self.frames = 0                    # frames drawn since open()
        self._plot: PlotCanvas | None = None
        self._app = None
        self._history: History | None = None
        self._channels: tuple[str, ...] = ()
        self._shown_chain: object = None
        self._shown_selected = -1
        self._last_frame = 0.0
        self._last_spectrum = 0.0
        self._closing = False
        source = getattr(pipeline, "source", None)
        if recording_clock is None:
            recording_clock = getattr(source, "recording_clock", None)
            if started is None and recording_clock is not None:
                header = getattr(getattr(source, "recording", None), "header", None)
                started = getattr(header, "started", None)
        self.recording_clock = recording_clock
        self.started = started
        self._since: float | None = None    # first t_host of the recording's current mapping

    @property
    def is_open(self) -> bool:
        return self._plot is not None

    @property
    def canvas(self) -> PlotCanvas | None:
        """The panels being shown (None while closed); read it, draw through pump()."""
        return self._plot

    @property
    def shown_chain(self) -> object:
        """The pipeline chain object the response panel was last drawn from."""
        return self._shown_chain

    # -- opening and closing -------------------------------------------------------------

    def open(self) -> str | None:
        """Open the window; None on success, else one sentence why there is no window."""
        if self._plot is not None:
            return None
        schema, ring = self.pipeline.schema, self.pipeline.ring
        if schema is None or ring is None or ring.total < 2:
            return "no samples have arrived yet; open the plot once data is flowing"
        rate = self._rate(ring)
        if rate is None:
            return "the sample rate is not known yet; give --rate or wait a moment"
        try:
            self._app = backend.use(backend.WINDOW)
        except backend.BackendUnavailable as exc:
            return str(exc)
        try:
            self._build(schema, rate)
        except Exception as exc:  # a window system refusing a window is not a bug of ours
            self._plot = None
            return f"the plot window could not open ({type(exc).__name__}: {exc})"
        self.reason = None
        return None

    def _rate(self, ring) -> float | None:
        known = self.pipeline.rate()
        if known is not None:
            return float(known[0])
        return estimate_rate(ring.latest(256).t_host)

    def _build(self, schema, rate: float) -> None:
        self._channels = tuple(schema.channels)
        units = tuple(schema.unit(i) for i in range(len(self._channels)))
        plot = PlotCanvas(self._channels, units, rate, size=self.size, show=True,
                          title="tunetrace plot", overlay=self.state.overlay, app=self._app)
        self._plot = plot
        plot.canvas.events.close.connect(self._on_close)
        plot.canvas.events.key_press.connect(self._on_key)
        plot.canvas.events.mouse_move.connect(self._on_mouse)
        self._app.process_events()      # let the window appear, then fix the clip rectangles
        plot.refresh_clipping()
        self._history = None
        self._shown_chain, self._shown_selected = None, -1
        self._last_spectrum = 0.0
        self.frames = 0

    def close(self, reason: str = "the plot window was closed") -> None:
        """Close the window (if open); the stream goes on. `reason` is kept in `self.reason`."""
        plot, self._plot = self._plot, None
        if plot is None:
            return
        self.reason = reason
        self._closing = True
        try:
            plot.close()
            if self._app is not None:
                self._app.process_events()
        except Exception:  # noqa: S110 - the window is gone either way
            pass
        finally:
            self._closing = False

    def _on_close(self, event) -> None:
        if not self._closing:
            self._plot = None
            self.reason = "the plot window was closed"

    # -- input ---------------------------------------------------------------------------

    def _on_key(self, event) -> None:
        state = self.state
        key = event.key.name if event.key is not None else ""
        text = event.text or ""
        if key == "Space":
            state.frozen = not state.frozen
        elif text == "r":
            state.following, state.frozen = True, False
            if self._plot is not None:
                self._plot.time.restart_autoscale()
        elif text in ("[", "]"):
            limit = self._max_window_s()
            state.window_s = min(max(state.window_s * (0.5 if text == "[" else 2.0),
                                     MIN_WINDOW_S), limit)
            state.following = True
        elif text == "o" and self._plot is not None:
            state.overlay = not state.overlay
            self._rebuild()

    def _on_mouse(self, event) -> None:
        self.state.cursor = (float(event.pos[0]), float(event.pos[1]))

    def _max_window_s(self) -> float:
        ring = self.pipeline.ring
        rate = self._plot.rate_hz if self._plot is not None else 1.0
        return max(MIN_WINDOW_S, (ring.capacity if ring is not None else 1) / rate)

    def _rebuild(self) -> None:
        """Rebuild the panels in the same window (overlay toggle, new schema)."""
        schema = self.pipeline.schema
        units = (tuple(schema.unit(i) for i in range(len(self._channels)))
                 if schema is not None else None)
        self._plot.rebuild(self._channels, units, overlay=self.state.overlay)
        self._plot.refresh_clipping()
        self._shown_chain, self._shown_selected = None, -1
        self._last_spectrum = 0.0

    # -- drawing -------------------------------------------------------------------------

    def pump(self) -> None:
        """Handle window events and draw one frame if one is due. Never raises."""
        if self._plot is None:
            return
        try:
            self._app.process_events()
            if self._plot is None:          # closed by the user during the events
                return
            now = time.monotonic()
            if now - self._last_frame < FRAME_S * 0.9:
                return
            self._last_frame = now
            self._frame(now)
            self._plot.canvas.update()
            self._app.process_events()
            self.frames += 1
        except Exception as exc:  # the plot must never take the session down
            self.close(f"the plot stopped after an error ({type(exc).__name__}: {exc}); "
                       "open it again to retry")

    def _frame(self, now: float) -> None:
        plot, state, ring = self._plot, self.state, self.pipeline.ring
        if plot.resized_to is not None:     # the user resized the window: lay out again
            plot.resize(plot.resized_to)
            self._shown_chain, self._last_spectrum = None, 0.0
        schema = self.pipeline.schema
        if schema is not None and tuple(schema.channels) != self._channels:
            self._channels = tuple(schema.channels)
            self._history = None
            self._rebuild()
        k = len(self._channels)
        selected = int(self.get_selected_channel() or 0)
        state.selected = selected = min(max(selected, 0), k - 1)
        rate = self._rate(ring) or plot.rate_hz
        if abs(rate - plot.rate_hz) > 0.01 * plot.rate_hz:
            plot.set_rate(rate)
            self._shown_chain, self._last_spectrum = None, 0.0
        history = self._history_for(ring, rate)
        if not state.frozen:
            history.pull(ring)
        plot.time_axis = self._time_axis(history)
        if plot.time.moved_by_user():
            state.following = False
        plot.show_traces(history, state)
        chain = self.pipeline.chain
        designs = active_designs(chain, self._channels[selected])
        if chain is not self._shown_chain or selected != self._shown_selected:
            plot.show_response(selected, designs)
            self._shown_chain, self._shown_selected = chain, selected
            self._last_spectrum = 0.0
        if now - self._last_spectrum >= SPECTRUM_S and not (state.frozen and self._last_spectrum):
            plot.show_spectrum(history, selected, designs)
            self._last_spectrum = now
        plot.readout = plot.cursor_text(history, *state.cursor) if state.cursor else ""
        mode = ("frozen" if state.frozen else "following" if state.following
                else "zoomed (r follows)")
        if plot.time_axis.is_recording:
            mode += ", recording time"
        plot.status = (f"{rate:.4g} Hz   window {state.window_s:.3g} s   {mode}   "
                       "keys: space freeze, r follow, [ ] window, o overlay")
        plot.decorate(selected, state.cursor)

    def _time_axis(self, history: History) -> TimeAxis:
        """The axis for this frame; after a seek or loop, drop the samples from before it."""
        clock = self.recording_clock() if self.recording_clock is not None else None
        if clock is None:
            return TimeAxis()
        origin, since = float(clock[0]), float(clock[1])
        if self._since != since:
            self._since = since
            self.state.following = True
            if self._plot is not None:
                self._plot.time.restart_autoscale()
        history.drop_before(since)
        return TimeAxis(origin=origin, started=self.started)

    def _history_for(self, ring, rate: float) -> History:
        """The plot's history, (re)made when the window outgrows it or the ring changed."""
        wanted = min(ring.capacity, max(16, math.ceil(self.state.window_s * rate * 1.1) + 64))
        history = self._history
        if history is None or history.capacity < wanted or history.channels != ring.channels:
            history = History(ring.channels, wanted)
            self._history = history
        return history
