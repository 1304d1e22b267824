"""Mouse zoom and pan of the time lanes, the cursor readout, overlay, rate change (headless)."""

from __future__ import annotations

import numpy as np
import pytest

from monitor.canvas.history import History
from monitor.canvas.plotcanvas import PlotCanvas, ViewState

RATE = 250.0


@pytest.fixture()
def plot(headless):
    n = 5000
    t = 100.0 + np.arange(n) / RATE
    raw = np.column_stack([12.0 + np.sin(t), 0.4 + 0.1 * np.cos(t)])
    history = History(2, n)
    history.append(0, t, raw, raw * 0.5)
    canvas = PlotCanvas(["load", "current"], ["kg", "A"], RATE, size=(960, 640), app=headless)
    state = ViewState(window_s=10.0)
    canvas.show_traces(history, state)
    canvas.decorate(0)
    canvas.render()
    yield canvas, history, state
    canvas.close()


def test_wheel_zooms_both_lanes_in_time_and_stops_following(plot):
    canvas, history, state = plot
    lane = canvas.layout.lanes[0]
    before = canvas.time.lanes[1].range
    canvas.canvas.events.mouse_wheel(pos=(lane.x + lane.w // 2, lane.y + lane.h // 2),
                                     delta=(0, 2), modifiers=())
    after0, after1 = canvas.time.lanes[0].range, canvas.time.lanes[1].range
    assert after0[1] - after0[0] < 0.9 * (before[1] - before[0])      # zoomed in
    assert after0[:2] == pytest.approx(after1[:2])                     # x linked across lanes
    assert after1[2:] == pytest.approx(before[2:])                     # the wheel keeps y
    assert canvas.time.moved_by_user()
    state.following = False
    canvas.show_traces(history, state)
    i0, i1 = canvas.window
    assert (i1 - i0) < 0.9 * 10.0 * RATE                                # fewer samples shown
    assert canvas.render().shape == (640, 960, 4)


def test_cursor_readout_gives_time_and_both_values_of_the_lane(plot):
    canvas, history, state = plot
    lane = canvas.layout.lanes[1]
    px, py = lane.x + lane.w * 0.75, lane.y + lane.h / 2
    text = canvas.cursor_text(history, px, py)
    x, _ = canvas.time.lanes[1].to_data(px, py)
    index = history.index_at(x)
    t, values = history.slice(index, index + 1)
    age = t[0] - history.origin - canvas.time.newest_x     # seconds before the newest sample
    assert -10.0 < age < 0 and abs(age - (x - canvas.time.newest_x)) < 1 / RATE
    assert text.startswith(f"t {age:+.3f} s")
    assert f"current raw {values[0, 1]:.5g} A filtered {values[0, 3]:.5g} A" in text
    assert "load" not in text
    assert canvas.cursor_text(history, 5, 5) == ""         # outside the lanes: nothing


def test_overlay_puts_every_channel_in_one_lane_and_back(plot):
    canvas, history, state = plot
    canvas.rebuild(canvas.channels, overlay=True)
    assert len(canvas.layout.lanes) == 1 and canvas.time.channels_in(0) == [0, 1]
    canvas.show_traces(history, state)
    canvas.decorate(0)
    canvas.render()
    canvas.rebuild(canvas.channels, overlay=False)
    assert len(canvas.layout.lanes) == 2


def test_a_new_rate_moves_the_frequency_axes(plot):
    canvas, history, state = plot
    canvas.set_rate(1000.0)
    x0, x1, _, _ = canvas.spectrum.area.range
    assert 10 ** x1 == pytest.approx(500.0 * 1.15)
    assert canvas.response.x_range == pytest.approx((x0, x1))
