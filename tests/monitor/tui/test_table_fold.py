"""The channel table at small sizes: columns fold by priority, the lag heading names its
frequency, and the selected channel stays selected through every refit.

Pilot tests on a harness app that composes only a ChannelTable, at the two terminal sizes
a user meets most (80x24, a default terminal; 160x48, a maximised one).
"""

from __future__ import annotations

import asyncio
import math

import pytest
from textual.app import App, ComposeResult
from textual.widgets import DataTable
from tui_helpers import until

from monitor.tui.channel_table import (
    COLUMNS,
    FOLD_ORDER,
    ChannelRow,
    ChannelTable,
    column_width,
    fitting_columns,
    heading,
    row_cells,
)

ALL_KEYS = tuple(k for k, _, _ in COLUMNS)
MUST_AT_80 = ("channel", "last", "reduction_db", "lag_ms")
ROWS = [       # the weigh station's three channels (figures made up for the table)
    ChannelRow(name="load", unit="kg", last=12.031, mean=11.9875, rms_raw=0.05123,
               rms_filtered=0.004567, reduction_db=21.02, white_db=18.4, lag_ms=36.25,
               rate_hz=250.0),
    ChannelRow(name="current", unit="A", last=0.412, mean=0.4098, rms_raw=0.0121,
               rms_filtered=0.0031, reduction_db=11.8, white_db=12.0, lag_ms=12.5,
               rate_hz=250.0),
    ChannelRow(name="vib", unit="g", last=0.003, mean=0.0011, rms_raw=0.0204,
               rms_filtered=0.0185, reduction_db=0.85, white_db=1.2, lag_ms=2.0,
               rate_hz=250.0),
]


class TableApp(App):
    """Only the table; it records every row highlight the table posts."""

    def __init__(self) -> None:
        super().__init__()
        self.highlighted: list[int] = []

    def compose(self) -> ComposeResult:
        yield ChannelTable(id="channels")

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        self.highlighted.append(event.cursor_row)


def header_text(table: ChannelTable) -> str:
    """The heading line as textual draws it (the table's first content line)."""
    return table.render_line(0).text


def test_fitting_columns_is_a_priority_prefix_in_table_order():
    total = sum(column_width(k) + 2 for k in ALL_KEYS)
    previous: set[str] = set()
    for width in range(0, total + 20):
        keys = fitting_columns(width)
        assert keys[0] == "channel"
        assert list(keys) == [k for k in ALL_KEYS if k in keys]            # normal order
        assert set(keys) == set(FOLD_ORDER[:len(keys)])                    # by priority
        if len(keys) > 1:
            assert sum(column_width(k) + 2 for k in keys) <= width          # they fit
        if len(keys) < len(ALL_KEYS):                                      # the next does not
            assert sum(column_width(k) + 2 for k in FOLD_ORDER[:len(keys) + 1]) > width
        assert previous <= set(keys)                                       # wider: never fewer
        previous = set(keys)
    assert fitting_columns(total) == ALL_KEYS


def test_the_lag_heading_names_its_frequency_and_refuses_non_frequencies():
    assert heading("lag_ms") == "lag@1Hz ms"
    assert heading("lag_ms", 4) == "lag@4Hz ms"
    assert heading("lag_ms", 0.25) == "lag@0.25Hz ms"
    assert column_width("lag_ms", 0.25) >= len("lag@0.25Hz ms")            # never cut
    table = ChannelTable()
    for bad in (0.0, -1.0, math.nan, math.inf):
        with pytest.raises(ValueError, match="lag_hz"):
            table.set_lag_hz(bad)
    assert table.lag_hz == 1.0                                             # kept


def check_drawn(table: ChannelTable, keys: tuple[str, ...]) -> None:
    """Every shown column sits inside the table with its full heading and right cells."""
    assert table.shown_columns == keys
    assert [str(c.key.value) for c in table.ordered_columns] == list(keys)
    assert table.virtual_size.width <= table.scrollable_content_region.width
    assert table.max_scroll_x == 0                                         # nothing off-side
    line = header_text(table)
    starts = [line.index(heading(k, table.lag_hz)) for k in keys]
    assert starts == sorted(starts)                                        # in table order
    for row in ROWS:
        cells = dict(zip(ALL_KEYS, row_cells(row), strict=True))
        for key in keys:
            assert table.get_cell(row.name, key) == cells[key], (row.name, key)


def test_columns_fold_at_80_and_come_back_at_160_with_the_cursor_kept():
    async def run() -> None:
        app = TableApp()
        async with app.run_test(size=(80, 24)) as pilot:
            table = app.query_one(ChannelTable)
            table.show(ROWS)
            assert await until(pilot, lambda: table.row_count == 3
                               and table.virtual_size.width > 0)
            table.move_cursor(row=2)                                       # "vib" selected
            assert await until(pilot, lambda: app.highlighted[-1:] == [2])
            shown = table.shown_columns
            assert set(MUST_AT_80) <= set(shown) and shown != ALL_KEYS
            check_drawn(table, shown)
            hidden = len(ALL_KEYS) - len(shown)
            assert f"{hidden} columns hidden" in str(table.border_subtitle)
            assert "wider terminal" in str(table.border_subtitle)

            await pilot.resize_terminal(160, 48)
            assert await until(pilot, lambda: table.shown_columns == ALL_KEYS)
            check_drawn(table, ALL_KEYS)
            assert str(table.border_subtitle) == ""
            assert table.cursor_row == 2

            table.show(ROWS)                                               # the update path
            await pilot.resize_terminal(80, 24)
            assert await until(pilot, lambda: table.shown_columns == shown)
            check_drawn(table, shown)
            assert table.cursor_row == 2
            assert set(app.highlighted) == {0, 2}      # mount, then our move; no refit moved it

    asyncio.run(run())


def test_set_lag_hz_changes_the_drawn_heading_at_once():
    async def run() -> None:
        app = TableApp()
        async with app.run_test(size=(80, 24)) as pilot:
            table = app.query_one(ChannelTable)
            table.show(ROWS)
            assert await until(pilot, lambda: "lag@1Hz ms" in header_text(table))
            table.move_cursor(row=1)
            table.set_lag_hz(4)
            assert await until(pilot, lambda: "lag@4Hz ms" in header_text(table))
            assert "lag@1Hz" not in header_text(table)
            check_drawn(table, table.shown_columns)
            assert set(MUST_AT_80) <= set(table.shown_columns)
            assert table.cursor_row == 1
            table.set_lag_hz(0.125)                    # a wider heading still fits whole
            assert await until(pilot, lambda: "lag@0.125Hz ms" in header_text(table))
            check_drawn(table, table.shown_columns)

    asyncio.run(run())
