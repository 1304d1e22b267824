"""The channel-ticking dialog (key `c`) driven by textual's pilot on a small harness app.

Ticked and unticked lines must differ in their text ("[x] " / "[ ] "), not only in
colour, so every check reads the lines as the list draws them (render_line).
"""

from __future__ import annotations

import asyncio

from textual.app import App
from textual.widgets import Static
from tui_helpers import make_app, press, until

from filters.chainfile import parse_chain
from monitor.tui.dialogs import NONE_TICKED, PickChannels, PickKind, TickList

CHANNELS = ["load", "current", "vib"]
NOT_YET = object()


class Harness(App):
    """Pushes PickChannels at start and keeps what it was dismissed with."""

    def __init__(self) -> None:
        super().__init__()
        self.result: object = NOT_YET

    def on_mount(self) -> None:
        self.push_screen(PickChannels("Copy the chain of weight to:", CHANNELS), self._done)

    def _done(self, result: list[str] | None) -> None:
        self.result = result


def ready(app: Harness) -> bool:
    """The dialog is up, composed, and its list has the keys."""
    return (isinstance(app.screen, PickChannels) and bool(app.screen.query("#channels"))
            and app.focused is app.screen.query_one("#channels"))


def drawn_lines(app: Harness) -> list[str]:
    """The list's lines as drawn on screen (trailing padding removed)."""
    ticks = app.screen.query_one("#channels", TickList)
    return [ticks.render_line(y).text.strip() for y in range(len(CHANNELS))]


def text_of(app: Harness, selector: str) -> str:
    return str(app.screen.query_one(selector, Static).render())


def scenario(body) -> None:
    async def run() -> None:
        app = Harness()
        async with app.run_test(size=(100, 30)) as pilot:
            assert await until(pilot, lambda: ready(app))
            await body(app, pilot)

    asyncio.run(run())


def test_lines_show_ticks_in_text_and_enter_returns_ticked_names_in_order():
    async def body(app, pilot):
        assert drawn_lines(app) == ["[ ] load", "[ ] current", "[ ] vib"]
        assert text_of(app, "#ticked-count") == "0 of 3 ticked"
        await pilot.press("space")
        assert await until(pilot, lambda: drawn_lines(app)[0] == "[x] load")
        assert drawn_lines(app)[1:] == ["[ ] current", "[ ] vib"]
        assert await until(pilot, lambda: text_of(app, "#ticked-count") == "1 of 3 ticked")
        await pilot.press("down", "down", "space")              # vib
        assert await until(pilot, lambda: drawn_lines(app) == ["[x] load", "[ ] current",
                                                               "[x] vib"])
        await pilot.press("up", "space")                        # current, ticked last
        assert await until(pilot, lambda: drawn_lines(app)[1] == "[x] current")
        assert await until(pilot, lambda: text_of(app, "#ticked-count") == "3 of 3 ticked")
        await pilot.press("up", "space")                        # load unticked again
        assert await until(pilot, lambda: drawn_lines(app)[0] == "[ ] load")
        await pilot.press("enter")
        assert await until(pilot, lambda: app.result is not NOT_YET)
        assert app.result == ["current", "vib"]                 # channel order, not tick order
        assert not isinstance(app.screen, PickChannels)

    scenario(body)


def test_down_then_space_ticks_the_second_line_only():
    async def body(app, pilot):
        await pilot.press("down", "space")
        assert await until(pilot, lambda: drawn_lines(app) == ["[ ] load", "[x] current",
                                                               "[ ] vib"])
        await pilot.press("enter")
        assert await until(pilot, lambda: app.result is not NOT_YET)
        assert app.result == ["current"]

    scenario(body)


def test_enter_with_nothing_ticked_stays_open_and_says_what_to_do():
    async def body(app, pilot):
        await pilot.press("space", "space")                     # ticked and unticked again
        assert await until(pilot, lambda: text_of(app, "#ticked-count") == "0 of 3 ticked")
        await pilot.press("enter")
        assert await until(pilot, lambda: text_of(app, "#pick-error") == NONE_TICKED)
        assert NONE_TICKED == "tick at least one channel (space), or esc to cancel"
        assert isinstance(app.screen, PickChannels) and app.result is NOT_YET
        await pilot.press("space")                              # the message goes once ticked
        assert await until(pilot, lambda: text_of(app, "#pick-error") == "")
        await pilot.press("enter")
        assert await until(pilot, lambda: app.result == ["load"])

    scenario(body)


def test_a_ticks_all_then_none():
    async def body(app, pilot):
        await pilot.press("down", "space", "a")                 # one ticked: a ticks the rest
        assert await until(pilot, lambda: all(line.startswith("[x] ")
                                              for line in drawn_lines(app)))
        await pilot.press("a")
        assert await until(pilot, lambda: all(line.startswith("[ ] ")
                                              for line in drawn_lines(app)))
        assert await until(pilot, lambda: text_of(app, "#ticked-count") == "0 of 3 ticked")
        await pilot.press("a", "enter")
        assert await until(pilot, lambda: app.result == CHANNELS)

    scenario(body)


def test_a_click_toggles_the_clicked_line():
    async def body(app, pilot):
        ticks = app.screen.query_one("#channels", TickList)
        await pilot.click(ticks, offset=(4, 3))                 # vib, below the top border
        assert await until(pilot, lambda: drawn_lines(app)[2] == "[x] vib")
        assert app.result is NOT_YET                            # a click does not confirm
        await pilot.click(ticks, offset=(4, 3))
        assert await until(pilot, lambda: drawn_lines(app)[2] == "[ ] vib")

    scenario(body)


def test_esc_cancels_with_none_even_after_ticking():
    async def body(app, pilot):
        await pilot.press("space")
        assert await until(pilot, lambda: drawn_lines(app)[0] == "[x] load")
        await pilot.press("escape")
        assert await until(pilot, lambda: app.result is not NOT_YET)
        assert app.result is None

    scenario(body)


def test_names_with_brackets_are_shown_as_typed():
    # a str prompt would be read as markup; channel names come from the board's header
    ticks = TickList(["a[x]", "[b]"])
    assert [str(ticks.get_option_at_index(i).prompt) for i in range(2)] == [
        "[ ] a[x]", "[ ] [b]"]


def test_in_the_app_a_ticks_all_instead_of_adding_a_stage(start_pipeline):
    # `a` is also the app's "add a stage" key; inside the dialog the list's own `a` wins
    pipeline = start_pipeline(parse_chain(
        '[[stage]]\nkind = "median"\nwindow = 5\nchannels = ["load"]\n'))

    def kinds_on(channel: str) -> list[str]:
        return [stage.kind for _, stage in pipeline.chain.spec.stages_for(channel)]

    async def run() -> None:
        app = make_app(pipeline)
        async with app.run_test(size=(160, 48)) as pilot:
            assert await until(pilot, lambda: app.session.ready)
            await press(pilot, "c")                              # copy the chain of load
            assert await until(pilot, lambda: isinstance(app.screen, PickChannels)
                               and bool(app.screen.query("#channels")))
            ticks = app.screen.query_one("#channels", TickList)
            await press(pilot, "a")
            assert await until(pilot, lambda: ticks.ticked == ["current", "vib"])
            assert isinstance(app.screen, PickChannels) and not isinstance(app.screen, PickKind)
            assert [ticks.render_line(y).text.strip() for y in range(2)] == [
                "[x] current", "[x] vib"]
            await press(pilot, "enter")
            assert await until(pilot, lambda: kinds_on("vib") == ["median"])
            assert kinds_on("current") == ["median"]
            await press(pilot, "q")

    asyncio.run(run())
