"""The braille raster of the terminal trace."""

from __future__ import annotations

import numpy as np

from monitor.tui.braille import cell_codes, cell_text, dot_grid, render_cells, value_range


def test_dot_bits_follow_the_unicode_braille_pattern():
    # Unicode Standard, Braille Patterns block U+2800..U+28FF: dot n is bit n-1;
    # dots 1-2-3 run down the left column, 4-5-6 down the right, 7 and 8 below.
    grid = np.zeros((4, 2), dtype=bool)
    grid[0, 0] = True                                   # dot 1
    assert cell_text(cell_codes(grid)) == ["\u2801"]
    grid[:] = False
    grid[3, 1] = True                                   # dot 8
    assert cell_text(cell_codes(grid)) == ["\u2880"]
    grid[:] = True
    assert cell_text(cell_codes(grid)) == ["\u28ff"]


def test_constant_at_the_top_lights_only_the_top_dot_row():
    grid = dot_grid(np.full(100, 2.0), width=5, height=2, low=0.0, high=2.0)
    assert grid.shape == (8, 10)
    assert grid[0].all() and not grid[1:].any()


def test_a_ramp_climbs_from_bottom_left_to_top_right():
    grid = dot_grid(np.linspace(0, 1, 400), width=10, height=3, low=0.0, high=1.0)
    rows_lit = [np.nonzero(grid[:, c])[0] for c in range(grid.shape[1])]
    assert rows_lit[0].max() == grid.shape[0] - 1        # starts at the bottom
    assert rows_lit[-1].min() == 0                       # ends at the top
    tops = [r.min() for r in rows_lit]
    assert all(a >= b for a, b in zip(tops, tops[1:], strict=False))


def test_a_step_is_joined_into_a_vertical_line():
    values = np.r_[np.zeros(50), np.ones(50)]
    grid = dot_grid(values, width=5, height=2, low=0.0, high=1.0)
    step_column = grid[:, grid.shape[1] // 2]
    assert step_column.all()                             # no gap in the edge


def test_nan_samples_leave_their_columns_dark():
    values = np.r_[np.zeros(50), np.full(50, np.nan)]
    grid = dot_grid(values, width=5, height=2, low=-1.0, high=1.0)
    assert grid[:, :5].any() and not grid[:, 5:].any()


def test_later_series_own_the_cells_they_touch():
    a = np.zeros(100)
    b = np.ones(100)
    codes, owner = render_cells([a, b], width=4, height=4, low=-0.1, high=1.1)
    assert (owner[0] == 1).all() and (owner[-1] == 0).all()
    assert (codes[1:-1] == 0).all()


def test_value_range_pads_and_survives_flat_and_empty_input():
    low, high = value_range([np.array([0.0, 10.0])])
    assert low < 0 < 10 < high
    low, high = value_range([np.array([5.0, 5.0])])
    assert low < 5 < high
    assert value_range([np.array([])]) == (-1.0, 1.0)


def test_trace_rows_fill_the_width_and_style_each_series():
    from monitor.tui.trace import FILTERED_STYLE, RAW_STYLE, trace_rows

    t = np.linspace(0, 1, 2000)
    filtered = np.sin(2 * np.pi * 2 * t)
    raw = filtered + np.where(np.arange(2000) % 97 == 0, 3.0, 0.0)      # spikes above
    rows = trace_rows(raw, filtered, 1.0, width=80, height=20)
    assert len(rows) == 20
    assert {sum(len(s.text) for s in row) for row in rows[:-1]} == {80}
    styles = {s.style for row in rows[:-1] for s in row if s.text.strip()}
    assert RAW_STYLE in styles and FILTERED_STYLE in styles
    legend = "".join(s.text for s in rows[-1])
    assert legend.rstrip().endswith("now") and "raw" in legend and "filtered" in legend
