"""The chain as the UI edits it, and the one way it reaches the running pipeline.

Every edit builds a new ChainSet here, in the UI thread. Its constructor
designs and validates every stage, so a refused edit raises ValueError before
anything is sent; an accepted one is submitted as ReplaceChain and the
pipeline swaps it in between two blocks (bumpless, via continue_from).
"""

from __future__ import annotations

import math
from typing import Any

from filters.spec import ChainSpec


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

    def apply(self, spec: ChainSpec) -> Any:
        """Build and submit a chain for `spec`; ValueError (one sentence) if refused."""
        from filters.chainset import ChainSet
        from monitor.pipeline import ReplaceChain

        if not self.channels:
            raise ValueError("no channels yet; wait for the first frames before editing")
        chain = ChainSet(spec, self.channels, self.rate_hz())
        self.pipeline.submit(ReplaceChain(chain))
        self.chain = chain
        self._pending = chain
        return chain

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
