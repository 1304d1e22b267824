"""The channel table puts every figure under its own heading.

Raw and filtered RMS (and the two dB figures) are numbers of the same size and unit, so
a swap cannot be seen by eye; each cell is read back by its column key, in the widget
textual draws, and compared with the field it must show.
"""

from __future__ import annotations

import asyncio
import math

import pytest
from textual.app import App, ComposeResult

from monitor.tui.channel_table import COLUMNS, ChannelRow, ChannelTable, heading, row_cells

ROW = ChannelRow(name="load", unit="kg", last=12.031, mean=11.9875, rms_raw=0.05123,
                 rms_filtered=0.004567, reduction_db=21.02, white_db=18.4, lag_ms=36.25,
                 rate_hz=250.0)
FIELDS = {"last": 5, "mean": 5, "rms_raw": 4, "rms_filtered": 4, "reduction_db": 1,
          "white_db": 1, "lag_ms": 1, "rate_hz": 4}     # significant digits or decimals shown


def check_cell(key: str, cell: str) -> None:
    if key == "channel":
        assert cell == ROW.name
    elif key == "unit":
        assert cell == ROW.unit
    else:
        value = getattr(ROW, key)
        shown = float(cell)
        if key in ("reduction_db", "white_db", "lag_ms"):     # one decimal
            assert shown == pytest.approx(value, abs=0.051), key
        else:
            assert shown == pytest.approx(value, rel=10.0 ** -(FIELDS[key] - 1)), key


def test_each_cell_shows_the_field_of_its_heading():
    cells = row_cells(ROW)
    assert len(cells) == len(COLUMNS)
    for (key, _, _), cell in zip(COLUMNS, cells, strict=True):
        check_cell(key, cell)
    headings = [label for _, label, _ in COLUMNS]
    assert headings.index("RMS raw") < headings.index("RMS filt")


def test_unknown_figures_show_a_dash_and_inf_stays_inf():
    row = ChannelRow(name="vib", unit="", reduction_db=math.inf)
    cells = dict(zip((k for k, _, _ in COLUMNS), row_cells(row), strict=True))
    assert cells["unit"] == "-" and cells["rms_raw"] == "-" and cells["lag_ms"] == "-"
    assert cells["reduction_db"] == "inf"      # the chain removed all the noise


def test_the_drawn_table_holds_each_figure_under_its_column():
    class TableApp(App):
        def compose(self) -> ComposeResult:
            yield ChannelTable(id="channels")

    async def run() -> None:
        app = TableApp()
        async with app.run_test(size=(160, 48)) as pilot:      # wide enough for every column
            table = app.query_one(ChannelTable)
            table.show([ROW])
            await pilot.pause()
            for key, _, _ in COLUMNS:
                assert str(table.columns[key].label) == heading(key)
                check_cell(key, str(table.get_cell(ROW.name, key)))
            table.show([ROW])                     # the update path (same channels)
            await pilot.pause()
            for key, _, _ in COLUMNS:
                check_cell(key, str(table.get_cell(ROW.name, key)))

    asyncio.run(run())
