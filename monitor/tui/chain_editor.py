"""The stage list of the selected channel: one line per stage that selects it."""

from __future__ import annotations

from collections.abc import Sequence

from rich.text import Text
from textual.widgets import OptionList
from textual.widgets.option_list import Option

from filters.kinds import KINDS
from filters.spec import ChainSpec, StageSpec
from monitor.tui.chain_edit import sharers

SUMMARY_KEYS = 3


def stage_summary(stage: StageSpec) -> str:
    """'rc-lowpass cutoff_hz=8 tustin-prewarp' : the kind and its first few parameters."""
    shown = []
    for key in KINDS[stage.kind].keys:
        if key in stage.params and key != "method":
            value = stage.params[key]
            shown.append(f"{key}={value:g}" if isinstance(value, float) else f"{key}={value}")
    if KINDS[stage.kind].analog:
        shown.append(str(stage.params.get("method", KINDS[stage.kind].defaults["method"])))
    return " ".join([stage.kind, *shown[:SUMMARY_KEYS + 1]])


HIGHLIGHT_MARK = "\u25b8"       # before the highlighted stage: readable without colour


class StageList(OptionList):
    """Stages of one channel in run order; option ids are the stages' file indices.

    The highlighted stage (the one the form edits and d, <, >, b act on) carries a
    marker in its text, not only a colour.
    """

    DEFAULT_CSS = """
    StageList { height: auto; max-height: 10; min-height: 3; border: round #3a4a5c; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.indices: list[int] = []
        self._stage_lines: list[Text] = []
        self._marked_at: int | None = None

    def show(self, spec: ChainSpec, channel: str, channels: Sequence[str],
             highlight: int | None = None) -> None:
        """List `channel`'s stages; keep `highlight` (a file index) highlighted if given."""
        self.border_title = f"chain of {channel}" if channel else "chain"
        own = spec.stages_for(channel) if channel else []
        self.indices = [i for i, _ in own]
        lines = []
        for n, (i, stage) in enumerate(own, start=1):
            line = Text(f"{n}. ")
            line.append(stage_summary(stage), style="dim strike" if stage.bypass else "")
            if stage.bypass:
                line.append("  bypassed", style="#e0c060")
            others = sharers(spec, i, channel, channels)
            if others:
                line.append(f"  +{','.join(others)}", style="#7fb0e0")
            lines.append(line)
        self._stage_lines = lines
        self._marked_at = None
        self.clear_options()
        self.add_options([Option(self._prompt(k), id=str(i))
                          for k, i in enumerate(self.indices)])
        if not self.indices:
            return
        position = self.indices.index(highlight) if highlight in self.indices else 0
        self.highlighted = position
        self._mark(position)

    def _prompt(self, position: int) -> Text:
        mark = f"{HIGHLIGHT_MARK} " if position == self._marked_at else "  "
        return Text(mark) + self._stage_lines[position]

    def _mark(self, position: int | None) -> None:
        """Move the marker to `position` (the highlighted option)."""
        previous, self._marked_at = self._marked_at, position
        for k in {previous, position} - {None}:
            if k < len(self._stage_lines):
                self.replace_option_prompt_at_index(k, self._prompt(k))

    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        if event.option_list is self:
            self._mark(event.option_index)       # the event goes on to the app

    @property
    def selected_index(self) -> int | None:
        """File index of the highlighted stage, or None."""
        if self.highlighted is None or not self.indices:
            return None
        return self.indices[min(self.highlighted, len(self.indices) - 1)]
