"""Run a ChainSpec on a multi-channel stream, block by block, with state carried.

CONTRACT (used by monitor and replay): the constructor designs and validates
everything and raises ValueError with a one-sentence reason, so a refused chain
never touches a running one. `process` is called only by the one thread that
owns the chain.

Channels whose stage lists are identical form a group and run together: one
vectorized call per stage over a (n, g) array, and consecutive linear stages
fused into one matrix product per chunk of samples (see `filters.blockrun`).
Stages given to channels not in `channels` are refused, as a typo would be.

Missing samples: a non-finite input (NaN, +-inf) passes through to the output
unchanged, and the stages see the channel's last finite value in its place, so
one bad sample never poisons the filter state. Until a channel has had a finite
sample its stages stay unstarted (the start policy applies at the first one).

Retune (`continue_from`): per channel and position, a stage of the same kind as
the old chain's stage there takes over from it (an unchanged stage keeps its
exact state; a changed one is settled at the old stage's last output, see
`filters.stages`); any other stage is settled at the old chain's last output
for that channel. A channel the old chain did not have, or had not started,
starts by its start policy.

Caution for users: a filtered signal that feeds a control loop or a safety
decision adds lag and can hide faults (a median removes real short events too);
validate the chosen chain on the real system under the applicable standards.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from filters.blockrun import StageRun
from filters.limits import shown
from filters.spec import ChainSpec, StageSpec
from filters.stages import check_history, history_values, make_stage

_FLOAT64 = np.dtype(np.float64)


def _quoted(name: str) -> str:
    return shown(name, quote="'")


class ChainSet:
    """Every channel's list of stages, built from one flat ChainSpec.

    spec:     the chain file contents.
    channels: channel names in column order of the values passed to `process`.
    rate_hz:  sample rate the stages are designed for (Hz, > 0); it overrides spec.rate_hz.
    """

    def __init__(self, spec: ChainSpec, channels: Sequence[str], rate_hz: float) -> None:
        try:
            rate = float(rate_hz)
        except (TypeError, ValueError):
            rate = math.nan
        if isinstance(rate_hz, bool) or not (math.isfinite(rate) and rate > 0):
            raise ValueError(f"rate_hz = {rate_hz!r} must be a positive number of Hz")
        self.spec = spec
        self.channels = tuple(channels)
        self.rate_hz = rate
        if len(set(self.channels)) != len(self.channels):
            seen: set[str] = set()
            twice = next(c for c in self.channels if c in seen or seen.add(c))
            raise ValueError(f"channel name {_quoted(twice)} appears twice; channel names "
                             f"must be unique")
        self.designs = tuple(self._design(i, stage) for i, stage in enumerate(spec.stages))
        known = set(self.channels)
        for number, stage in enumerate(spec.stages, start=1):
            unknown = [c for c in stage.channels or () if c not in known]
            if unknown:
                listed = ", ".join(shown(c, quote="") for c in self.channels[:8])
                more = f" and {len(self.channels) - 8} more" if len(self.channels) > 8 else ""
                raise ValueError(
                    f"stage {number} ({stage.kind}): channels names {_quoted(unknown[0])}"
                    f", which is not a channel of this stream ({listed or 'none'}{more})")

        selects = [None if s.channels is None else frozenset(s.channels) for s in spec.stages]
        members: dict[tuple[int, ...], list[int]] = {}
        for column, name in enumerate(self.channels):
            key = tuple(i for i, chosen in enumerate(selects) if chosen is None or name in chosen)
            members.setdefault(key, []).append(column)
        # the memory of every window and filter state, checked before any is allocated
        kept = [history_values(design, stage.bypass)
                for design, stage in zip(self.designs, spec.stages, strict=True)]
        check_history(sum(len(columns) * sum(kept[i] for i in key)
                          for key, columns in members.items()), len(self.channels))
        self._groups: list[tuple[np.ndarray, StageRun]] = []  # (columns, their run)
        self._place: dict[str, tuple[StageRun, int, tuple[int, ...]]] = {}
        for key, columns in members.items():
            width = len(columns)
            stages = [make_stage(self.designs[i], width, start=spec.stages[i].start,
                                 bypass=spec.stages[i].bypass) for i in key]
            run = StageRun(stages, width)
            self._groups.append((np.array(columns, dtype=np.intp), run))
            for position, column in enumerate(columns):
                self._place[self.channels[column]] = (run, position, key)
        # one group over all columns in order: no gather/scatter per block
        self._whole = (self._groups[0][1] if len(self._groups) == 1
                       and len(self.channels) > 0 else None)
        self._width = len(self.channels)
        self._lane = self._whole.lane if self._whole is not None else None
        self._lanes = self._lane.lanes if self._lane is not None else None

    def _design(self, index: int, stage: StageSpec) -> Any:
        from filters.design import design_stage

        try:
            return design_stage(stage, self.rate_hz)
        except ValueError as exc:
            raise ValueError(f"stage {index + 1} ({stage.kind}): {exc}") from None

    @classmethod
    def identity(cls, channels: Sequence[str], rate_hz: float = 1.0) -> ChainSet:
        """A chain with no stages: filtered equals raw."""
        return cls(ChainSpec(), channels, rate_hz)

    def designs_for(self, channel: str) -> list[tuple[int, Any]]:
        """(file index, StageDesign) of every stage that runs on `channel`, bypassed included."""
        return [(i, self.designs[i]) for i, _ in self.spec.stages_for(channel)]

    def process(self, values: np.ndarray) -> np.ndarray:
        """Filter one block. values: (n, channels) float64 -> (n, channels) float64, a new array."""
        lanes = self._lanes
        if lanes is not None and getattr(values, "dtype", None) is _FLOAT64:
            # the common live case, one short finite block through linear stages only
            step = lanes.get(values.shape)   # only shapes (n, width) are ever keys
            if step is None and values.ndim == 2 and values.shape[1] == self._width:
                step = self._lane.step
            if step is not None:
                filtered = step(values)
                if filtered is not None:
                    return filtered
        return self._process(values)

    def _process(self, values: np.ndarray) -> np.ndarray:
        x = raw = np.asarray(values, dtype=np.float64)
        k = len(self.channels)
        if x.ndim != 2 or x.shape[1] != k:
            raise ValueError(f"values has shape {x.shape}; expected (n, {k})")
        n = x.shape[0]
        if n == 0 or k == 0:
            return np.array(x, copy=True)
        missing = None
        flat = x.reshape(-1)
        if not math.isfinite(flat.dot(flat)):  # cheapest test: NaN/inf (or |x| > 1e154)
            finite = np.isfinite(x)
            if not finite.all():
                previous = self._last_inputs()
                first = finite.argmax(axis=0)
                fresh = np.isnan(previous) & finite.any(axis=0) & (first > 0)
                if fresh.any():  # a channel's first finite sample: start it there exactly
                    edges = [0, *sorted(set(first[fresh].tolist())), n]
                    return np.vstack([self._process(raw[a:b])
                                      for a, b in zip(edges, edges[1:], strict=False)])
                missing = ~finite
                x, never = self._fill_missing(x, finite, previous)
        if self._whole is not None:
            out = self._whole.process(x)
        else:
            out = np.empty((n, k))
            for columns, run in self._groups:
                out[:, columns] = run.process(x[:, columns])
        if missing is not None:
            out[missing] = raw[missing]
            for columns, run in self._groups:
                run.reset(never[columns])
        return out

    def _last_inputs(self) -> np.ndarray:
        """Each channel's last finite input (the filled one), NaN if it has had none."""
        return np.array([run.bounds[0, column] for run, column, _ in
                         (self._place[c] for c in self.channels)])

    @staticmethod
    def _fill_missing(x: np.ndarray, finite: np.ndarray, previous: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray]:
        """Replace non-finite samples by the channel's last finite value; returns (filled,
        columns without any finite value so far, which are filled with 0 and reset after)."""
        n, k = x.shape
        rows = np.where(finite, np.arange(n)[:, None], -1)
        np.maximum.accumulate(rows, axis=0, out=rows)
        filled = np.where(rows >= 0, x[np.maximum(rows, 0), np.arange(k)], previous)
        never = np.isnan(previous) & ~finite.any(axis=0)
        filled[:, never] = 0.0
        return filled, never

    def reset(self) -> None:
        """Forget all state; the next sample starts each stage by its start policy."""
        for _, run in self._groups:
            run.reset(None)

    def continue_from(self, old: ChainSet) -> None:
        """Take over from `old` without an output jump (steady state at its last output)."""
        for name in self.channels:
            if name not in old._place:
                continue
            run, column, key = self._place[name]
            old_run, old_column, old_key = old._place[name]
            old_bounds = old_run.bounds[:, old_column]
            last_output = old_bounds[-1]
            if math.isnan(last_output):
                continue
            bounds = np.full(len(key) + 1, last_output)
            bounds[0] = old_bounds[0]
            for position, index in enumerate(key):
                stage, spec = run.stages[position], self.spec.stages[index]
                old_spec = (old.spec.stages[old_key[position]]
                            if position < len(old_key) else None)
                if old_spec is not None and old_spec.kind == spec.kind:
                    old_stage = old_run.stages[position]
                    if _same_design(old_spec, spec) and old.rate_hz == self.rate_hz:
                        stage.copy_state(column, old_stage, old_column)
                    else:
                        stage.settle(column, old_bounds[position], old_bounds[position + 1])
                    bounds[position + 1] = old_bounds[position + 1]
                else:
                    stage.settle(column, last_output, last_output)
            run.bounds[:, column] = bounds
            run.refresh()


def _same_design(a: StageSpec, b: StageSpec) -> bool:
    """True when two stages compute the same thing (which channels they select aside)."""
    return (a.kind, a.params, a.bypass, a.start) == (b.kind, b.params, b.bypass, b.start)
