"""Small modal screens: ask for one value, pick a stage kind, pick channels, read a text."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.content import Content
from textual.message import Message
from textual.screen import ModalScreen
from textual.validation import Validator
from textual.widgets import Input, Label, OptionList, Static
from textual.widgets.option_list import Option

from filters.kinds import KINDS

DIALOG_CSS = """
{name} {{ align: center middle; }}
{name} > Vertical {{
    width: 76; height: auto; max-height: 90%; border: thick #4f8fc0; background: #141a22;
    padding: 1 2;
}}
{name} .hint {{ color: #8a96a3; }}
{name} .error {{ color: #ff8080; height: auto; }}
"""


class AskValue(ModalScreen[str | None]):
    """Ask for one line of text. Enter returns it (if the validators pass), Esc returns None."""

    DEFAULT_CSS = DIALOG_CSS.format(name="AskValue")
    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, question: str, value: str = "", hint: str = "",
                 validators: Iterable[Validator] = ()) -> None:
        super().__init__()
        self.question = question
        self.value = value
        self.hint = hint
        self.validators = list(validators)

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(self.question)
            yield Input(value=self.value, validators=self.validators, id="answer",
                        validate_on=["changed", "submitted"])
            yield Static("", classes="error", id="answer-error")
            if self.hint:
                yield Static(self.hint, classes="hint")

    def on_input_changed(self, event: Input.Changed) -> None:
        self._show(event.validation_result)

    def _show(self, result) -> None:
        message = "" if result is None or result.is_valid else " ".join(
            result.failure_descriptions)
        self.query_one("#answer-error", Static).update(message)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        if event.validation_result is not None and not event.validation_result.is_valid:
            self._show(event.validation_result)
            return
        self.dismiss(event.value.strip())

    def action_cancel(self) -> None:
        self.dismiss(None)


class PickKind(ModalScreen[str | None]):
    """Choose the kind of a new stage from the list of kinds with their summaries."""

    DEFAULT_CSS = DIALOG_CSS.format(name="PickKind") + """
    PickKind > Vertical { width: 110; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label("Kind of the new stage (enter to add, esc to cancel)")
            yield OptionList(*[Option(f"{kind:22s} {info.summary}", id=kind)
                               for kind, info in KINDS.items()], id="kinds")

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        event.stop()
        self.dismiss(event.option.id)

    def action_cancel(self) -> None:
        self.dismiss(None)


TICKED = "[x] "
UNTICKED = "[ ] "
NONE_TICKED = "tick at least one channel (space), or esc to cancel"


class TickList(OptionList):
    """A list of names, each line starting "[x] " when ticked and "[ ] " when not.

    Written on textual's OptionList because SelectionList draws the same "X" for
    ticked and unticked lines (only the colour differs) and its glyph is a class
    constant shared with every ToggleButton, not something one list can change.
    Space ticks or unticks the highlighted line, `a` ticks all (or none when all
    are ticked already), a click toggles the clicked line.
    """

    BINDINGS = [Binding("space", "toggle", "tick", show=False),
                Binding("a", "toggle_all", "tick all", show=False)]

    class Changed(Message):
        """The ticks changed; `ticked` are the ticked names in list order."""

        def __init__(self, tick_list: TickList, ticked: list[str]) -> None:
            super().__init__()
            self.tick_list = tick_list
            self.ticked = ticked

    def __init__(self, names: Sequence[str], id: str | None = None) -> None:
        self.names = list(names)
        self._ticked = [False] * len(self.names)
        super().__init__(*[Option(self._prompt(i)) for i in range(len(self.names))], id=id)

    def _prompt(self, index: int) -> Content:
        # Content, not a str: a str prompt is read as markup and "[x]" would vanish.
        return Content((TICKED if self._ticked[index] else UNTICKED) + self.names[index])

    @property
    def ticked(self) -> list[str]:
        """The ticked names, in list order."""
        return [n for n, on in zip(self.names, self._ticked, strict=True) if on]

    def set_ticked(self, index: int, on: bool) -> None:
        """Tick (`on`) or untick the line at `index` (0-based) and redraw it."""
        if self._ticked[index] != on:
            self._ticked[index] = on
            self.replace_option_prompt_at_index(index, self._prompt(index))

    def on_mount(self) -> None:
        if self.names and self.highlighted is None:
            self.highlighted = 0

    def action_toggle(self) -> None:
        index = self.highlighted
        if index is None:
            return
        self.set_ticked(index, not self._ticked[index])
        self.post_message(self.Changed(self, self.ticked))

    def action_toggle_all(self) -> None:
        on = not all(self._ticked)
        for index in range(len(self.names)):
            self.set_ticked(index, on)
        self.post_message(self.Changed(self, self.ticked))

    def _on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        # a click (enter is the dialog's confirm): toggle the line instead of choosing it
        if event.option_list is self:
            event.stop()
            self.action_toggle()


class PickChannels(ModalScreen[list[str] | None]):
    """Tick channels (space; `a` all or none), enter confirms, esc cancels.

    Dismisses with the ticked names in the order of `channels`, or None on esc.
    Enter with nothing ticked keeps the dialog open and says what to do.
    """

    DEFAULT_CSS = DIALOG_CSS.format(name="PickChannels") + """
    PickChannels #channels { height: auto; max-height: 16; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel"),
                Binding("enter", "confirm", "confirm", priority=True)]

    def __init__(self, question: str, channels: Sequence[str]) -> None:
        super().__init__()
        self.question = question
        self.channels = list(channels)

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(self.question)
            yield TickList(self.channels, id="channels")
            yield Static(self._count_text([]), id="ticked-count")
            yield Static("", classes="error", id="pick-error")
            yield Static("space ticks or unticks, a ticks all or none, enter confirms, "
                         "esc cancels", classes="hint")

    def _count_text(self, ticked: list[str]) -> str:
        return f"{len(ticked)} of {len(self.channels)} ticked"

    def on_tick_list_changed(self, event: TickList.Changed) -> None:
        event.stop()
        self.query_one("#ticked-count", Static).update(self._count_text(event.ticked))
        if event.ticked:
            self.query_one("#pick-error", Static).update("")

    def action_confirm(self) -> None:
        ticked = self.query_one("#channels", TickList).ticked
        if not ticked:
            self.query_one("#pick-error", Static).update(NONE_TICKED)
            return
        self.dismiss(ticked)

    def action_cancel(self) -> None:
        self.dismiss(None)


class ShowText(ModalScreen[None]):
    """A read-only text (help, the latest bad frame); any of esc, q or enter closes it."""

    DEFAULT_CSS = DIALOG_CSS.format(name="ShowText") + """
    ShowText > Vertical { width: 96; }
    ShowText #body { height: auto; }
    """
    BINDINGS = [Binding("escape,q,enter,question_mark", "close", "close")]

    def __init__(self, title: str, body: object) -> None:
        super().__init__()
        self.title_text = title
        self.body = body

    def compose(self) -> ComposeResult:
        from textual.containers import VerticalScroll

        with Vertical():
            yield Label(self.title_text)
            with VerticalScroll():
                yield Static(self.body, id="body")
            yield Static("esc closes", classes="hint")

    def action_close(self) -> None:
        self.dismiss(None)
