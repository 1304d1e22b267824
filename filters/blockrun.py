"""The stages of one channel group in order, with a fused fast path for short blocks.

Live blocks are short (whatever arrived since the last read: 10 ms at 1 kHz is
10 samples), and each scipy call costs tens of microseconds of fixed overhead,
far more than the arithmetic. For a run of linear stages the whole block step
is one linear map of the block's input and the stacked states:

    [y (n rows); new state (D rows); last input and each stage's last output]
        = M_n @ [x (n rows); state (D rows)]

so a short block costs one small matrix product instead of one scipy call per
stage. M_n is built once per block length from the stages' own `simulate`
(scipy's sosfilt / lfilter applied to unit inputs and unit states), so the fast
path follows exactly the arithmetic of the slow one up to float rounding; long
blocks, the first block (start policy) and large states take the slow path.
"""

from __future__ import annotations

import numpy as np

from filters.stages import LinearStage, StageRuntime

# Block lengths up to this use the fused matrix; longer blocks amortize scipy's overhead.
FUSED_MAX_SAMPLES = 48
# Above this total state size (per fused segment) the matrix costs more than scipy's calls.
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
        self._single = (self._segments[0] if len(self._segments) == 1
                        and isinstance(self._segments[0], _Fused) else None)

    @property
    def bounds(self) -> np.ndarray:
        if len(self._ends) > 1:
            self._ends = [np.vstack(self._ends)]
        return self._ends[0]

    @bounds.setter
    def bounds(self, value: np.ndarray) -> None:
        self._ends = [np.array(value, dtype=np.float64)]

    def process(self, x: np.ndarray) -> np.ndarray:
        """Run one block x: (n, width) float64, n >= 1 -> (n, width); x is not modified."""
        ends = [x[-1:].copy()]  # x may be a buffer the caller reuses
        if self._single is not None:
            x, last = self._single.process(x)
            ends.append(last)
            self._ends = ends
            return x
        for segment in self._segments:
            if isinstance(segment, _Fused):
                x, last = segment.process(x)
                ends.append(last)
            else:
                x = segment.process(x)
                ends.append(x[-1:])
        self._ends = ends
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
    """Consecutive linear stages sharing one stacked state; one matrix product per short block.

    The state lives at the top of a work buffer, [state (D rows); block (n rows)],
    so a block step copies the block in, multiplies, and copies the new state back.
    """

    def __init__(self, stages: list[LinearStage], width: int) -> None:
        self.stages = stages
        self.state_dim = sum(s.state_dim for s in stages)
        self._work = np.zeros((self.state_dim + FUSED_MAX_SAMPLES, width))
        self._matrices: dict[int, np.ndarray] = {}
        self._warm = False
        offset = 0
        for stage in stages:
            stage.bind(self._work[offset:offset + stage.state_dim])
            offset += stage.state_dim

    def process(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """x (n, width) -> (y (n, width), each stage's last output (len(stages), width))."""
        n = x.shape[0]
        if self._warm and n <= FUSED_MAX_SAMPLES:
            matrix = self._matrices.get(n)
            if matrix is None:
                matrix = self._matrices[n] = self._build(n)
            dim, work = self.state_dim, self._work
            work[dim:dim + n] = x
            result = matrix.dot(work[:dim + n])
            work[:dim] = result[:dim]
            return result[dim + len(self.stages):], result[dim:dim + len(self.stages)]
        ends = []
        for stage in self.stages:
            x = stage.process(x)
            ends.append(x[-1])
        self.refresh()
        return x, np.array(ends)

    def refresh(self) -> None:
        self._warm = all(s.ready.all() for s in self.stages)

    def _build(self, n: int) -> np.ndarray:
        """M_n: rows [new state; each stage's last output; y] per unit state entry and input."""
        dim = self.state_dim
        basis = np.eye(dim + n)
        signal = basis[dim:]
        rows_state, rows_ends = [], []
        offset = 0
        for stage in self.stages:
            signal, final = stage.simulate(signal, basis[offset:offset + stage.state_dim])
            rows_state.append(final)
            rows_ends.append(signal[-1])
            offset += stage.state_dim
        return np.vstack([*rows_state, np.array(rows_ends), signal])
