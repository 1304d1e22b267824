"""Helpers shared by the terminal-UI tests (pytest puts this folder on sys.path)."""

from __future__ import annotations

import argparse
import time

from monitor.tui.app import TunetraceApp
from monitor.tui.dialogs import AskValue


def make_app(pipeline, verb: str = "live", **options) -> TunetraceApp:
    """The app as `tunetrace <verb>` would build it, with these CLI options."""
    return TunetraceApp(pipeline, argparse.Namespace(verb=verb, **options))


async def until(pilot, predicate, timeout: float = 8.0) -> bool:
    """Let the app run until `predicate()` holds (or `timeout` s pass); its last value."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        await pilot.pause(0.05)
    return bool(predicate())


def asking(app) -> bool:
    """An AskValue dialog is up, composed and its answer field has the focus (enter reaches it)."""
    return (isinstance(app.screen, AskValue) and bool(app.screen.query("#answer"))
            and app.screen.focused is app.screen.query_one("#answer"))


async def answer(pilot, app, key: str, text: str) -> None:
    """Press `key`, put `text` in the dialog it opens, and press enter."""
    await pilot.press(key)
    assert await until(pilot, lambda: asking(app))
    app.screen.query_one("#answer").value = text
    await pilot.press("enter")
