"""The chain as the UI edits it, and the one way it reaches the running pipeline.

Every edit builds a new ChainSet here, in the UI thread. Its constructor
designs and validates every stage, so a refused edit raises ValueError before
anything is sent; an accepted one is submitted as ReplaceChain and the
pipeline swaps it in between two blocks (bumpless, via continue_from).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from filters.spec import ChainSpec

UNDO_DEPTH = 100


@dataclass(frozen=True)
class Edit:
    """One chain edit the user can take back: the spec before it, and what it did in words."""

    before: ChainSpec
    what: str


class ChainSession:
    """Holds the edited ChainSpec of a running pipeline.

    pipeline: a monitor.pipeline.Pipeline (only `chain`, `schema`, `rate()` and
    `submit()` are used).
    """

    def __init__(self, pipeline: Any) -> None:
        self.pipeline = pipeline
        self.chain: Any = None          # the newest ChainSet: ours, or the pipeline's
        self._pending: Any = None       # submitted, not yet seen running
        self._lag_cache: dict[tuple[int, str, float], float] = {}
        self._undo: list[Edit] = []
        self._redo: list[Edit] = []

    @property
    def spec(self) -> ChainSpec:
        return self.chain.spec if self.chain is not None else ChainSpec()

    @property
    def channels(self) -> tuple[str, ...]:
        schema = self.pipeline.schema
        return tuple(schema.channels) if schema is not None else ()

    @property
    def ready(self) -> bool:
        """True once the stream's channels are known and a chain runs."""
        return self.chain is not None and bool(self.channels)

    def sync(self) -> bool:
        """Adopt the pipeline's chain unless our own submitted one is still on its way.

        Returns True when the chain the UI shows changed (e.g. first start, or the
        pipeline rebuilt it for a measured rate).
        """
        running = self.pipeline.chain
        if running is None:
            return False
        if self._pending is not None:
            if running is not self._pending:
                return False
            self._pending = None
        if running is self.chain:
            return False
        self.chain = running
        return True

    def rate_hz(self) -> float:
        """The rate new chains are designed for: the stream's (declared, device or estimated).

        Not a loaded file's `rate_hz`: a chain designed for another rate would
        put every corner in the wrong place on this stream.
        """
        known = self.pipeline.rate()
        if known:
            return float(known[0])
        raise ValueError("the sample rate is not known yet; wait for data or give --rate")

    def apply(self, spec: ChainSpec, what: str = "") -> Any:
        """Build and submit a chain for `spec`; ValueError (one sentence) if refused.

        what: the edit in words ("removed notch from load"); given, the edit can be undone.
        """
        before = self.spec
        chain = self._run(spec)
        if what and spec != before:
            self._undo = [*self._undo[-(UNDO_DEPTH - 1):], Edit(before, what)]
            self._redo = []
        return chain

    def _run(self, spec: ChainSpec) -> Any:
        from filters.chainset import ChainSet
        from monitor.pipeline import ReplaceChain

        if not self.channels:
            raise ValueError("no channels yet; wait for the first frames before editing")
        chain = ChainSet(spec, self.channels, self.rate_hz())
        self.pipeline.submit(ReplaceChain(chain))
        self.chain = chain
        self._pending = chain
        return chain

    def undo(self) -> str:
        """Run the chain as it was before the latest edit; what that edit did, in words.

        LookupError when there is nothing to undo; ValueError (nothing changes) when the
        earlier chain no longer designs at the stream's rate.
        """
        return self._step(self._undo, self._redo, "undo")

    def redo(self) -> str:
        """Run again the edit the latest undo took back; what it does, in words."""
        return self._step(self._redo, self._undo, "redo")

    def _step(self, source: list[Edit], target: list[Edit], word: str) -> str:
        if not source:
            raise LookupError(f"nothing to {word}")
        edit = source[-1]
        now = self.spec
        self._run(edit.before)
        source.pop()
        target.append(Edit(now, edit.what))
        return edit.what

    def position(self, index: int, channel: str) -> int:
        """Place (1 = runs first) of file stage `index` on `channel`; 0 if not on it."""
        for n, (i, _) in enumerate(self.spec.stages_for(channel), start=1):
            if i == index:
                return n
        return 0

    def designs_for(self, channel: str) -> list[tuple[int, Any]]:
        """(file index, StageDesign) of every stage on `channel`, bypassed ones included."""
        if self.chain is None or channel not in self.channels:
            return []
        return list(self.chain.designs_for(channel))

    def active_designs(self, channel: str) -> list[Any]:
        """The designs `channel` actually runs (bypassed stages left out)."""
        stages = self.spec.stages
        return [d for i, d in self.designs_for(channel) if not stages[i].bypass]

    def lag_ms(self, channel: str, freq_hz: float) -> float:
        """Group delay of `channel`'s chain at `freq_hz` in ms (0 for no stages, NaN if unknown)."""
        if self.chain is None:
            return math.nan
        key = (id(self.chain), channel, float(freq_hz))
        if key not in self._lag_cache:
            if len(self._lag_cache) > 256:
                self._lag_cache.clear()
            self._lag_cache[key] = chain_lag_ms(self.active_designs(channel), freq_hz)
        return self._lag_cache[key]


def chain_lag_ms(designs: list[Any], freq_hz: float) -> float:
    """Group delay of stages in series at `freq_hz`, in ms; NaN where it cannot be computed."""
    if not designs:
        return 0.0
    from filters.analysis import group_delay_s

    try:
        return 1000.0 * float(group_delay_s(designs, freq_hz))
    except ValueError:
        return math.nan
