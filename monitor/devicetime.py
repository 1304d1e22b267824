"""The board's own clock and sequence counter, unwrapped across blocks.

DeviceClock turns a timestamp field in s, ms or us, optionally wrapping at 16
or 32 bits, into a monotonic time in seconds, and measures the sample rate and
jitter from it. SequenceCounter turns an 8-, 16- or 32-bit frame counter into
a monotonic int64 count and counts every missing frame as dropped, with one
gap record per hole. Both take the raw values of each block in arrival order
and keep their state between calls, so a wrap between two blocks is unwrapped
like one inside a block.

A step of at least half the wrap modulus is read as a jump backwards (a board
reset), not as a long forward step: serial number arithmetic, RFC 1982.

Both trust the values they are given: the decoders first pass each value
through monitor.trackcheck, so a NaN, an impossible counter or a one-frame jump
is one bad frame there and never reaches these unwrappers. A NaN given to
DeviceClock.unwrap directly comes out as NaN without touching its state.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numpy as np

TIME_UNITS: dict[str, float] = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
TIME_BITS: tuple[int, ...] = (16, 32)
COUNTER_BITS: tuple[int, ...] = (8, 16, 32)
_TIMING_WINDOW = 4096
_TIMING_REFRESH = 256


@dataclass(frozen=True)
class DeviceTiming:
    """Sample timing measured on the device clock.

    rate_hz:    1 / median interval between samples.
    interval_s: the median interval.
    jitter_s:   standard deviation of the intervals near the median (within
                0.5x..1.5x of it, so dropped frames do not count as jitter).
    intervals:  how many intervals the figures rest on (newest 4096 at most).
    """

    rate_hz: float
    interval_s: float
    jitter_s: float
    intervals: int


class DeviceClock:
    """Device timestamps -> monotonic seconds.

    unit: "s", "ms" or "us", the unit of one tick of the raw field.
    bits: 16 or 32 when the raw field wraps at 2**bits; None when it never wraps
          (a float seconds column, a 64-bit tick count).
    The first sample maps to its own raw value times the unit (so a clock that
    starts at 0 gives t_dev from 0). A backward jump (reset) is recorded in
    `take_gaps()` and time goes on from the last value plus one median interval.
    """

    def __init__(self, unit: str = "us", bits: int | None = None) -> None:
        if unit not in TIME_UNITS:
            raise ValueError(f"time unit '{unit}' is not known; use one of s, ms, us")
        if bits is not None and bits not in TIME_BITS:
            raise ValueError(f"time bits {bits} is not allowed; use 16 or 32 (or none)")
        self.unit = unit
        self.bits = bits
        self.resets = 0
        self._scale = TIME_UNITS[unit]
        self._modulus = float(1 << bits) if bits else None
        self._last_raw: float | None = None
        self._last_ticks = 0.0
        self._steps: deque[np.ndarray] = deque()
        self._step_count = 0
        self._timing: DeviceTiming | None = None
        self._new_steps = 0
        self._gaps: list[str] = []

    def unwrap(self, raw: np.ndarray) -> np.ndarray:
        """Raw timestamps (n,) of one block -> (n,) float64 seconds, monotonic."""
        raw = np.asarray(raw, dtype=np.float64).reshape(-1)
        if raw.size == 0:
            return raw.copy()
        finite = np.isfinite(raw)
        if not finite.all():               # NaN out for NaN in; the time base stays whole
            out = np.full(raw.size, np.nan)
            out[finite] = self.unwrap(raw[finite])
            return out
        first = self._last_raw is None
        if first:
            previous = raw[0]
            start_ticks = raw[0] if self._modulus is None else raw[0] % self._modulus
        else:
            previous = self._last_raw
            start_ticks = self._last_ticks
        steps = np.diff(raw, prepend=previous)
        if self._modulus is not None:
            steps %= self._modulus
            backwards = steps >= self._modulus / 2
        else:
            backwards = steps < 0
        if backwards.any():
            steps = self._replace_backward_steps(steps, backwards, raw)
        ticks = start_ticks + np.cumsum(steps)
        self._last_raw = float(raw[-1])
        self._last_ticks = float(ticks[-1])
        self._remember_steps(steps[1:] if first else steps)
        return ticks * self._scale

    def _replace_backward_steps(self, steps: np.ndarray, backwards: np.ndarray,
                                raw: np.ndarray) -> np.ndarray:
        steps = steps.copy()
        typical = self._median_step(steps[~backwards])
        for index in np.flatnonzero(backwards):
            self.resets += 1
            self._gaps.append(f"device clock jumped back to {raw[index]:g} {self.unit} "
                              "(board reset?)")
            steps[index] = typical
        return steps

    def _median_step(self, fresh: np.ndarray) -> float:
        joined = np.concatenate([*self._steps, fresh[fresh > 0]])
        return float(np.median(joined)) if joined.size else 0.0

    def _remember_steps(self, steps: np.ndarray) -> None:
        if steps.size == 0:
            return
        self._steps.append(steps.copy())
        self._step_count += steps.size
        self._new_steps += steps.size
        while self._step_count - self._steps[0].size >= _TIMING_WINDOW:
            self._step_count -= self._steps.popleft().size

    def timing(self) -> DeviceTiming | None:
        """Rate and jitter from the newest intervals; None before two samples.

        Recomputed once 256 new intervals have come in (or while fewer than 256
        are known), so that callers may ask on every read.
        """
        if self._timing is not None and self._new_steps < _TIMING_REFRESH:
            return self._timing
        if not self._steps:
            return None
        steps = np.concatenate(self._steps)[-_TIMING_WINDOW:] * self._scale
        steps = steps[steps > 0]
        if steps.size == 0:
            return None
        median = float(np.median(steps))
        near = steps[(steps >= 0.5 * median) & (steps <= 1.5 * median)]
        timing = DeviceTiming(rate_hz=1.0 / median, interval_s=median,
                              jitter_s=float(np.std(near)), intervals=int(steps.size))
        if steps.size >= _TIMING_REFRESH:
            self._timing, self._new_steps = timing, 0
        return timing

    def take_gaps(self) -> list[str]:
        """Reasons for clock discontinuities since the last call."""
        gaps, self._gaps = self._gaps, []
        return gaps


class SequenceCounter:
    """Frame sequence numbers -> monotonic int64 count, with every hole counted.

    bits: 8, 16 or 32, where the counter wraps back to 0.
    dropped:   frames missing so far (a step of k > 1 means k - 1 lost frames).
    repeated:  frames that carried the same number as the one before.
    restarts:  backward jumps (board reset); the count goes on by one.
    """

    def __init__(self, bits: int = 16) -> None:
        if bits not in COUNTER_BITS:
            raise ValueError(f"counter bits {bits} is not allowed; use 8, 16 or 32")
        self.bits = bits
        self.dropped = 0
        self.repeated = 0
        self.restarts = 0
        self._modulus = 1 << bits
        self._last_raw: int | None = None
        self._last_count = 0
        self._gaps: list[str] = []

    def unwrap(self, raw: np.ndarray) -> np.ndarray:
        """Raw counter values (n,) of one block -> (n,) int64 monotonic count."""
        raw = np.asarray(raw, dtype=np.int64).reshape(-1) % self._modulus
        if raw.size == 0:
            return raw.copy()
        first = self._last_raw is None
        previous = raw[0] - 1 if first else self._last_raw
        steps = np.diff(raw, prepend=previous) % self._modulus
        if first:
            self._last_count = int(raw[0]) - 1
        odd = np.flatnonzero(steps != 1)
        if odd.size:
            steps = steps.copy()
            for index in odd:
                before = int(raw[index - 1]) if index else int(previous)
                self._account(int(steps[index]), before, int(raw[index]))
                if steps[index] >= self._modulus // 2:
                    steps[index] = 1
        counts = self._last_count + np.cumsum(steps)
        self._last_raw = int(raw[-1])
        self._last_count = int(counts[-1])
        return counts

    def _account(self, step: int, before: int, after: int) -> None:
        if step == 0:
            self.repeated += 1
        elif step >= self._modulus // 2:
            self.restarts += 1
            self._gaps.append(f"counter jumped back from {before} to {after} (board reset?)")
        else:
            self.dropped += step - 1
            self._gaps.append(f"{step - 1} frame{'s' if step > 2 else ''} dropped "
                              f"(counter {before} -> {after})")

    def take_gaps(self) -> list[str]:
        """One reason per hole or restart since the last call."""
        gaps, self._gaps = self._gaps, []
        return gaps
