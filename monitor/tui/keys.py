"""Every key of the terminal UI in one table: bindings, help screen and command palette.

Keeping them in one place means the help screen and the palette cannot
forget a key the app has.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class KeyAction:
    """One user action.

    keys:    textual key names, comma-separated (the first is shown).
    action:  the App action name (method `action_<name>`), with arguments if any.
    title:   short label for the footer and the palette.
    help:    one sentence for the help screen and the palette.
    group:   heading on the help screen.
    footer:  shown in the footer bar.
    """

    keys: str
    action: str
    title: str
    help: str
    group: str
    footer: bool = False

    @property
    def shown_key(self) -> str:
        return KEY_LABELS.get(self.keys.split(",")[0], self.keys.split(",")[0])


KEY_LABELS = {
    "question_mark": "?", "space": "space", "minus": "-", "plus": "+", "equals_sign": "=",
    "less_than_sign": "<", "greater_than_sign": ">", "exclamation_mark": "!",
    "delete": "del", "escape": "esc",
}

VIEW, CHAIN, FILES, REPLAY = "View", "Chain of the selected channel", "Files", "Replay"

ACTIONS: tuple[KeyAction, ...] = (
    KeyAction("q", "quit_session", "quit", "Stop the stream and leave (exit status 0).", VIEW,
              True),
    KeyAction("question_mark", "show_help", "keys", "Show this list of keys.", VIEW, True),
    KeyAction("space", "toggle_view_pause", "hold view",
              "Hold the view still (a recording: pause playback); reading, filtering and "
              "recording go on.", VIEW, True),
    KeyAction("f", "toggle_trace_freeze", "freeze trace",
              "Freeze the trace only; the channel table keeps updating.", VIEW),
    KeyAction("minus", "trace_window(-1)", "shorter window",
              "Show a shorter time window in the trace.", VIEW),
    KeyAction("plus,equals_sign", "trace_window(1)", "longer window",
              "Show a longer time window in the trace.", VIEW),
    KeyAction("g", "ask_analysis_freq", "lag frequency",
              "Set the frequency (Hz) at which lag is computed in the table and the form.", VIEW),
    KeyAction("exclamation_mark", "show_bad_frame", "bad frame",
              "Show the latest rejected frame and why it was rejected.", VIEW),
    KeyAction("o", "open_plot", "plot window",
              "Open the plot window (needs a display).", VIEW),
    KeyAction("escape", "focus_table", "back",
              "Go back one level: from a field to the stage list, from the stage list to the "
              "channel table; in a dialog, cancel it.", VIEW),
    KeyAction("a", "add_stage", "add stage",
              "Add a stage after the highlighted one (pick its kind from a list).", CHAIN, True),
    KeyAction("d,delete", "remove_stage", "remove", "Remove the highlighted stage.", CHAIN, True),
    KeyAction("less_than_sign", "move_stage(-1)", "move up",
              "Move the highlighted stage one place earlier.", CHAIN),
    KeyAction("greater_than_sign", "move_stage(1)", "move down",
              "Move the highlighted stage one place later.", CHAIN),
    KeyAction("b", "toggle_bypass", "bypass", "Bypass the highlighted stage, or put it back.",
              CHAIN, True),
    KeyAction("m", "next_method", "method",
              "Switch the highlighted analog stage to the next discretization method.", CHAIN),
    KeyAction("e", "toggle_scope", "scope",
              "Toggle whether edits go to this channel only (shared stages are split off) "
              "or to every channel a shared stage runs on.", CHAIN),
    KeyAction("z", "reset_filters", "reset state",
              "Reset the state of every filter (they restart by their start policy).", CHAIN),
    KeyAction("u", "undo_edit", "undo",
              "Take back the latest chain edit (add, remove, move, retune, bypass, method, "
              "copy, load); again for the one before.", CHAIN, True),
    KeyAction("U", "redo_edit", "redo", "Make again the edit the latest undo took back.",
              CHAIN),
    KeyAction("c", "copy_chain", "copy chain",
              "Copy this channel's chain to other channels.", CHAIN),
    KeyAction("r", "toggle_recording", "record",
              "Start recording to a CSV file (name proposed with a timestamp), or stop.", FILES,
              True),
    KeyAction("s", "save_chain", "save chain", "Save the whole chain to a chain file.", FILES),
    KeyAction("l", "load_chain", "load chain",
              "Load a chain file; a malformed one is refused and the running chain goes on.",
              FILES),
    KeyAction("t", "ask_seek", "seek", "Jump to a time (s) in the recording.", REPLAY),
    KeyAction("v", "ask_speed", "speed", "Set the playback speed (a factor, or max).", REPLAY),
)

CHANNEL_KEYS = tuple(str(i) for i in range(1, 10))

# The key path: the same moves everywhere (help screen, README; monitor.tui.app.navigate).
KEY_PATH: tuple[tuple[str, str], ...] = (
    ("enter", "On the channel table: go into the selected channel's chain (the stage list)."),
    ("enter", "On a stage: go into its first parameter field."),
    ("tab", "Next field or panel in screen order (table, stage list, each field, then round "
            "again); shift+tab goes back."),
    ("enter", "In a field: apply the stage to the running chain (refused: said beside the "
              "field and in the status, the running chain goes on)."),
    ("esc", "Back one level: field -> stage list -> channel table; in a dialog: cancel."),
    ("0-9 . -", "In a field these are text; elsewhere 1..9 select a channel."),
    ("up down", "Move in the channel table or the stage list (the marker shows the stage)."),
)
