"""Child of test_plot_window: the UI on the simulated board with $DISPLAY set; JSON on stdout.

A separate process because vispy keeps one backend per process and the
canvas tests of the suite's process draw through EGL.
"""

from __future__ import annotations

import asyncio
import json

from tui_helpers import make_app, press, until

from monitor.pipeline import Pipeline, text_source
from monitor.sources import open_byte_source


def main() -> None:
    pipeline = Pipeline(text_source(open_byte_source("sim://?rate=250&seed=3")), rate_hz=250.0)
    pipeline.start()
    report: dict[str, object] = {}

    async def scenario() -> None:
        app = make_app(pipeline)
        async with app.run_test(size=(160, 48)) as pilot:
            report["opened"] = await until(
                pilot, lambda: app.plot is not None and app.plot.is_open, 20)
            report["notice"] = app.ui.notice
            report["status"] = str(app.query_one("#status").render())
            report["pumped"] = await until(
                pilot, lambda: app.plot is not None and app.plot.frames >= 3, 20)
            report["frames"] = app.plot.frames if app.plot is not None else 0
            await press(pilot, "q")
        report["closed_on_quit"] = app.plot is not None and not app.plot.is_open
        report["exit"] = app.return_value

    try:
        asyncio.run(scenario())
    finally:
        pipeline.stop()
    print(json.dumps(report), flush=True)


if __name__ == "__main__":
    main()
