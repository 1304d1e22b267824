"""The help screen: every key of the UI, grouped, generated from the key table."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text

from monitor.stats import MEASURED_HELP, WHITE_HELP
from monitor.tui.dialogs import ShowText
from monitor.tui.keys import ACTIONS, CHANNEL_KEYS, KEY_LABELS, KEY_PATH

CAUTION = (
    "Caution: a filter adds lag and can hide faults. If the filtered signal will feed a "
    "control loop or a safety decision, validate the chain on the real system and follow "
    "the applicable standards and local practice."
)


def help_table() -> Table:
    """A rich table of every key, in groups, plus the keys textual itself provides."""
    table = Table(show_header=False, box=None, padding=(0, 1))
    table.add_column("key", style="bold #ffb347", no_wrap=True)
    table.add_column("what it does")
    group = None
    for action in ACTIONS:
        if action.group != group:
            group = action.group
            table.add_row("", "")
            table.add_row("", Text(group, style="bold underline"))
        keys = " ".join(KEY_LABELS.get(k, k) for k in action.keys.split(","))
        table.add_row(keys, action.help)
    table.add_row("", "")
    table.add_row("", Text("The key path", style="bold underline"))
    for key, sentence in KEY_PATH:
        table.add_row(key, sentence)
    table.add_row(f"{CHANNEL_KEYS[0]}..{CHANNEL_KEYS[-1]}", "Select channel 1 to 9.")
    table.add_row("ctrl+p", "Command palette: every action above by name, once.")
    table.add_row("", "")
    table.add_row("", Text("Figures in the channel table", style="bold underline"))
    table.add_row("NR dB", MEASURED_HELP[0].upper() + MEASURED_HELP[1:]
                  + "; counted from the last change of chain.")
    table.add_row("white dB", WHITE_HELP[0].upper() + WHITE_HELP[1:] + ".")
    table.add_row("lag@f ms", "Group delay of the chain at the lag frequency (g).")
    table.add_row("", "")
    table.add_row("", Text(CAUTION, style="italic #e0c060"))
    return table


class HelpScreen(ShowText):
    """Every key, grouped; esc closes."""

    def __init__(self) -> None:
        super().__init__("Keys of the tunetrace terminal", help_table())
