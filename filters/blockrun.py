"""The stages of one channel group in order, with linear stages fused into matrix steps.

Live blocks are short (whatever arrived since the last read: 10 ms at 1 kHz is
10 samples), and each scipy call costs tens of microseconds of fixed overhead,
far more than the arithmetic. For consecutive linear stages the step over a
chunk of c samples is one linear map of the chunk's input and the stacked states:

    [new state (D rows); last input; each stage's last output; y (c rows)]
        = M_c @ [state (D rows); x (c rows)]

so a chunk costs one small matrix product (numpy's BLAS) instead of one scipy
call per stage; long blocks are cut into chunks of FUSED_CHUNK samples, which
also beats one sosfilt call over the whole array (measured: `tunetrace bench
--only filters`). M_c is built once per chunk length from the stages' own
`simulate` (scipy's sosfilt / lfilter applied to unit inputs and unit states),
so it follows exactly their arithmetic up to float rounding; the first block
after a start or reset runs stage by stage through scipy, for the start policy.
This is a hand-written path because no library offers block-state-space
filtering; scipy's own calls stay the definition of what a stage computes.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from filters.stages import LinearStage, StageRuntime

# Chunk length of the fused matrix step (about the fastest on 2-core x86 with OpenBLAS).
FUSED_CHUNK = 48
# Above this total state size (per fused segment) the matrices grow costlier than scipy.
FUSED_MAX_STATE = 48


class StageRun:
    """Stages run in order on a group of `width` channels.

    bounds: (len(stages) + 1, width), the last input of the run and the last
            output of each stage (NaN until known); retune reads and sets it.
    """

    def __init__(self, stages: list[StageRuntime], width: int) -> None:
        self.stages = stages
        self.width = width
        self._ends: list[np.ndarray] = [np.full((len(stages) + 1, width), np.nan)]
        # set by a fast lane instead of _ends: its whole result, bounds in rows _lazy_rows
        self._lazy: np.ndarray | None = None
        self._lazy_rows = slice(0, 0)
        self._segments: list[_Fused | StageRuntime] = []
        linear: list[LinearStage] = []
        for stage in [*stages, None]:
            if isinstance(stage, LinearStage):
                linear.append(stage)
                continue
            if linear:
                state_dim = sum(s.state_dim for s in linear)
                self._segments += ([_Fused(linear, width)] if state_dim <= FUSED_MAX_STATE
                                   else linear)
                linear = []
            if stage is not None:
                self._segments.append(stage)
        only = self._segments[0] if len(self._segments) == 1 else None
        self.lane = only if isinstance(only, _Fused) else None
        if self.lane is not None:
            self.lane.run = self

    @property
    def bounds(self) -> np.ndarray:
        if self._lazy is not None:
            self._ends, self._lazy = [self._lazy[self._lazy_rows]], None
        if len(self._ends) > 1:
            self._ends = [np.vstack(self._ends)]
        return self._ends[0]

    @bounds.setter
    def bounds(self, value: np.ndarray) -> None:
        self._ends, self._lazy = [np.array(value, dtype=np.float64)], None

    def process(self, x: np.ndarray) -> np.ndarray:
        """Run one block x: (n, width) float64, n >= 1 -> (n, width); x is not modified."""
        ends = [x[-1:].copy()]  # x may be a buffer the caller reuses
        for segment in self._segments:
            if isinstance(segment, _Fused):
                x, last = segment.process(x)
                ends.append(last)
            else:
                x = segment.process(x)
                ends.append(x[-1:].copy())  # not a view of what the caller receives
        self._ends, self._lazy = ends, None
        return x.copy() if not self.stages else x

    def reset(self, columns: np.ndarray | None) -> None:
        """Unstart `columns` (bool mask over the group; None: all) of every stage."""
        if columns is not None and not columns.any():
            return
        for stage in self.stages:
            stage.reset(columns)
        bounds = self.bounds.copy()
        bounds[:, slice(None) if columns is None else columns] = np.nan
        self.bounds = bounds
        self.refresh()

    def refresh(self) -> None:
        """Call after changing stage states from outside (settle, copy_state, reset)."""
        for segment in self._segments:
            if isinstance(segment, _Fused):
                segment.refresh()


class _Fused:
    """Consecutive linear stages sharing one stacked state, stepped by matrix products.

    The state lives at the top of a work buffer, [state (D rows); chunk (c rows)],
    so a chunk step copies the chunk in, multiplies, and copies the new state back.
    """

    def __init__(self, stages: list[LinearStage], width: int) -> None:
        self.stages = stages
        self.run: StageRun | None = None  # the run this segment is all of, if any
        self.state_dim = sum(s.state_dim for s in stages)
        self._work = np.zeros((self.state_dim + FUSED_CHUNK, width))
        self._state = self._work[:self.state_dim]
        self._top = self.state_dim + 1 + len(stages)  # first row of y in a step's result
        self._matrices: dict[int, np.ndarray] = {}
        # per block shape: the fast step (see `lanes`)
        self._lanes: dict[tuple[int, int], Callable[[np.ndarray], np.ndarray | None]] = {}
        self._warm = False
        offset = 0
        for stage in stages:
            stage.bind(self._work[offset:offset + stage.state_dim])
            offset += stage.state_dim

    @property
    def lanes(self) -> dict[tuple[int, int], Callable[[np.ndarray], np.ndarray | None]]:
        """Fast steps by block shape (n, width), filled by `step` while every stage is
        started; emptied when a stage is unstarted. The owner of the chain may call a
        lane directly: the hot path of live blocks, so it avoids every extra lookup."""
        return self._lanes

    def step(self, x: np.ndarray) -> np.ndarray | None:
        """Fast lane when this segment is a whole run: one short block x (n, width) in one
        matrix product -> y (n, width), the run's bounds updated; or None with nothing
        changed (a stage not started, n > FUSED_CHUNK or n == 0, a non-finite sample)."""
        lane = self._lanes.get(x.shape)
        if lane is None:
            n = x.shape[0]
            if not self._warm or not 0 < n <= FUSED_CHUNK:
                return None
            lane = self._lanes[x.shape] = self._make_lane(n)
        return lane(x)

    def _make_lane(self, n: int) -> Callable[[np.ndarray], np.ndarray | None]:
        """The step for blocks of n samples, with everything it touches bound locally."""
        dim, top, run = self.state_dim, self._top, self.run
        run._lazy_rows = slice(dim, top)  # type: ignore[union-attr]
        dot = self._matrix(n).dot
        slot, operand, state = self._work[dim:dim + n], self._work[:dim + n], self._state
        isfinite = math.isfinite

        def lane(x: np.ndarray) -> np.ndarray | None:
            slot[...] = x
            result = dot(operand)
            # every x entry meets every row (0 * NaN is NaN), so one row tells if x was
            # finite; summing its few values in Python is the cheapest test (measured)
            if not isfinite(sum(result[dim].tolist())):
                return None
            state[...] = result[:dim]
            run._lazy = result  # type: ignore[union-attr]
            return result[top:]

        return lane

    def process(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """x (n, width), n >= 1, finite -> (y (n, width), each stage's last output
        (len(stages), width))."""
        if not self._warm:
            ends = []
            for stage in self.stages:
                x = stage.process(x)
                ends.append(x[-1])
            self.refresh()
            return x, np.array(ends)
        dim, work, count = self.state_dim, self._work, len(self.stages)
        pieces = []
        for start in range(0, x.shape[0], FUSED_CHUNK):
            chunk = x[start:start + FUSED_CHUNK]
            n = chunk.shape[0]
            work[dim:dim + n] = chunk
            result = self._matrix(n).dot(work[:dim + n])
            work[:dim] = result[:dim]
            pieces.append(result[dim + 1 + count:])
        y = pieces[0] if len(pieces) == 1 else np.vstack(pieces)
        return y, result[dim + 1:dim + 1 + count]

    def refresh(self) -> None:
        self._warm = all(s.all_ready for s in self.stages)
        if not self._warm:
            self._lanes.clear()

    def _matrix(self, n: int) -> np.ndarray:
        """M_n (cached): rows [new state; last input; each stage's last output; y], one
        column per unit state entry and per unit input sample."""
        cached = self._matrices.get(n)
        if cached is not None:
            return cached
        dim = self.state_dim
        basis = np.eye(dim + n)
        signal = basis[dim:]
        rows_state, rows_ends = [], [signal[-1]]
        offset = 0
        for stage in self.stages:
            signal, final = stage.simulate(signal, basis[offset:offset + stage.state_dim])
            rows_state.append(final)
            rows_ends.append(signal[-1])
            offset += stage.state_dim
        matrix = np.ascontiguousarray(np.vstack([*rows_state, np.array(rows_ends), signal]))
        self._matrices[n] = matrix
        return matrix
