"""The two status lines: source and link health, then recording and UI state."""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from typing import Any

from textual.widgets import Static

RATE_MOVE_SHOWN_S = 10.0       # the rate part says the rate moved for this long
NOTICE_S = 8.0                 # a message answers an action for this long, then clears

STATE_STYLES = {
    "connected": "bold #7fd18b", "connecting": "#e0c060", "reconnecting": "bold #f0a040",
    "ended": "bold #c07070",
}


@dataclass
class UiState:
    """What the UI adds to the pipeline's status line.

    notice:  one-shot sentence (the latest message), or ""; shown for NOTICE_S after
             notice_at (time.monotonic()), then cleared.
    focus: where the keys go now, in words ("" when nowhere in particular).
    frozen: the trace is frozen (the view hold is the pipeline's `paused`).
    window_s: trace time window in seconds.
    analysis_hz: frequency at which lag is reported.
    scope: "channel" or "shared" (how chain edits apply).
    recording_started: monotonic time when the current recording started.
    """

    notice: str = ""
    notice_at: float = 0.0
    focus: str = ""
    frozen: bool = False
    window_s: float = 5.0
    analysis_hz: float = 1.0
    scope: str = "channel"
    recording_started: float | None = None
    playback: str = ""          # replay: position and speed, e.g. "at 12.3 s, 2x"
    sticky: list[str] = field(default_factory=list)   # notes shown while they hold


def human_size(n_bytes: int) -> str:
    """1536 -> '1.5 kB' (decimal units, as file managers on Linux show them)."""
    size = float(n_bytes)
    for unit in ("B", "kB", "MB", "GB"):
        if size < 1000 or unit == "GB":
            return f"{size:.0f} {unit}" if unit == "B" else f"{size:.1f} {unit}"
        size /= 1000
    return f"{size:.1f} GB"


def format_duration(seconds: float) -> str:
    """75.2 -> '1:15'; 3725 -> '1:02:05'."""
    s = int(max(seconds, 0))
    h, rest = divmod(s, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def recording_text(status: Any, ui: UiState, now: float | None = None) -> str:
    """'REC weigh-....csv 0:12 48.1 kB', 'not recording', or the recording error."""
    if status.recording:
        try:
            size = human_size(os.path.getsize(status.recording))
        except OSError:
            size = "?"
        started = ui.recording_started
        took = format_duration((now or time.monotonic()) - started) if started else "?"
        return f"REC {os.path.basename(str(status.recording))} {took} {size}"
    if status.recording_error:
        return f"recording stopped: {status.recording_error}"
    return "not recording"


def current_notice(ui: UiState, now: float | None = None) -> str:
    """The latest message while it is fresh, else ''."""
    if ui.notice and (now or time.monotonic()) - ui.notice_at <= NOTICE_S:
        return ui.notice
    return ""


def status_lines(status: Any, ui: UiState) -> tuple[str, str]:
    """Plain text of the two lines (markup-free; tests and the tmux check read these)."""
    notice = current_notice(ui)
    if status is None:
        return "starting...", notice
    rate = (f"{status.rate_hz:.4g} Hz ({status.rate_origin})" if status.rate_hz
            else "rate unknown yet")
    if status.rate_hz and getattr(status, "rate_moved_at", None) is not None \
            and time.monotonic() - status.rate_moved_at <= RATE_MOVE_SHOWN_S:
        rate += f" moved from {status.rate_moved_from:.4g} Hz, chain redesigned"
    line1 = (f"{status.source_description}  {status.source_state}  {rate}  "
             f"frames {status.frames}  bad {status.bad}  dropped {status.dropped}")
    if ui.playback:
        line1 += f"  {ui.playback}"
    flags = []
    if status.paused:
        flags.append("VIEW HELD")
    if ui.frozen:
        flags.append("TRACE FROZEN")
    flags.append("edits: this channel" if ui.scope == "channel" else "edits: all sharing")
    parts = [notice] if notice else []
    if ui.focus:                  # before the rest: a narrow terminal cuts the line's end
        parts.append(f"keys to: {ui.focus}")
    parts.append(recording_text(status, ui))
    if status.chain_error:
        parts.append(f"chain: {status.chain_error}")
    parts += ui.sticky + flags
    return line1, "  |  ".join(parts)


class StatusBar(Static):
    """Two lines under the panels; `show(status, ui)` redraws them."""

    DEFAULT_CSS = """
    StatusBar { height: 2; background: #1c2430; color: #c8d0da; padding: 0 1;
                text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def show(self, status: Any, ui: UiState) -> None:
        from rich.text import Text

        line1, line2 = status_lines(status, ui)
        text = Text(no_wrap=True, overflow="ellipsis")     # one line each, however narrow
        state = status.source_state if status is not None else ""
        if state and state in line1:
            head, _, tail = line1.partition(f"  {state}  ")
            text.append(head + "  ")
            text.append(state, style=STATE_STYLES.get(state, ""))
            text.append("  " + tail)
        else:
            text.append(line1)
        text.append("\n")
        for i, part in enumerate(line2.split("  |  ")):
            if i:
                text.append("  |  ", style="#5a6b7d")
            style = ("bold #ff8080" if part.startswith("REC ") else
                     "#e0c060" if i == 0 and current_notice(ui) else "")
            text.append(part, style=style)
        self.update(text)
