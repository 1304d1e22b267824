"""Small modal screens: ask for one value, pick a stage kind, pick channels, read a text."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.validation import Validator
from textual.widgets import Input, Label, OptionList, SelectionList, Static
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


class PickChannels(ModalScreen[list[str] | None]):
    """Tick channels (space), enter confirms; returns the ticked names or None."""

    DEFAULT_CSS = DIALOG_CSS.format(name="PickChannels")
    BINDINGS = [Binding("escape", "cancel", "cancel"),
                Binding("enter", "confirm", "confirm", priority=True)]

    def __init__(self, question: str, channels: Sequence[str]) -> None:
        super().__init__()
        self.question = question
        self.channels = list(channels)

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(self.question)
            yield SelectionList[str](*[(c, c) for c in self.channels], id="channels")
            yield Static("space ticks a channel, enter copies, esc cancels", classes="hint")

    def action_confirm(self) -> None:
        self.dismiss(list(self.query_one("#channels", SelectionList).selected))

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
