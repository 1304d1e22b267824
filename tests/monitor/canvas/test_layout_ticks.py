"""Axis ticks and panel layout."""

from __future__ import annotations

import numpy as np
import pytest

from monitor.canvas.layout import compute_layout
from monitor.canvas.ticks import format_hz, format_linear, linear_ticks, log_ticks, nice_step


def test_nice_steps_are_one_two_five_times_a_power_of_ten():
    # axis steps of 1, 2 or 5 times a power of ten (common practice for plot axes)
    assert nice_step(10.0, 5) == 2.0
    assert nice_step(0.7, 6) == 0.2
    assert nice_step(600.0, 8) == 100.0
    values, step = linear_ticks(-8.3, 0.0, 5)
    assert step == 2.0 and values.tolist() == [-8.0, -6.0, -4.0, -2.0, 0.0]
    assert format_linear(np.array([-0.5, 0.0, 0.5]), 0.5) == ["-0.5", "0", "0.5"]


def test_log_ticks_give_decades_and_their_multiples():
    decades, minor = log_ticks(0.244, 143.0)
    assert decades.tolist() == [1.0, 10.0, 100.0]
    assert 0.3 in np.round(minor, 6) and 200.0 not in minor
    assert [format_hz(v) for v in (0.5, 10.0, 2000.0)] == ["0.5", "10", "2k"]


def test_layout_stacks_lanes_above_spectrum_and_response_without_overlap():
    layout = compute_layout((1280, 800), 8)
    lanes = layout.lanes
    assert len(lanes) == 8 and all(r.h >= 20 for r in lanes)
    assert all(a.y + a.h <= b.y for a, b in zip(lanes, lanes[1:], strict=False))
    assert lanes[-1].y + lanes[-1].h < layout.spectrum.y
    assert layout.spectrum.x + layout.spectrum.w < layout.magnitude.x
    assert layout.magnitude.y + layout.magnitude.h < layout.phase.y
    assert layout.phase.y + layout.phase.h <= 800


def test_layout_refuses_a_tiny_canvas():
    with pytest.raises(ValueError, match="size = 100x100"):
        compute_layout((100, 100), 1)


def test_autoscale_keeps_its_range_while_the_data_fits_and_fills_it():
    from monitor.canvas.time_panel import autoscale

    first = autoscale(0.0, 10.0)
    assert first[0] < 0.0 and first[1] > 10.0
    assert autoscale(0.5, 9.5, first) == first           # noise inside: axes stay still
    grown = autoscale(0.0, 12.0, first)
    assert grown[1] > 12.0                                # data outside: grows at once
    shrunk = autoscale(4.0, 5.0, grown)
    assert shrunk[1] - shrunk[0] < 2.0                    # data much smaller: shrinks
    assert autoscale(3.0, 3.0) == (3.0 - 0.5, 3.0 + 0.5)  # flat: a range still shows it
    assert autoscale(float("nan"), float("nan")) == (-1.0, 1.0)
