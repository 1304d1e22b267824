"""The terminal UI driven by textual's pilot against a live pipeline on a real pty."""

from __future__ import annotations

import asyncio
import os
import re

import numpy as np
import pytest
from scipy import signal
from textual.command import CommandList, CommandPalette
from textual.widgets import Input
from tui_helpers import answer, asking, make_app, press, until

from filters.chainfile import format_chain, parse_chain
from filters.design import design_stage
from filters.spec import StageSpec
from monitor.tui.dialogs import AskValue, PickChannels, PickKind
from monitor.tui.help_screen import HelpScreen
from monitor.tui.keys import ACTIONS

RATE = 250.0
CHAIN = """
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
"""
SIZE = (160, 48)


def run(coro):
    return asyncio.run(coro)


def kinds_on(pipeline, channel: str) -> list[str]:
    return [s.kind for _, s in pipeline.chain.spec.stages_for(channel)]


async def highlight_stage(pilot, app, position: int) -> None:
    stages = app.query_one("#stages")
    assert await until(pilot, lambda: len(stages.indices) > position)
    stages.focus()
    assert await until(pilot, lambda: app.focused is stages)
    stages.highlighted = position
    assert await until(pilot, lambda: app.query_one("#form").target is not None
                       and app.query_one("#form").target.index == stages.indices[position])


async def type_into(pilot, app, selector: str, text: str) -> None:
    """Focus the field, clear it and type `text` key by key, as a user would.

    Returns once the field holds `text`: focus moves on a later turn of the event
    loop and keys reach the field through the app's queues, so a step that
    follows (another field, a Select) must not overtake them.
    """
    field = app.query_one(selector)
    field.focus()
    assert await until(pilot, lambda: app.focused is field)
    field.value = ""
    await press(pilot, *text)
    assert await until(pilot, lambda: field.value == text)


async def leave_field(pilot, app) -> None:
    """Esc back to the channel table (a field -> the stage list -> the table), one level a key."""
    await press(pilot, "escape", "escape")
    assert app.focused is app.query_one("#channels")


def palette_offers(app, query: str, label: str) -> bool:
    """The open command palette has searched `query` and highlights the hit `label` first."""
    if not CommandPalette.is_open(app):
        return False
    palette = app.screen
    commands = palette.query_one(CommandList)
    return (palette.query_one(Input).value == query and commands.highlighted == 0
            and commands.get_option_at_index(0).hit.text == label)


def field_error(app, key: str) -> str:
    return str(app.query_one(f"#error-{key}").render())


def test_editing_a_cutoff_reaches_the_running_chain(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await highlight_stage(pilot, app, 2)                  # rc-lowpass of load
            await type_into(pilot, app, "#field-cutoff_hz", "4.5")
            await press(pilot, "enter")
            expected = design_stage(StageSpec("rc-lowpass", {"cutoff_hz": 4.5}), RATE).sos

            def running_sos():
                return dict(pipeline.chain.designs_for("load"))[2].sos

            assert await until(pilot, lambda: np.allclose(running_sos(), expected, rtol=0,
                                                          atol=1e-15))
            # Outside check: scipy.signal.butter(1, fc, fs) is the bilinear transform with
            # prewarping at fc of the first-order low-pass, i.e. an RC low-pass under
            # tustin-prewarp (the chain file's default method).
            reference = signal.butter(1, 4.5, fs=RATE, output="sos")
            np.testing.assert_allclose(running_sos(), reference, rtol=1e-12, atol=1e-14)
            # the other channels keep what they ran
            assert kinds_on(pipeline, "current") == ["notch"]
            assert "applied" in app.ui.notice
            assert app.focused is app.query_one("#field-cutoff_hz")   # focus stays in the field
            await leave_field(pilot, app)
            await press(pilot, "q")                                     # quit
            assert await until(pilot, lambda: app.return_value is not None)
        return app.return_value

    assert run(scenario()) == 0


def test_a_cutoff_above_nyquist_is_refused_beside_the_field(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await highlight_stage(pilot, app, 2)
            before = pipeline.chain
            sos_before = dict(before.designs_for("load"))[2].sos.copy()
            await type_into(pilot, app, "#field-cutoff_hz", "200")
            await press(pilot, "enter")
            assert await until(pilot, lambda: "Nyquist" in field_error(app, "cutoff_hz"))
            await pilot.pause(0.3)                                 # several reader blocks
            assert pipeline.chain is before
            np.testing.assert_array_equal(dict(pipeline.chain.designs_for("load"))[2].sos,
                                          sos_before)
            # garbage is stopped by the field's validator, with a sentence naming the key
            await type_into(pilot, app, "#field-cutoff_hz", "8k")
            assert await until(pilot, lambda: "cutoff_hz must be a number"
                               in field_error(app, "cutoff_hz"))
            await press(pilot, "enter")
            await pilot.pause(0.2)
            assert pipeline.chain is before
            assert pipeline.status().running
            await leave_field(pilot, app)
            await press(pilot, "q")

    run(scenario())


def test_remove_and_reorder_stages(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await highlight_stage(pilot, app, 0)                  # median
            await press(pilot, "greater_than_sign")
            assert await until(pilot, lambda: kinds_on(pipeline, "load")
                               == ["notch", "median", "rc-lowpass"])
            assert kinds_on(pipeline, "current") == ["notch"]      # untouched
            await press(pilot, "less_than_sign")
            assert await until(pilot, lambda: kinds_on(pipeline, "load")
                               == ["median", "notch", "rc-lowpass"])
            await highlight_stage(pilot, app, 1)                  # the shared notch
            await press(pilot, "d")
            assert await until(pilot, lambda: kinds_on(pipeline, "load")
                               == ["median", "rc-lowpass"])
            assert kinds_on(pipeline, "current") == ["notch"]      # split off, not removed
            await press(pilot, "b")                                 # bypass rc-lowpass
            assert await until(pilot, lambda: pipeline.chain.spec.stages_for("load")[1][1].bypass)
            await press(pilot, "m")                                 # next method
            assert await until(pilot, lambda: pipeline.chain.spec.stages_for("load")[1][1]
                               .params.get("method") == "zoh")
            await press(pilot, "q")

    run(scenario())


def test_add_a_stage_from_the_kind_list_and_copy_the_chain(start_pipeline):
    pipeline = start_pipeline()

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await press(pilot, "2")                                 # channel current
            assert await until(pilot, lambda: app.channel == "current")
            await press(pilot, "a")
            assert await until(pilot, lambda: isinstance(app.screen, PickKind)
                               and bool(app.screen.query("#kinds")))
            kinds = app.screen.query_one("#kinds")
            kinds.highlighted = [o.id for o in kinds.options].index("ema")
            await press(pilot, "enter")
            assert await until(pilot, lambda: kinds_on(pipeline, "current") == ["ema"])
            assert kinds_on(pipeline, "load") == []
            # the new stage's first field has the keys (key path), esc twice goes to the table
            form = app.query_one("#form")
            assert await until(pilot, lambda: app.focused is form.first_field())
            await leave_field(pilot, app)
            await press(pilot, "c")
            assert await until(pilot, lambda: isinstance(app.screen, PickChannels)
                               and bool(app.screen.query("#channels")))
            # others in channel order: load, vib; down to vib, space ticks it, enter copies
            await press(pilot, "down", "space", "enter")
            assert await until(pilot, lambda: kinds_on(pipeline, "vib") == ["ema"])
            assert kinds_on(pipeline, "load") == []
            await press(pilot, "q")

    run(scenario())


def test_record_creates_a_file_that_grows_and_stops(start_pipeline, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline, verb="demo")
        async with app.run_test(size=SIZE) as pilot:
            await press(pilot, "r")
            assert await until(pilot, lambda: asking(app))
            proposed = app.screen.query_one("#answer").value
            assert re.fullmatch(r"weigh-\d{8}-\d{6}\.csv", proposed)
            await press(pilot, "enter")
            path = tmp_path / proposed
            assert await until(pilot, lambda: path.exists() and path.stat().st_size > 0)
            assert await until(pilot, lambda: pipeline.status().recording is not None)
            first = path.stat().st_size
            assert await until(pilot, lambda: path.stat().st_size > first)
            assert await until(pilot, lambda: "REC " + proposed
                               in str(app.query_one("#status").render()))
            await press(pilot, "r")                                 # stop
            assert await until(pilot, lambda: pipeline.status().recording is None)
            text = path.read_text()
            assert text.startswith("# tunetrace recording 1")
            assert "t_host,load,current,vib" in text
            # an unwritable place: one sentence, the stream goes on unrecorded
            await press(pilot, "r")
            assert await until(pilot, lambda: asking(app))
            app.screen.query_one("#answer").value = str(tmp_path / "no-such-dir" / "x.csv")
            await press(pilot, "enter")
            assert await until(pilot, lambda: "does not exist" in app.ui.notice)
            assert pipeline.status().recording is None and pipeline.status().running
            await press(pilot, "q")

    run(scenario())


def test_malformed_chain_file_is_refused_and_a_saved_one_loads(start_pipeline, tmp_path):
    pipeline = start_pipeline(parse_chain(CHAIN))
    bad = tmp_path / "bad.toml"
    bad.write_text('[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = "eight"\n')

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            before = pipeline.chain
            await answer(pilot, app, "l", str(bad))
            assert await until(pilot, lambda: "running chain goes on" in app.ui.notice)
            assert "stage 1" in app.ui.notice
            await pilot.pause(0.2)
            assert pipeline.chain is before
            await answer(pilot, app, "l", str(tmp_path / "missing.toml"))
            assert await until(pilot, lambda: "cannot read" in app.ui.notice)
            assert pipeline.chain is before
            saved = tmp_path / "saved.toml"
            await answer(pilot, app, "s", str(saved))
            assert await until(pilot, lambda: saved.exists())
            assert parse_chain(saved.read_text()) == parse_chain(format_chain(before.spec))
            # a different valid chain loads and runs
            other = tmp_path / "other.toml"
            other.write_text('[[stage]]\nkind = "ema"\nalpha = 0.25\n')
            await answer(pilot, app, "l", str(other))
            assert await until(pilot, lambda: kinds_on(pipeline, "vib") == ["ema"])
            # the load is an edit like any other: u takes it back, U makes it again
            await press(pilot, "u")
            assert await until(pilot, lambda: pipeline.chain.spec == before.spec)
            assert f"undone: loaded the chain from {other}" in app.ui.notice
            await press(pilot, "U")
            assert await until(pilot, lambda: kinds_on(pipeline, "vib") == ["ema"])
            await press(pilot, "U")
            assert await until(pilot, lambda: app.ui.notice.startswith("nothing to redo"))
            # keys typed while the save dialog opens wait for it: one burst, name and enter
            burst = tmp_path / "burst.toml"
            await press(pilot, "s", "ctrl+u", *str(burst), "enter")
            assert await until(pilot, lambda: burst.exists())
            assert parse_chain(burst.read_text()).stages[0].kind == "ema"
            await press(pilot, "q")

    run(scenario())


def test_help_lists_every_key_and_the_palette_offers_every_action(start_pipeline):
    pipeline = start_pipeline()

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await press(pilot, "question_mark")
            assert await until(pilot, lambda: isinstance(app.screen, HelpScreen))
            console_text = _plain(app, app.screen.body)
            for action in ACTIONS:
                assert action.help in console_text, action.action
            flat = " ".join(console_text.split())
            for column in ("NR dB", "white dB", "lag@f ms"):        # the table's figures explained
                assert column in flat
            assert "-10 log10(sum h^2)" in flat and "settled after a step" in flat
            await press(pilot, "escape")
            assert await until(pilot, lambda: not isinstance(app.screen, HelpScreen))
            from monitor.tui.palette import SessionCommands

            provider = SessionCommands(app.screen)
            hits = [hit async for hit in provider.search("record")]
            assert any("record" in hit.text for hit in hits)
            found = [hit async for hit in provider.discover()]
            assert len(found) == len(ACTIONS)
            # through textual's palette itself: ctrl+p, a few letters, enter runs the action
            await press(pilot, "ctrl+p")
            assert await until(pilot, lambda: CommandPalette.is_open(app))
            await press(pilot, *"lag frequency")
            assert await until(pilot, lambda: palette_offers(app, "lag frequency",
                                                             "lag frequency (g)"))
            await press(pilot, "enter")
            assert await until(pilot, lambda: asking(app))
            assert "lag is computed" in str(app.screen.query_one("Label").render())
            await press(pilot, "escape")
            assert await until(pilot, lambda: not isinstance(app.screen, AskValue))
            # the palette opened empty lists our actions once, and none of textual's own
            await press(pilot, "ctrl+p")
            assert await until(pilot, lambda: CommandPalette.is_open(app))
            listed = app.screen.query_one(CommandList)
            assert await until(pilot, lambda: listed.option_count == len(ACTIONS))
            await pilot.pause(0.3)                  # a slower provider would add its entries
            labels = [str(listed.get_option_at_index(i).prompt)
                      for i in range(listed.option_count)]
            assert len(labels) == len(set(labels)) == len(ACTIONS)
            for builtin in ("Theme", "Maximize", "Screenshot", "Keys"):
                assert not any(label.startswith(builtin) for label in labels)
            await press(pilot, "escape")
            assert await until(pilot, lambda: not CommandPalette.is_open(app))
            await press(pilot, "q")

    run(scenario())


def test_view_hold_trace_freeze_window_and_analysis_frequency(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await press(pilot, "space")
            assert await until(pilot, lambda: pipeline.status().paused)
            total = pipeline.ring.total
            await pilot.pause(0.3)
            assert pipeline.ring.total == total                   # the view holds still
            await press(pilot, "space")
            assert await until(pilot, lambda: pipeline.ring.total > total)
            await press(pilot, "f")
            assert await until(pilot, lambda: app.ui.frozen)
            await press(pilot, "f", "minus")
            assert await until(pilot, lambda: app.ui.window_s < 5.0)
            lag_1hz = app.session.lag_ms("load", 1.0)
            await press(pilot, "g")
            assert await until(pilot, lambda: asking(app))
            app.screen.query_one("#answer").value = "500"          # above Nyquist: refused
            await press(pilot, "enter")
            assert isinstance(app.screen, AskValue)
            app.screen.query_one("#answer").value = "20"
            await press(pilot, "enter")
            assert await until(pilot, lambda: app.ui.analysis_hz == 20.0)
            assert app.session.lag_ms("load", 20.0) != pytest.approx(lag_1hz)
            assert "lag@20Hz" in str(app.table.columns["lag_ms"].label)   # says where
            # a longer window than the history holds: the axis is what is drawn, the
            # samples over the rate, never more than the window
            await press(pilot, "plus", "plus", "plus")
            assert await until(pilot, lambda: app.ui.window_s == 20.0)   # 2 -> 5 -> 10 -> 20
            await pilot.pause(0.3)
            drawn = len(pipeline.ring.latest(int(20.0 * RATE)))
            assert app.trace._span_s <= 20.0
            assert app.trace._span_s == pytest.approx((drawn - 1) / RATE, abs=0.5)
            # a digit on a choice field of the form stays in the form (no channel change)
            await highlight_stage(pilot, app, 2)
            start = app.query_one("#field-start")
            app.screen.set_focus(start)
            await press(pilot, "2")
            assert app.channel == "load" and app.focused is start
            assert "start is a choice" in app.ui.notice
            await press(pilot, "t")                                 # live: replay-only key
            assert await until(pilot, lambda: "replaying" in app.ui.notice)
            await press(pilot, "q")

    run(scenario())


def _plain(app, renderable) -> str:
    from rich.console import Console

    console = Console(width=200, record=True, file=open(os.devnull, "w"))
    console.print(renderable)
    return console.export_text()


def test_a_vanishing_source_is_said_and_the_session_goes_on(start_pipeline, pty_board):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            assert await until(pilot, lambda: app.query_one("#channels").row_count == 3)
            pty_board.close()                                      # the board is unplugged
            assert await until(pilot, lambda: "went away" in app.ui.notice)
            assert "reconnecting" in str(app.query_one("#status").render())
            await press(pilot, "2")                                 # the UI still answers
            assert await until(pilot, lambda: app.channel == "current")
            await press(pilot, "q")
            assert await until(pilot, lambda: app.return_value == 0)

    run(scenario())


def test_components_give_derived_values_and_a_poor_method_warns(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await highlight_stage(pilot, app, 2)                  # rc-lowpass of load
            derived = app.query_one("#form-derived")
            app.query_one("#field-cutoff_hz").value = ""
            await type_into(pilot, app, "#field-r_ohm", "10000")
            await type_into(pilot, app, "#field-c_farad", "1e-6")
            # Handbook RC low-pass: fc = 1 / (2 pi R C) = 15.915 Hz for 10 kohm and 1 uF.
            assert await until(pilot, lambda: "cutoff_hz = 15.915" in str(derived.render()))
            assert "time_constant_s = 0.01" in str(derived.render())
            await press(pilot, "enter")
            assert await until(pilot, lambda: pipeline.chain.spec.stages[2].params
                               == {"r_ohm": 10000.0, "c_farad": 1e-6})
            running = dict(pipeline.chain.designs_for("load"))[2]
            assert abs(running.derived["cutoff_hz"] - 1 / (2 * np.pi * 1e4 * 1e-6)) < 1e-9
            # a discretization far from the prototype at this rate is flagged, not refused
            await leave_field(pilot, app)
            await highlight_stage(pilot, app, 2)
            app.query_one("#field-r_ohm").value = ""
            app.query_one("#field-c_farad").value = ""
            await type_into(pilot, app, "#field-cutoff_hz", "100")
            app.query_one("#field-method").value = "matched"
            warnings = app.query_one("#form-warnings")
            assert await until(pilot, lambda: "too long for matched" in str(warnings.render()))
            assert await until(pilot, lambda: pipeline.chain.spec.stages[2].params.get("method")
                               == "matched")
            await leave_field(pilot, app)
            await press(pilot, "q")

    run(scenario())


def test_shared_scope_edits_every_channel_of_a_shared_stage(start_pipeline):
    pipeline = start_pipeline(parse_chain(CHAIN))

    def notch_bypassed(channel: str) -> bool:
        return [s.bypass for _, s in pipeline.chain.spec.stages_for(channel)
                if s.kind == "notch"] == [True]

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await highlight_stage(pilot, app, 1)                  # notch of load and current
            assert "shared with current" in str(app.query_one("#form-head").render())
            await press(pilot, "e")
            assert app.ui.scope == "shared" and "every channel" in app.ui.notice
            await press(pilot, "b")
            assert await until(pilot, lambda: notch_bypassed("load") and notch_bypassed("current"))
            assert len(pipeline.chain.spec.stages) == 3           # edited in place, not split
            await press(pilot, "e", "b")                           # back to this channel only
            assert await until(pilot, lambda: not notch_bypassed("load"))
            assert notch_bypassed("current")
            await press(pilot, "q")

    run(scenario())


def test_noise_figures_after_lowering_a_cutoff_while_parcels_land(start_pipeline):
    # The demo case that once drove "NR dB" negative: the load's low-pass lowered while
    # parcels land. The measured figure must stay a reduction (the filter's slow step
    # response is not noise), and only samples of the new chain count.
    pipeline = start_pipeline(parse_chain(CHAIN))
    # white dB of notch + RC 2 Hz, by Parseval with h from scipy.signal (iirnotch as
    # the notch stage is checked against in tests/filters; butter(1) = RC under
    # tustin-prewarp, as above); the median stage is counted as its linear part, 1.
    sos = np.vstack([signal.tf2sos(*signal.iirnotch(50.0, 30.0, fs=RATE)),
                     signal.butter(1, 2.0, fs=RATE, output="sos")])
    impulse = np.zeros(int(30 * RATE))
    impulse[0] = 1.0
    white = -10 * np.log10(np.sum(signal.sosfilt(sos, impulse) ** 2))

    async def scenario():
        app = make_app(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            table = app.query_one("#channels")

            def cell(column: str) -> str:
                return str(table.get_cell("load", column))

            await highlight_stage(pilot, app, 2)                  # rc-lowpass of load
            before = pipeline.status().samples_total
            await type_into(pilot, app, "#field-cutoff_hz", "2")
            await press(pilot, "enter")
            assert await until(pilot, lambda: pipeline.status().chain_since >= before)
            assert await until(pilot, lambda: cell("white_db") == f"{white:.1f}")
            readings = []
            for _ in range(12):                                    # 6 s of 2 Hz refreshes
                await pilot.pause(0.5)
                if cell("reduction_db") != "-":
                    readings.append(float(cell("reduction_db")))
            assert len(readings) >= 6 and min(readings) > 3.0, readings
            await leave_field(pilot, app)
            await press(pilot, "q")
            assert await until(pilot, lambda: app.return_value is not None)
        return app.return_value

    assert run(scenario()) == 0
