"""Every key in the order it was typed: the app's own key delivery.

Why by hand: textual hands each key to the focused widget's message queue,
and a key the widget does not handle itself (Backspace, End, Enter in an
Input; a letter bound to an app action) travels back up through every
parent's queue before its binding runs. Keys typed after it in the same
burst (a paste, a fast typist, tmux send-keys) are already in the widget's
queue and are handled first: "End, Backspace, 0.3" became "0." and digits
meant for a field landed on the channel table. No textual option changes
that, so this mixin handles keys in the app's own queue, one after another:

- text fields (textual Inputs, anywhere): printable characters, pastes and the
  Input's own bindings are applied at once, through the Input's public API;
- Tab and Shift+Tab move the focus at once; `navigate(key)` (the app's key
  path: Enter and Esc) runs at once;
- keys bound to app actions run at once when the focus is not a text field;
- while a screen or a panel is being built (a dialog opening or closing, the
  parameter form rebuilt for a new stage), keys are held and delivered, in
  order, as soon as it has the focus (or after HOLD_TIMEOUT_S at the latest).

Everything else takes textual's usual path.
"""

from __future__ import annotations

import functools
import time
from collections import deque
from collections.abc import Callable
from typing import Any

from textual import events
from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import Input, Select

HOLD_TIMEOUT_S = 3.0        # a slow machine building a big form still gets its keys
HOLD_POLL_S = 0.02


def binding_map(bindings: Any) -> dict[str, str]:
    """key -> action of a BINDINGS list (compound keys such as 'home,ctrl+a' expanded)."""
    return {b.key: b.action for b in Binding.make_bindings(bindings)}


@functools.lru_cache(maxsize=256)
def _class_bindings(cls: type, priority_only: bool = False) -> dict[str, str]:
    """Every key bound in the BINDINGS of `cls` and its bases (nearest class wins)."""
    found: dict[str, str] = {}
    for klass in reversed(cls.__mro__):
        for b in Binding.make_bindings(klass.__dict__.get("BINDINGS", [])):
            if b.priority or not priority_only:
                found[b.key] = b.action
    return found


async def type_into(app: Any, field: Input, event: events.Key) -> bool:
    """Apply `event` to `field` now, as the Input itself would; False if it is not the field's."""
    if event.is_printable and event.character is not None:
        selection = field.selection
        if selection.is_empty:
            field.insert_text_at_cursor(event.character)
        else:
            field.replace(event.character, *selection)
        return True
    action = _class_bindings(type(field)).get(event.key)
    if action is None:
        return False
    await app.run_action(action, field)
    return True


def paste_into(field: Input, text: str) -> None:
    """Insert the first line of a paste at the cursor (over the selection), as Input does."""
    lines = text.splitlines()
    if not lines:
        return
    selection = field.selection
    if selection.is_empty:
        field.insert_text_at_cursor(lines[0])
    else:
        field.replace(lines[0], *selection)


class KeyOrder:
    """Mixed into the App (before textual's App in the bases).

    The app provides `app_keys` (key -> action of its own bindings) and may
    override `navigate(key) -> bool` (True: the key was a move of the key path
    and is done).
    """

    app_keys: dict[str, str] = {}

    def _key_order_state(self) -> tuple[deque, list]:
        if not hasattr(self, "_held_keys"):
            self._held_keys: deque = deque()
            self._hold: list = []          # [until, deadline] while holding
            self._hold_timer: Any = None
        return self._held_keys, self._hold

    async def navigate(self, key: str) -> bool:
        """The app's key path (Enter, Esc); False lets the key go its usual way."""
        return False

    def hold_keys(self, until: Callable[[], bool], timeout_s: float = HOLD_TIMEOUT_S) -> None:
        """Hold every key from now until `until()` holds (or `timeout_s` passed), then deliver."""
        _, hold = self._key_order_state()
        hold[:] = [until, time.monotonic() + timeout_s]
        if self._hold_timer is None:
            self._hold_timer = self.set_interval(HOLD_POLL_S, self._release_held)

    @property
    def holding_keys(self) -> bool:
        return bool(self._key_order_state()[1])

    async def _release_held(self) -> None:
        held, hold = self._key_order_state()
        while hold and (hold[0]() or time.monotonic() > hold[1]):
            hold.clear()
            while held and not hold:       # a delivered key may start a new hold
                await self._deliver(held.popleft())
        if not hold and self._hold_timer is not None:
            self._hold_timer.stop()
            self._hold_timer = None

    def push_screen(self, screen: Any, *args: Any, **kwargs: Any) -> Any:
        """Push `screen` and hold the keys typed meanwhile until it has the focus."""
        result = super().push_screen(screen, *args, **kwargs)
        self.hold_keys(lambda: self.screen is screen and screen.is_mounted
                       and (self.focused is not None or not screen.focus_chain))
        return result

    async def on_event(self, event: events.Event) -> None:
        if isinstance(event, events.Key | events.Paste) and not event.is_forwarded:
            held, hold = self._key_order_state()
            if hold or held:
                held.append(event)
                await self._release_held()
                return
            if await self._deliver(event, fallback=False):
                return
        await super().on_event(event)

    async def _deliver(self, event: events.Event, fallback: bool = True) -> bool:
        """Handle one key or paste now; with `fallback`, unhandled ones go textual's way."""
        handled = await self._deliver_now(event)
        if not handled and fallback:
            await super().on_event(event)
            return True
        return handled

    async def _deliver_now(self, event: events.Event) -> bool:
        focused = self.focused
        if isinstance(event, events.Paste):
            if isinstance(focused, Input):
                paste_into(focused, event.text)
                return True
            return False
        assert isinstance(event, events.Key)
        key = event.key
        if key in _class_bindings(type(self), priority_only=True) or key == getattr(
                self, "COMMAND_PALETTE_BINDING", None):
            return False                           # quit, palette: textual's own path
        screen = self.screen
        modal = isinstance(screen, ModalScreen)
        first = _class_bindings(type(screen), priority_only=True).get(key)
        if first is not None:                      # the dialog's own enter (ticked channels)
            await self.run_action(first, screen)
            if modal:
                self.hold_keys(lambda: self.screen is not screen, timeout_s=0.3)
            return True
        if key in ("tab", "shift+tab"):
            (self.screen.focus_next if key == "tab" else self.screen.focus_previous)()
            return True
        if not modal and await self.navigate(key):
            return True
        handled = await self._run_binding(focused, event, modal)
        if handled and modal and key in ("enter", "escape"):
            # a dialog's answer or cancel: it closes (or says why it stays) on a later turn
            self.hold_keys(lambda: self.screen is not screen, timeout_s=0.3)
        return handled

    async def _run_binding(self, focused: Any, event: events.Key, modal: bool) -> bool:
        """Run the binding `event.key` has for the focus, its dialog or the app, now."""
        key = event.key
        if isinstance(focused, Input):
            return await type_into(self, focused, event)
        own = _class_bindings(type(focused)) if focused is not None else {}
        if key in own:                             # a list's arrows, a choice's enter
            await self.run_action(own[key], focused)
            if isinstance(focused, Select) or any(isinstance(a, Select)
                                                  for a in focused.ancestors):
                # a choice list opening or closing moves the focus on a later turn
                self.hold_keys(lambda: self.focused is not focused, timeout_s=0.3)
            return True
        if modal:
            action = _class_bindings(type(self.screen)).get(key)
            if action is None:
                return False
            await self.run_action(action, self.screen)
            return True
        if key in self.app_keys:
            await self.run_action(self.app_keys[key])
            return True
        return False
