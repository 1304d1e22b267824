"""Helpers shared by the terminal-UI tests (pytest puts this folder on sys.path)."""

from __future__ import annotations

import argparse
import asyncio
import time
import unicodedata

from textual import events

from monitor.tui.app import TunetraceApp
from monitor.tui.dialogs import AskValue


def make_app(pipeline, verb: str = "live", **options) -> TunetraceApp:
    """The app as `tunetrace <verb>` would build it, with these CLI options."""
    return TunetraceApp(pipeline, argparse.Namespace(verb=verb, **options))


def key_event(name: str) -> events.Key:
    """The Key event a terminal delivers for `name` ('enter', 'tab', 'a', '.', 'U', 'ctrl+u')."""
    if len(name) == 1 and not name.isalnum():
        name = unicodedata.name(name).lower().replace(" ", "_")       # '.' -> 'full_stop'
    try:
        character = unicodedata.lookup(name.upper().replace("_", " "))
    except KeyError:
        character = name if len(name) == 1 else None
    return events.Key(name, character)


async def press(pilot, *keys: str) -> None:
    """Type `keys` in one burst, as a paste or tmux send-keys does, and return once the app
    has taken them all (a callback queued behind them has run).

    pilot.press waits until the process's CPU time stops advancing, which a live
    pipeline's reader thread never lets happen; this waits on the app's own queue.
    """
    app = pilot.app
    taken = asyncio.Event()
    for name in keys:
        app.post_message(key_event(name))
    app.call_later(taken.set)
    await asyncio.wait_for(taken.wait(), timeout=10)
    await pilot.pause(0)


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
    await press(pilot, key)
    assert await until(pilot, lambda: asking(app))
    app.screen.query_one("#answer").value = text
    await press(pilot, "enter")
