"""The UI on a recording: pause, seek and speed reach the replay source through the pipeline."""

from __future__ import annotations

import asyncio

import numpy as np
from tui_helpers import answer, asking, make_app, until

from monitor.block import Block, Schema
from monitor.pipeline import Pipeline
from monitor.sim.weighstation import WeighStation, channel_names
from replay.player import ReplaySource
from replay.writer import RecordingWriter

RATE = 250.0


def write_recording(path, seconds: float = 10.0) -> None:
    names = channel_names(3)
    schema = Schema(tuple(n for n, _ in names), tuple(u for _, u in names))
    n = int(seconds * RATE)
    values = WeighStation(RATE, 3, seed=5).generate(n)
    writer = RecordingWriter(path, schema, "sim://?rate=250&seed=5", RATE, "declared", None)
    writer.write_block(Block(t_host=np.arange(n) / RATE, values=values))
    writer.close()


def test_pause_seek_and_speed_of_a_replay(tmp_path):
    path = tmp_path / "weigh-replay.csv"
    write_recording(path)
    source = ReplaySource(path, speed=1.0, loop=True)
    pipeline = Pipeline(source)
    pipeline.start()

    async def scenario():
        app = make_app(pipeline, verb="replay")
        async with app.run_test(size=(160, 48)) as pilot:
            assert await until(pilot, lambda: "1x" in app.ui.playback)
            await pilot.press("space")
            assert await until(pilot, lambda: source.paused and pipeline.status().paused)
            at = source.position_s
            await pilot.pause(0.3)
            assert source.position_s == at                       # playback holds
            await pilot.press("space")
            assert await until(pilot, lambda: not source.paused and source.position_s > at)
            await answer(pilot, app, "t", "7.5")
            assert await until(pilot, lambda: 7.5 <= source.position_s < 9.0)
            await answer(pilot, app, "v", "fast")                 # refused by the validator
            assert asking(app)
            app.screen.query_one("#answer").value = "max"
            await pilot.press("enter")
            assert await until(pilot, lambda: source.speed is None)
            assert await until(pilot, lambda: "max speed" in app.ui.playback)
            await pilot.press("q")

    try:
        asyncio.run(scenario())
    finally:
        pipeline.stop()
