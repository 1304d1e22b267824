"""The tunetrace terminal: every channel at a glance, the selected channel's chain to edit.

Layout (top to bottom): the channel table; the trace of the selected channel
beside its stage list and parameter form; two status lines; the footer.

Threads: the pipeline's reader thread never waits on the UI. The UI polls
`ring.latest(n)` and `status()` from timers on textual's event loop (trace at
10 Hz, table and status at 2 Hz) and talks back only through
`pipeline.submit(...)`. Edits build and validate the new ChainSet here in the
UI thread, so a refused edit never reaches the reader.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from typing import Any

from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Footer, OptionList

from monitor.errors import UserError
from monitor.tui.chain_actions import ChainActions
from monitor.tui.chain_editor import StageList
from monitor.tui.channel_table import ChannelRow, ChannelTable
from monitor.tui.dialogs import ShowText
from monitor.tui.file_actions import FileActions
from monitor.tui.help_screen import HelpScreen
from monitor.tui.keyorder import KeyOrder, binding_map
from monitor.tui.keys import ACTIONS, CHANNEL_KEYS
from monitor.tui.palette import SessionCommands
from monitor.tui.param_form import FOCUS_MARK, FormTarget, ParamForm
from monitor.tui.plot_actions import NO_DISPLAY, PlotActions
from monitor.tui.session import ChainSession
from monitor.tui.status_bar import StatusBar, UiState
from monitor.tui.trace import WINDOWS_S, TraceView

TRACE_HZ = 10.0
TABLE_HZ = 2.0
STATS_MAX_S = 10.0           # the table's statistics cover the trace window, at most this long
DEFAULT_WINDOW_S = 5.0
DEFAULT_ANALYSIS_HZ = 1.0    # lag is read where a weighing or control band usually lives


def _bindings() -> list[Binding]:
    bindings = [Binding(a.keys, a.action, a.title, show=a.footer) for a in ACTIONS]
    bindings += [Binding(k, f"select_channel({int(k) - 1})", f"channel {k}", show=False)
                 for k in CHANNEL_KEYS]
    return bindings


class TunetraceApp(KeyOrder, ChainActions, FileActions, PlotActions, App[int]):
    """The live session on one pipeline; `args` are the CLI options of live/demo/replay."""

    TITLE = "tunetrace"
    CSS = """
    Screen { layout: vertical; background: #10151c; }
    #middle { height: 1fr; }
    #side { width: 45%; min-width: 44; max-width: 64; }
    #channels.has-focus, #stages.has-focus, #form.has-focus { border: heavy #ffb347; }
    """
    BINDINGS = _bindings()
    COMMANDS = {SessionCommands}      # our actions once; textual's own entries would repeat them
    app_keys = binding_map(BINDINGS)      # delivered in typing order (monitor.tui.keyorder)

    def __init__(self, pipeline: Any, args: argparse.Namespace) -> None:
        super().__init__()
        self.pipeline = pipeline
        self.args = args
        self.session = ChainSession(pipeline)
        self.ui = UiState(window_s=DEFAULT_WINDOW_S,
                          analysis_hz=float(getattr(args, "analysis_hz", None)
                                            or DEFAULT_ANALYSIS_HZ))
        self.selected = 0
        self.plot: Any = None                       # monitor.canvas.LivePlot once opened
        self._plot_timer: Any = None
        self._plot_waiting = False
        self._plot_reported = False
        self._shown_key: tuple | None = None       # (spec, channel) the chain panel shows
        self._last_status: Any = None
        self._last_state = "connecting"
        self._view_held = False
        self._pipeline_notice: str | None = None
        self._refresh_timers: list[Any] = []
        self._field_wanted: int | None = None     # stage whose first field gets the focus
        self.table: ChannelTable | None = None
        self.trace: TraceView | None = None
        self.status_bar: StatusBar | None = None

    # -- layout -----------------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        # kept by reference: the timers use them, also while the screen is torn down
        self.table, self.trace, self.status_bar = (
            ChannelTable(id="channels", lag_hz=self.ui.analysis_hz), TraceView(id="trace"),
            StatusBar(id="status"))
        yield self.table
        with Horizontal(id="middle"):
            yield self.trace
            with Vertical(id="side"):
                yield StageList(id="stages")
                yield ParamForm(id="form")
        yield self.status_bar
        yield Footer()

    def on_mount(self) -> None:
        self._refresh_timers = [self.set_interval(1 / TRACE_HZ, self.refresh_trace),
                                self.set_interval(1 / TABLE_HZ, self.refresh_table)]
        duration = getattr(self.args, "duration", None)
        if duration:
            self.set_timer(float(duration), self.action_quit_session)
        self.table.focus()
        if os.environ.get("DISPLAY"):
            self.action_open_plot()
        else:
            self.say(NO_DISPLAY)                       # once; the next message replaces it
        self.refresh_table()

    # -- what the panels show --------------------------------------------------------------

    @property
    def channel(self) -> str:
        channels = self.session.channels
        return channels[min(self.selected, len(channels) - 1)] if channels else ""

    def _window_samples(self, seconds: float) -> int:
        ring = self.pipeline.ring
        rate = self.pipeline.rate()
        hz = rate[0] if rate else 100.0
        return max(2, min(int(seconds * hz), ring.capacity if ring is not None else 2))

    def refresh_trace(self) -> None:
        """10 Hz: the trace, and the chain panel when the running chain changed."""
        self._sync_chain()
        ring = self.pipeline.ring
        if ring is None or self.ui.frozen or not self.session.channels:
            return
        snapshot = ring.latest(self._window_samples(self.ui.window_s))
        if len(snapshot) == 0:
            return
        c = min(self.selected, snapshot.raw.shape[1] - 1)
        unit = self.pipeline.schema.unit(c) if self.pipeline.schema else ""
        caption = f"{self.channel} [{unit}]  last {self.ui.window_s:g} s" if unit else (
            f"{self.channel}  last {self.ui.window_s:g} s")
        # the trace draws samples evenly spaced, so its axis is their count over the rate
        # (host arrival times bunch up after a stall and would stretch it)
        rate = self.pipeline.rate()
        span = (len(snapshot) - 1) / rate[0] if rate else float(
            snapshot.t_host[-1] - snapshot.t_host[0])
        self.trace.show(snapshot.raw[:, c], snapshot.filtered[:, c], span, caption)

    def refresh_table(self) -> None:
        """2 Hz: the channel table and the status lines."""
        status = self.pipeline.status()
        self._last_status = status
        self._status_extras(status)
        self.status_bar.show(status, self.ui)
        ring = self.pipeline.ring
        if ring is None or not self.session.channels:
            return
        from monitor.stats import channel_stats

        snapshot = ring.latest(self._window_samples(min(self.ui.window_s, STATS_MAX_S)))
        stats = channel_stats(snapshot, self.pipeline.chain, status.chain_since)
        schema = self.pipeline.schema
        rows = []
        for k, name in enumerate(self.session.channels):
            s = stats[k] if k < len(stats) else None
            rows.append(ChannelRow(
                name=name, unit=schema.unit(k),
                last=float(snapshot.raw[-1, k]) if s else math.nan,
                mean=s.mean_raw if s else math.nan,
                rms_raw=s.noise_raw if s else math.nan,
                rms_filtered=s.noise_filtered if s else math.nan,
                reduction_db=s.reduction_db if s else math.nan,
                white_db=s.white_reduction_db if s else math.nan,
                lag_ms=self.session.lag_ms(name, self.ui.analysis_hz),
                rate_hz=status.rate_hz or math.nan,
            ))
        self.table.show(rows)

    STATE_NOTICES = {
        "reconnecting": "the source went away; reconnecting (nothing received is lost)",
        "ended": "the source ended; the view holds the last data, q quits",
    }

    def _status_extras(self, status: Any) -> None:
        if status.source_state != self._last_state:
            if status.source_state in self.STATE_NOTICES:
                self.say(self.STATE_NOTICES[status.source_state])
            elif self._last_state == "reconnecting" and status.source_state == "connected":
                self.say(f"reconnected; the gap is marked ({status.last_gap or 'gap'})")
            self._last_state = status.source_state
        if self.is_replay:
            source = self.pipeline.source
            speed = getattr(source, "speed", 1.0)
            shown = "max speed" if speed is None else f"{speed:g}x"
            self.ui.playback = f"at {getattr(source, 'position_s', 0.0):.1f} s, {shown}"
        notes = [n for n in (status.error, status.chain_note, status.warning) if n]
        self.ui.sticky = notes                          # shown while they hold
        if status.notice and status.notice != self._pipeline_notice:
            self._pipeline_notice = status.notice
            self.say(status.notice)
        if not status.recording:
            self.ui.recording_started = None
        elif self.ui.recording_started is None:     # started by --record, with the stream
            from_start = status.recording == getattr(self.args, "record", None)
            self.ui.recording_started = (status.started_monotonic if from_start
                                         else time.monotonic())

    def _sync_chain(self) -> None:
        self.session.sync()
        key = (self.session.spec, self.channel, self.session.channels)
        if key != self._shown_key and self.session.chain is not None:
            self.show_chain()

    def show_chain(self, highlight: int | None = None) -> None:
        """Redraw the stage list of the selected channel and the form of its highlighted stage."""
        stages = self.query_one("#stages", StageList)
        if highlight is None:
            highlight = stages.selected_index
        stages.show(self.session.spec, self.channel, self.session.channels, highlight)
        self._shown_key = (self.session.spec, self.channel, self.session.channels)
        self.call_later(self._show_form)

    def form_target(self) -> FormTarget | None:
        """What the form should edit: the highlighted stage of the selected channel."""
        from monitor.tui.chain_edit import sharers

        index = self.query_one("#stages", StageList).selected_index
        if index is None or index >= len(self.session.spec.stages):
            return None
        try:
            rate = self.session.rate_hz()
        except ValueError as exc:
            self.say(str(exc))
            return None
        others = sharers(self.session.spec, index, self.channel, self.session.channels)
        return FormTarget(index, self.session.spec.stages[index], rate, others,
                          self.ui.analysis_hz, self.channel, self.session.position(index,
                                                                                   self.channel))

    async def _show_form(self) -> None:
        form = self.query_one("#form", ParamForm)
        target = self.form_target()
        if target != form.target or target is None:
            await form.show(target)
        self._mark_focus()
        if self._field_wanted is not None and target is not None \
                and target.index == self._field_wanted:
            self._field_wanted = None
            first = form.first_field()
            if first is not None:
                self.focus_now(first)

    # -- the key path: enter goes in, esc comes back, tab goes round ---------------------------

    async def navigate(self, key: str) -> bool:
        """Enter on the table -> the chain; Enter on a stage -> its first field; Enter in a
        field applies; Esc goes back one level. Runs in typing order (monitor.tui.keyorder)."""
        focused = self.focused
        form = self.query_one("#form", ParamForm)
        stages = self.query_one("#stages", StageList)
        in_form = focused is not None and form in focused.ancestors
        if in_form and form.is_choice(focused) and key in CHANNEL_KEYS:
            # a field is never left by a digit, also a choice that takes no text
            self.say(f"{form.field_name(focused)} is a choice: enter opens it, "
                     "up and down pick, esc goes back")
            return True
        if key == "enter":
            if focused is self.table:
                self.focus_now(stages)
                if not stages.indices:
                    self.say(f"{self.channel} has no stage yet: a adds one")
                return True
            if focused is stages:
                self.enter_stage()
                return True
            if in_form and form.is_text_field(focused):
                form.submit()
                return True
            return False
        if key == "escape":
            if in_form and not form.is_text_field(focused) and not form.is_choice(focused):
                return False                     # an open choice list closes itself
            if in_form:
                self.focus_now(stages)
            elif focused is stages:
                self.focus_now(self.table)
            elif focused is self.table:
                self.say("already at the channel table (q quits)")
            else:
                self.focus_now(self.table)
            return True
        return False

    def focus_now(self, widget: Any) -> None:
        """Move the focus before the next key is handled (Widget.focus waits a turn)."""
        self.screen.set_focus(widget)

    def enter_stage(self, index: int | None = None) -> None:
        """Focus the first parameter field of stage `index` (default: the highlighted one);
        keys typed meanwhile wait for it."""
        stages = self.query_one("#stages", StageList)
        index = stages.selected_index if index is None else index
        if index is None:
            self.say(f"{self.channel} has no stage yet: a adds one")
            return
        form = self.query_one("#form", ParamForm)
        self._field_wanted = index
        self.hold_keys(lambda: self._field_wanted is None or (
            form.first_field() is not None and self.focused is form.first_field()))
        self.call_later(self._show_form)

    def on_descendant_focus(self, event: Any) -> None:
        self._mark_focus()

    def on_descendant_blur(self, event: Any) -> None:
        self.call_after_refresh(self._mark_focus)

    def _mark_focus(self) -> None:
        """Say where the focus is: a marker on the panel and the field, and in the status."""
        focused = self.focused
        form = self.query_one("#form", ParamForm)
        stages = self.query_one("#stages", StageList)
        for panel in (self.table, stages, form):
            inside = focused is not None and (focused is panel or panel in focused.ancestors)
            panel.set_class(inside, "has-focus")
            title = str(panel.border_title or "").removeprefix(FOCUS_MARK)
            panel.border_title = FOCUS_MARK + title if inside else title
        if focused is self.table:
            where = "channel table (enter: chain)"
        elif focused is stages:
            where = "stage list (enter: fields)"
        elif focused is not None and form in focused.ancestors:
            where = f"field {form.field_name(focused)} (enter applies, esc back)"
        else:
            where = ""
        self.ui.focus = where
        if self.status_bar is not None and self.status_bar.is_mounted:
            self.status_bar.show(self._last_status, self.ui)

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if event.option_list.id == "stages":
            self.call_later(self._show_form)

    def on_data_table_row_highlighted(self, event: ChannelTable.RowHighlighted) -> None:
        if event.data_table.id == "channels" and event.cursor_row != self.selected:
            self.selected = event.cursor_row
            self.show_chain()
            self.refresh_trace()

    # -- applying a chain --------------------------------------------------------------------

    def apply_spec(self, spec: Any, highlight: int | None = None,
                   form: ParamForm | None = None, what: str = "") -> bool:
        """Build the chain for `spec` and submit it; on refusal say why and change nothing.

        what: the edit in words; it is said (with how to undo it) and can be undone.
        """
        try:
            self.session.apply(spec, what)
        except ValueError as exc:
            if form is not None:
                form.refuse(str(exc))
            self.say(f"refused: {exc}")
            return False
        self.show_chain(highlight)
        if what:
            self.say(f"{what} (u undoes)")
        return True

    def say(self, message: str) -> None:
        """Show one sentence in the status line; it clears after NOTICE_S or at the next one."""
        self.ui.notice = message
        self.ui.notice_at = time.monotonic()
        if self.status_bar is not None and self.status_bar.is_mounted:
            self.status_bar.show(self._last_status, self.ui)

    # -- view actions ------------------------------------------------------------------------

    def action_quit_session(self) -> None:
        for timer in [*self._refresh_timers, self._plot_timer]:
            if timer is not None:
                timer.stop()                # no refresh may run while the screen unmounts
        self.exit(0)

    def action_show_help(self) -> None:
        self.push_screen(HelpScreen())

    def action_focus_table(self) -> None:
        self.focus_now(self.table)

    def action_select_channel(self, index: int) -> None:
        if index >= len(self.session.channels):
            self.say(f"there is no channel {index + 1}")
            return
        self.table.move_cursor(row=index)
        self.selected = index
        self.show_chain()
        self.refresh_trace()

    def action_toggle_view_pause(self) -> None:
        from monitor.pipeline import Pause, Resume

        paused = self._view_held           # what we asked for last (the status lags a block)
        self._view_held = not paused
        self.pipeline.submit(Resume() if paused else Pause())
        self.say("view resumed" if paused else
                 "view held (space resumes); reading, filtering and recording go on"
                 if not self.is_replay else "playback paused (space resumes)")

    def action_toggle_trace_freeze(self) -> None:
        self.ui.frozen = not self.ui.frozen
        self.say("trace frozen (f releases it)" if self.ui.frozen else "trace follows again")

    def action_trace_window(self, step: int) -> None:
        position = min(range(len(WINDOWS_S)), key=lambda i: abs(WINDOWS_S[i] - self.ui.window_s))
        position = max(0, min(len(WINDOWS_S) - 1, position + step))
        capacity_s = self._capacity_s()
        if WINDOWS_S[position] > capacity_s and step > 0:
            self.say(f"the history holds about {capacity_s:.0f} s; give --ring-seconds "
                     "(and, for a wide stream, --ring-memory) for more")
            return
        self.ui.window_s = WINDOWS_S[position]
        self.say(f"trace window {self.ui.window_s:g} s")
        self.refresh_trace()

    def _capacity_s(self) -> float:
        ring, rate = self.pipeline.ring, self.pipeline.rate()
        if ring is None or not rate:
            return math.inf
        return ring.capacity / rate[0]

    def action_show_bad_frame(self) -> None:
        status = self.pipeline.status()
        if not status.last_bad and not status.bad:
            self.say("no frame has been rejected")
            return
        body = (f"{status.bad} frames rejected so far.\n\nlatest: {status.last_bad!r}\n"
                f"why: {status.last_bad_reason or 'unknown'}")
        self.push_screen(ShowText("Latest rejected frame", body))

    @property
    def is_replay(self) -> bool:
        return getattr(self.args, "verb", None) == "replay" or hasattr(self.pipeline.source,
                                                                      "seek")


def run_app(pipeline: Any, args: argparse.Namespace) -> int:
    """Run the terminal UI on `pipeline` until the user quits; stops the pipeline. Exit status.

    Raises UserError (after stopping the pipeline) when there is no terminal to
    run in: stdin or stdout redirected, or stdin being the data stream itself.
    """
    problem = _no_terminal(pipeline)
    if problem:
        pipeline.stop()
        raise UserError(problem)
    try:
        pipeline.start()
    except RuntimeError:
        pass  # the command started it already
    from monitor.stop_signals import run_ui

    app = TunetraceApp(pipeline, args)
    try:
        result = run_ui(app, pipeline)          # SIGTERM and SIGHUP quit it like q
    finally:
        pipeline.stop()
    status = pipeline.status()
    for problem in (status.recording_error, status.error):
        if problem:
            print(f"tunetrace: {problem}", file=sys.stderr)
    return int(result or 0)


def _no_terminal(pipeline: Any) -> str | None:
    """Why the UI cannot run here (one sentence), or None."""
    if getattr(getattr(pipeline.source, "byte_source", None), "is_stdin", False):
        return ("the stream comes on stdin, so the terminal UI has no keyboard; "
                "give --plain for stats lines instead.")
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        return ("the terminal UI needs a terminal on stdin and stdout; "
                "give --plain for stats lines instead.")
    return None
