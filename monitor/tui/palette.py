"""Command palette provider: every action of the key table, found by name."""

from __future__ import annotations

from functools import partial

from textual.command import DiscoveryHit, Hit, Hits, Provider

from monitor.tui.keys import ACTIONS, KeyAction


class SessionCommands(Provider):
    """Offers each KeyAction as '<title> (<key>)' and runs its action when chosen."""

    def _run(self, action: KeyAction) -> None:
        self.app.call_later(partial(self.app.run_action, action.action))

    def _label(self, action: KeyAction) -> str:
        return f"{action.title} ({action.shown_key})"

    async def discover(self) -> Hits:
        for action in ACTIONS:
            yield DiscoveryHit(self._label(action), partial(self._run, action), help=action.help)

    async def search(self, query: str) -> Hits:
        matcher = self.matcher(query)
        for action in ACTIONS:
            label = self._label(action)
            score = max(matcher.match(label), matcher.match(action.help) * 0.5)
            if score > 0:
                yield Hit(score, matcher.highlight(label), partial(self._run, action),
                          text=label, help=action.help)
