"""The parameter form and the stage list on small harness apps: keys in bursts, as typed.

The harness app delivers keys as the real app does (monitor.tui.keyorder.KeyOrder);
keys go in as one burst (tui_helpers.press) and the tests wait on what the widgets
then hold. No pipeline: the form designs with filters.design at a given rate.
"""

from __future__ import annotations

import asyncio

from rich.text import Text
from textual import events
from textual.app import App, ComposeResult
from tui_helpers import press, until

from filters.chainfile import parse_chain
from filters.spec import StageSpec
from monitor.tui.chain_editor import HIGHLIGHT_MARK, StageList
from monitor.tui.keyorder import KeyOrder
from monitor.tui.param_form import FOCUS_MARK, FormTarget, ParamForm

RATE = 250.0
STAGE = StageSpec("butterworth", {"band": "lowpass", "order": 4, "cutoff_hz": 5.0})
CHAIN = parse_chain("""
[[stage]]
kind = "median"
window = 5
channels = ["load"]

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
channels = ["load", "current"]

[[stage]]
kind = "rc-lowpass"
cutoff_hz = 8.0
channels = ["load"]
""")


class FormApp(KeyOrder, App[None]):
    """Only the form, editing STAGE as stage 3 of load; records what it posts."""

    def __init__(self) -> None:
        super().__init__()
        self.applied: list[StageSpec] = []
        self.notices: list[str] = []

    def compose(self) -> ComposeResult:
        yield ParamForm(id="form")

    async def on_mount(self) -> None:
        form = self.query_one(ParamForm)
        await form.show(FormTarget(2, STAGE, RATE, (), 1.0, "load", 3))

    def on_param_form_apply(self, message: ParamForm.Apply) -> None:
        self.applied.append(message.stage)

    def on_param_form_notice(self, message: ParamForm.Notice) -> None:
        self.notices.append(message.text)


async def _focused_field(pilot, app: FormApp, key: str):
    field = app.query_one(f"#field-{key}")
    app.screen.set_focus(field)
    assert await until(pilot, lambda: app.focused is field)
    return field


def test_a_burst_through_an_invalid_state_applies_exactly_what_was_typed():
    async def scenario():
        app = FormApp()
        async with app.run_test(size=(100, 40)) as pilot:
            assert await until(pilot, lambda: app.query_one(ParamForm).target is not None)
            field = await _focused_field(pilot, app, "cutoff_hz")
            # End, six Backspaces (empty), "2..": invalid, Backspace, "75", Enter: one burst
            await press(pilot, "end", *["backspace"] * 6, "2", ".", ".", "backspace", "7",
                        "5", "enter")
            assert await until(pilot, lambda: len(app.applied) == 1)
            assert field.value == "2.75"
            assert app.applied[0].params["cutoff_hz"] == 2.75
            assert app.applied[0].params["order"] == 4
            # the focused field's name carries the marker, not only a colour
            label = field.parent.children[0]
            assert str(label.render()).startswith(FOCUS_MARK.strip())

    asyncio.run(scenario())


def test_a_paste_replaces_the_selected_text_and_a_refusal_keeps_the_text():
    async def scenario():
        app = FormApp()
        async with app.run_test(size=(100, 40)) as pilot:
            assert await until(pilot, lambda: app.query_one(ParamForm).target is not None)
            field = await _focused_field(pilot, app, "cutoff_hz")
            field.select_all()
            app.post_message(events.Paste("12.5\nsecond line is not a value"))
            await press(pilot, "enter")
            assert await until(pilot, lambda: len(app.applied) == 1)
            assert field.value == "12.5" and app.applied[0].params["cutoff_hz"] == 12.5
            # at or above Nyquist (125 Hz at 250 Hz): refused, said, and the text stays
            await press(pilot, "ctrl+u", "1", "3", "0", "enter")
            assert await until(pilot, lambda: app.notices)
            assert field.value == "130"
            assert "refused" in app.notices[-1] and len(app.applied) == 1
            error = str(app.query_one("#error-cutoff_hz").render())
            assert "Nyquist" in error or "125" in error

    asyncio.run(scenario())


def test_tab_goes_through_the_fields_in_screen_order_and_digits_stay_text():
    async def scenario():
        app = FormApp()
        async with app.run_test(size=(100, 40)) as pilot:
            assert await until(pilot, lambda: app.query_one(ParamForm).target is not None)
            form = app.query_one(ParamForm)
            first = await _focused_field(pilot, app, "band")
            assert form.first_field() is first
            # order: band, order, cutoff_hz, ...; "3" in order is text, not a channel key
            await press(pilot, "tab", "ctrl+u", "3", "tab", "ctrl+u", "7", "enter")
            assert await until(pilot, lambda: len(app.applied) == 1)
            assert app.focused is app.query_one("#field-cutoff_hz")
            assert app.applied[0].params["order"] == 3
            assert app.applied[0].params["cutoff_hz"] == 7.0
            await press(pilot, "shift+tab")
            assert app.focused is app.query_one("#field-order")

    asyncio.run(scenario())


class ListApp(KeyOrder, App[None]):
    """Only the stage list of one channel of CHAIN."""

    def __init__(self, channel: str) -> None:
        super().__init__()
        self.channel = channel

    def compose(self) -> ComposeResult:
        yield StageList(id="stages")

    def on_mount(self) -> None:
        stages = self.query_one(StageList)
        stages.show(CHAIN, self.channel, ("load", "current", "vib"))
        self.screen.set_focus(stages)


def _lines(stages: StageList) -> list[str]:
    return [Text.from_markup(str(stages.get_option_at_index(i).prompt)).plain
            if not isinstance(stages.get_option_at_index(i).prompt, Text)
            else stages.get_option_at_index(i).prompt.plain
            for i in range(stages.option_count)]


def test_stage_numbers_are_per_channel_and_the_highlight_is_marked_in_text():
    async def scenario():
        app = ListApp("current")
        async with app.run_test(size=(80, 20)) as pilot:
            stages = app.query_one(StageList)
            assert await until(pilot, lambda: stages.option_count == 1)
            # notch is stage 2 of the file but the first (and only) stage of current
            assert _lines(stages)[0].lstrip(HIGHLIGHT_MARK + " ").startswith("1. notch")
            assert "+load" in _lines(stages)[0]
            assert stages.selected_index == 1

        app = ListApp("load")
        async with app.run_test(size=(80, 20)) as pilot:
            stages = app.query_one(StageList)
            assert await until(pilot, lambda: stages.option_count == 3)
            marked = [line.startswith(HIGHLIGHT_MARK) for line in _lines(stages)]
            assert marked == [True, False, False]
            await press(pilot, "down", "down")
            assert await until(pilot, lambda: [line.startswith(HIGHLIGHT_MARK)
                                               for line in _lines(stages)]
                               == [False, False, True])
            assert stages.selected_index == 2

    asyncio.run(scenario())
