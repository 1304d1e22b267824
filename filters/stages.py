"""Streaming runtimes: one designed stage running on a group of channels, state carried.

A runtime processes blocks `x: (n, g) float64` (n samples of g channels, any n >= 1)
so that any split of a stream into blocks gives the result of a sample-by-sample
loop, to float rounding.

Start policy (per channel, on the first sample after construction or reset):
  "steady"  the state as if the first input sample had held forever
            (sosfilt_zi * first sample; FIR and median history full of it);
  "zero"    the classical zero state (zero history).

Retune (`settle`): a new stage taking over from an old one with last input
`x_old` and last output `y_old` is put in a state that continues the output:
  * a stage that passes DC (|DC gain| >= DC_BLOCKING_GAIN: low-pass, notch,
    band-stop, moving average, ema, median) gets the steady state whose output
    is y_old, i.e. steady at the input y_old / G. Its next output is y_old plus
    b0 times the difference of the next input from y_old / G: no jump.
  * a stage that blocks DC (high-pass, band-pass, dc-block) outputs 0 in every
    steady state, so "steady at y_old" does not exist. It gets the steady state
    at its real last input x_old, plus an offset on the last section's first
    delay so that its next output is y_old; the offset then dies away with the
    filter's own poles. The output is continuous and settles to what the new
    filter gives.
  * gain and bypass have no state; a new scale or offset applies at once (it is
    a calibration change the user asked for, ramping it would misreport data).
"""

from __future__ import annotations

from typing import Any

import numpy as np

# Below this |DC gain| a stage is treated as DC-blocking when retuned (see above).
DC_BLOCKING_GAIN = 1e-3

# Window budgets (samples). A window costs `window` operations per sample and channel
# (lfilter's taps, np.partition's selection), where a low-pass of any length costs a
# few. A moving average of 10 s at 1 kHz (40 s at 250 Hz) is longer than any smoothing
# a live view needs; longer averages are a low-pass's job. A median removes spikes a
# few samples long, so its window is a few samples to a few tens (common practice);
# 1001 (1 s at 1 kHz) leaves a wide margin and keeps 8 channels at 1 kHz well inside
# one core.
MAX_AVERAGE_WINDOW = 10_000
MAX_MEDIAN_WINDOW = 1_001
# Memory of every stage history a chain keeps (bytes): windows and filter states, 8
# bytes per value and channel. 64 MiB holds a 10 000-sample average on 800 channels or
# a 1001-sample median on 8000; a practitioner's chain (a few stages of a few tens of
# samples on a few dozen channels) needs kilobytes.
MAX_HISTORY_BYTES = 64 << 20
# Values np.partition may copy at once for a median (window x rows x channels): 8 MiB;
# longer blocks are cut into pieces of this size.
MEDIAN_WORK_VALUES = 1 << 20


def history_values(design: Any, bypass: bool = False) -> int:
    """Values per channel the runtime of `design` keeps between blocks (its memory / 8)."""
    if bypass:
        return 0
    if design.sos is not None:
        return 2 * int(np.shape(design.sos)[0])
    if design.fir is not None:
        return 2 * int(np.shape(design.fir)[0])       # taps and state
    if design.kind == "median":
        return int(design.params["window"]) - 1
    return 0


def check_history(values: int, channels: int) -> None:
    """ValueError when `values` (summed over all `channels`) exceed MAX_HISTORY_BYTES."""
    need = 8 * values
    if need > MAX_HISTORY_BYTES:
        raise ValueError(
            f"the chain's windows and filter states on {channels} channels need "
            f"{need / 2**20:.0f} MiB, more than the {MAX_HISTORY_BYTES >> 20} MiB allowed; "
            f"give shorter windows or fewer channels")


class StageRuntime:
    """Base of every runtime: start policy bookkeeping for `width` channels.

    linear stages also offer `state_dim`, `state (state_dim, width)` and
    `simulate(x, state) -> (y, new_state)` so that a chain can fuse them.
    """

    linear = False
    state_dim = 0

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        if start not in ("steady", "zero"):
            raise ValueError(f"start = {start!r} must be 'steady' or 'zero'")
        self.design = design
        self.width = int(width)
        self.start = start
        self.ready = np.zeros(self.width, dtype=bool)  # per channel: state initialised
        self.all_ready = False

    def process(self, x: np.ndarray) -> np.ndarray:
        """Filter one block x: (n, width) float64, n >= 1 -> (n, width) float64."""
        if not self.all_ready:
            self._begin(~self.ready, x[0])
            self.ready[:] = self.all_ready = True
        return self._run(x)

    def reset(self, columns: np.ndarray | None = None) -> None:
        """Forget the state of `columns` (bool mask or indices; None: all)."""
        self.ready[slice(None) if columns is None else columns] = False
        self.all_ready = bool(self.ready.all())

    def settle(self, column: int, x_old: float, y_old: float) -> None:
        """Retune: continue column's output from y_old (old last output), x_old (old last input)."""
        self.ready[column] = True
        self.all_ready = bool(self.ready.all())

    def copy_state(self, column: int, other: StageRuntime, other_column: int) -> None:
        """Take over `other`'s state of `other_column` exactly (the same design)."""
        self.ready[column] = other.ready[other_column]
        self.all_ready = bool(self.ready.all())

    # subclasses: initialise `columns` (bool mask) from the first sample row x0 (width,)
    def _begin(self, columns: np.ndarray, x0: np.ndarray) -> None:
        pass

    def _run(self, x: np.ndarray) -> np.ndarray:
        raise NotImplementedError


class LinearStage(StageRuntime):
    """A linear time-invariant stage whose state is a (state_dim, width) array.

    `unit_state` is the steady state for a constant input of 1, `dc_gain` its
    output, and `offset_index` the state entry that shifts the next output 1:1.
    """

    linear = True
    unit_state: np.ndarray
    dc_gain: float
    offset_index: int

    def __init__(self, design: Any, width: int, start: str, state_dim: int) -> None:
        super().__init__(design, width, start)
        self.state_dim = state_dim
        self.state = np.zeros((state_dim, self.width))

    def bind(self, state: np.ndarray) -> None:
        """Keep the state in `state` (a (state_dim, width) view owned by a fused run)."""
        state[...] = self.state
        self.state = state

    def simulate(self, x: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Pure block step: x (n, w), state (state_dim, w) -> (y (n, w), new state)."""
        raise NotImplementedError

    def _run(self, x: np.ndarray) -> np.ndarray:
        y, self.state[...] = self.simulate(x, self.state)
        return y

    def _begin(self, columns: np.ndarray, x0: np.ndarray) -> None:
        scale = x0[columns] if self.start == "steady" else np.zeros(int(columns.sum()))
        self.state[:, columns] = self.unit_state[:, None] * scale[None, :]

    def settle(self, column: int, x_old: float, y_old: float) -> None:
        if abs(self.dc_gain) >= DC_BLOCKING_GAIN:
            self.state[:, column] = self.unit_state * (y_old / self.dc_gain)
        elif self.state_dim:
            self.state[:, column] = self.unit_state * x_old
            self.state[self.offset_index, column] += y_old - self.dc_gain * x_old
        super().settle(column, x_old, y_old)

    def copy_state(self, column: int, other: StageRuntime, other_column: int) -> None:
        self.state[:, column] = other.state[:, other_column]
        super().copy_state(column, other, other_column)


class SosStage(LinearStage):
    """Second-order sections (design.sos (m, 6)) run with scipy.signal.sosfilt."""

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        from scipy.signal import sosfilt_zi

        self.sos = np.ascontiguousarray(design.sos, dtype=np.float64)
        sections = self.sos.shape[0]
        super().__init__(design, width, start, 2 * sections)
        # scipy's zi for axis 0 is (sections, 2, width); flattened it is (2*sections, width)
        self.unit_state = sosfilt_zi(self.sos).reshape(-1)
        self.dc_gain = float(np.prod(self.sos[:, :3].sum(axis=1) / self.sos[:, 3:].sum(axis=1)))
        self.offset_index = 2 * (sections - 1)  # last section's first delay: y = b0 x + z0

    def simulate(self, x: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        from scipy.signal import sosfilt

        y, zf = sosfilt(self.sos, x, axis=0, zi=state.reshape(-1, 2, state.shape[1]))
        return y, zf.reshape(state.shape)


class FirStage(LinearStage):
    """FIR taps (design.fir, e.g. a moving average) run with scipy.signal.lfilter.

    A moving average kept as a running sum drifts by float rounding over hours
    of streaming; lfilter recomputes every output from the last `taps` inputs
    held in its state, so there is nothing to drift, at O(taps) per sample.
    """

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        self.taps = np.ascontiguousarray(design.fir, dtype=np.float64)
        super().__init__(design, width, start, len(self.taps) - 1)
        # lfilter's steady state for a constant 1 with a = [1]: zi[k] = sum(taps[k+1:]),
        # which lfilter_zi finds by solving a (taps-1)^2 system: 800 MB at 10 000 taps.
        self.unit_state = np.cumsum(self.taps[::-1])[::-1][1:].copy()
        self.dc_gain = float(self.taps.sum())
        self.offset_index = 0

    def simulate(self, x: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        from scipy.signal import lfilter

        if not self.state_dim:
            return self.taps[0] * x, state
        return lfilter(self.taps, [1.0], x, axis=0, zi=state)


class BypassStage(LinearStage):
    """A bypassed stage: samples pass through unchanged; it keeps its place in the chain."""

    unit_state = np.zeros(0)
    dc_gain = 1.0
    offset_index = 0

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        super().__init__(design, width, start, 0)

    def simulate(self, x: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return x.copy(), state


class MedianStage(StageRuntime):
    """Running median over an odd `window`, carrying the last window-1 inputs.

    Each block's windows are one strided (window, n, width) view of [history;
    block], reduced by np.partition along the window axis. (This is what
    sliding_window_view with np.median computes; building the view directly
    avoids their fixed cost of about 10 us per call, which dominated a
    10-sample block.)
    """

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        super().__init__(design, width, start)
        self.window = int(design.params["window"])
        if self.window < 1 or self.window % 2 == 0:
            raise ValueError(f"window = {self.window} must be an odd integer >= 1")
        self.history = np.zeros((self.window - 1, self.width))

    def _begin(self, columns: np.ndarray, x0: np.ndarray) -> None:
        self.history[:, columns] = x0[columns] if self.start == "steady" else 0.0

    def _run(self, x: np.ndarray) -> np.ndarray:
        if self.window == 1:
            return x.copy()
        n, half = x.shape[0], self.window // 2
        extended = np.concatenate((self.history, x))  # C-contiguous (window - 1 + n, width)
        self.history = extended[n:].copy()
        row, column = extended.strides
        # np.partition copies window x rows x width values: at most MEDIAN_WORK_VALUES
        rows = max(1, MEDIAN_WORK_VALUES // (self.window * self.width))
        out = np.empty((n, self.width))
        for first in range(0, n, rows):
            count = min(rows, n - first)
            windows = np.ndarray((self.window, count, self.width), np.float64, extended,
                                 first * row, (row, row, column))  # [j, t] = extended[t + j]
            out[first:first + count] = np.partition(windows, half, axis=0)[half]
        return out

    def settle(self, column: int, x_old: float, y_old: float) -> None:
        self.history[:, column] = y_old  # a median passes a constant unchanged
        super().settle(column, x_old, y_old)

    def copy_state(self, column: int, other: StageRuntime, other_column: int) -> None:
        self.history[:, column] = other.history[:, other_column]
        super().copy_state(column, other, other_column)


class GainStage(StageRuntime):
    """y = scale * x + offset (design.params scale, offset); no state."""

    def __init__(self, design: Any, width: int, start: str = "steady") -> None:
        super().__init__(design, width, start)
        self.scale = float(design.params.get("scale", 1.0))
        self.offset = float(design.params.get("offset", 0.0))

    def _run(self, x: np.ndarray) -> np.ndarray:
        return self.scale * x + self.offset


def make_stage(design: Any, width: int, *, start: str = "steady",
               bypass: bool = False) -> StageRuntime:
    """The runtime for a StageDesign on `width` channels (sos, fir, median or gain)."""
    if bypass:
        return BypassStage(design, width, start)
    if design.sos is not None:
        return SosStage(design, width, start)
    if design.fir is not None:
        return FirStage(design, width, start)
    if design.kind == "median":
        return MedianStage(design, width, start)
    if design.kind == "gain":
        return GainStage(design, width, start)
    raise ValueError(f"kind = {design.kind!r} has neither coefficients nor a runtime")
