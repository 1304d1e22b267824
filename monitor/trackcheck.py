"""One bad device-time or counter value is one bad frame, never a broken time base.

A board's clock or frame counter moves along a track: each value a small step
ahead of the one before. TrackCheck judges each raw value of one such column
before anything is unwrapped, FrameGate combines the time and the counter
column of a stream. A frame is bad when its value

- cannot be a value of that column at all: NaN or inf; for a counter also a
  fraction, a negative number or one beyond 2**53 (float64 then no longer holds
  every whole number); for a field that wraps at 2**bits, a number outside
  -2**(bits-1) .. 2**bits (neither the signed nor the unsigned form of the field);
- or leaves the track for one frame only: a step back, or more than
  JUMP_STEPS typical steps ahead (the typical step is the median of the newest
  accepted steps), after which the next frame goes on from the old track
  (0 .. JUMP_STEPS typical steps ahead of the last good value, in wrap
  arithmetic).

A value that leaves the track and is followed by a frame that does not go back
to the old track is real: a board reset (clock or counter back to zero), a pause, or frames lost
on the link. It is kept and handled downstream exactly as before this check
existed (devicetime.DeviceClock and SequenceCounter record the reset or count
the drops). Judging needs the next frame, so a value that leaves the track as the
last frame of a read is held until the next read (one frame of latency, only then).

The session's first value has no track yet: it is kept once the next value is on
a track from it; when the next one is not, the frame after those two decides
which of them the stream goes on from (the other is the bad one). A reset or a
pause between the first two frames of a session therefore costs the first frame.
Until three steps are known the typical step comes from the read itself.

Limit: one bad value at a time. Two wrong values in a row that look like each
other's continuation are taken as a real jump, as they were before.

Written by hand: no library judges outliers incrementally with wrap arithmetic.
The common case (every step small and forward) is one vectorized test per read.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np

JUMP_STEPS = 100          # "absurd": more than this many typical steps ahead
EXACT_INTEGERS = 2.0 ** 53
OK, BAD, WAIT = 0, 1, 2
_TYPICAL_WINDOW = 64
_TAU_REFRESH = 1024        # accepted steps between two medians of the fast path


class TrackCheck:
    """Judges the raw values of one device-time or counter column, read by read.

    what:     how the column is named in reasons ("device time t_ms", "counter seq").
    modulus:  2**bits when the raw field wraps, else None.
    integer:  True for a counter (whole, non-negative numbers only).
    """

    def __init__(self, what: str, modulus: float | None = None, integer: bool = False,
                 exact: bool = False) -> None:
        self.what = what
        self.modulus = float(modulus) if modulus else None
        self.integer = integer
        self.exact = exact            # values of an integer field: always numbers it can hold
        self._last: float | None = None
        self._steps: deque[float] = deque(maxlen=_TYPICAL_WINDOW)
        self._tau: float | None = None
        self._fresh_steps = 0         # accepted since the cached typical step

    def _delta(self, steps: np.ndarray | float) -> np.ndarray | float:
        """Steps in wrap arithmetic: a step of half the wrap or more is one backwards."""
        if self.modulus is None:
            return steps
        half = self.modulus / 2
        return np.mod(np.add(steps, half), self.modulus) - half

    def _steps_from(self, anchor: float, vals: np.ndarray) -> np.ndarray:
        """Steps from `anchor` to vals[0], then between consecutive values (wrap arithmetic)."""
        steps = np.empty(vals.size)
        steps[0] = vals[0] - anchor
        np.subtract(vals[1:], vals[:-1], out=steps[1:])
        return np.asarray(self._delta(steps), dtype=np.float64)

    def on_track(self, raw: np.ndarray) -> bool:
        """Whether every value is a number the column can hold and on the known track:
        the common case, judged in a few vectorized operations."""
        if self._last is None or raw.size == 0:
            return False
        if self._tau is None or self._fresh_steps >= _TAU_REFRESH:
            self._tau = self._typical(raw)
            self._fresh_steps = 0
        if self._tau is None:
            return False
        if not self.exact:
            with np.errstate(invalid="ignore"):
                if self._invalid(raw)[0].any():
                    return False
        steps = self._steps_from(self._last, raw)
        return bool(((steps >= 0) & (steps <= JUMP_STEPS * self._tau)).all())

    def _invalid(self, raw: np.ndarray) -> tuple[np.ndarray, list[str]]:
        bad = ~np.isfinite(raw)
        why = "is not a number"
        if self.modulus is not None:
            bad |= (raw < -self.modulus / 2) | (raw >= self.modulus)
            why = f"is not a number a {int(np.log2(self.modulus))}-bit field can hold"
        if self.integer:
            with np.errstate(invalid="ignore"):
                bad |= raw != np.floor(raw)
                if self.modulus is None:
                    bad |= (raw < 0) | (raw > EXACT_INTEGERS)
            why = ("is not a whole number a counter can hold" if self.modulus is None
                   else f"is not a whole number a {int(np.log2(self.modulus))}-bit field "
                        f"can hold")
        return bad, [why]

    def _typical(self, fresh: np.ndarray) -> float | None:
        """Median accepted step; bootstrapped from this read's own steps when too few are known."""
        if len(self._steps) >= 3:
            return float(np.median(np.fromiter(self._steps, dtype=np.float64)))
        steps = np.asarray(self._delta(np.diff(fresh)), dtype=np.float64) if fresh.size > 1 \
            else np.empty(0)
        steps = np.concatenate([np.fromiter(self._steps, dtype=np.float64), steps[steps > 0]])
        return float(np.median(steps)) if steps.size >= 3 else None

    def judge(self, raw: np.ndarray, final: bool = False) -> tuple[np.ndarray, dict[int, str]]:
        """Verdicts (n,) int8 (OK, BAD, WAIT) and a reason per BAD index. Changes nothing.

        WAIT: the value left the track and the frame that would decide has not come yet
        (final=True, the end of the stream: keep it, as there is nothing to go on from).
        """
        raw = np.asarray(raw, dtype=np.float64).reshape(-1)
        verdict = np.zeros(raw.size, dtype=np.int8)
        reasons: dict[int, str] = {}
        invalid, (why,) = self._invalid(raw)
        for i in np.flatnonzero(invalid):
            verdict[i] = BAD
            reasons[int(i)] = f"{self.what} = {_show(raw[i])} {why}"
        index = np.flatnonzero(~invalid)
        vals = raw[index]
        if vals.size == 0:
            return verdict, reasons
        tau = self._typical(vals)
        limit = JUMP_STEPS * tau if tau else np.inf
        anchor = self._last

        def on_track(a: float, b: float) -> bool:
            step = float(self._delta(b - a))
            return 0.0 <= step <= limit

        def mark_bad(k: int, after: float) -> None:
            verdict[index[k]] = BAD
            reasons[int(index[k])] = (f"{self.what} = {_show(vals[k])} leaves the track for one "
                                      f"frame (before {_show(after)}, then "
                                      f"{_show(vals[k + 1]) if k + 1 < vals.size else '?'})")

        held: int | None = None
        k, m = 0, vals.size
        while k < m:
            if anchor is None:                      # the session's first value
                v = float(vals[k])
                if k + 1 >= m:
                    if not final:
                        verdict[index[k]] = WAIT
                    break
                w = float(vals[k + 1])
                if on_track(v, w):
                    anchor = v
                    k += 1
                    continue
                if k + 2 >= m:
                    if not final:
                        verdict[index[k:k + 2]] = WAIT
                    break
                x = float(vals[k + 2])
                if on_track(v, x) and abs(float(self._delta(x - v))) <= abs(
                        float(self._delta(x - w))):
                    mark_bad(k + 1, v)              # the second left; the third goes on from v
                    anchor = v
                    k += 2
                else:
                    verdict[index[k]] = BAD         # the stream goes on from the second
                    reasons[int(index[k])] = (f"{self.what} = {_show(v)} is off the track the "
                                              f"next frames follow ({_show(w)}, {_show(x)})")
                    k += 1
                continue
            if held is None:                        # skip every on-track value at once
                steps = self._steps_from(anchor, vals[k:])
                off = np.flatnonzero(~((steps >= 0) & (steps <= limit)))
                if off.size == 0:
                    anchor = float(vals[-1])
                    break
                j = k + int(off[0])
                if j > k:
                    anchor = float(vals[j - 1])
                held, k = j, j + 1
                continue
            v = float(vals[k])
            if on_track(anchor, v):
                mark_bad(held, anchor)              # back on the old track: one bad value
                anchor = v
                held = None
                k += 1
            else:
                anchor = float(vals[held])          # a real jump: reset, pause or lost frames
                held = None
        if held is not None and not final:
            verdict[index[held]] = WAIT
        return verdict, reasons

    def accept(self, kept: np.ndarray) -> None:
        """Remember the values of the frames finally kept (in order) as the track."""
        kept = np.asarray(kept, dtype=np.float64).reshape(-1)
        if kept.size == 0:
            return
        steps = self._steps_from(kept[0] if self._last is None else self._last, kept)
        forward = steps[steps > 0][-_TYPICAL_WINDOW:]
        self._steps.extend(forward.tolist())
        self._fresh_steps += forward.size
        self._last = float(kept[-1])


@dataclass
class GateVerdict:
    """What to do with the frames of one read, in order.

    keep:      (n,) bool, frames to pass on now.
    hold_from: frames from this index on wait for the next read (n when none wait).
    bad:       (index, reason) of each bad frame before hold_from.
    """

    keep: np.ndarray
    hold_from: int
    bad: list[tuple[int, str]] = field(default_factory=list)


class FrameGate:
    """The device-time and counter checks of one stream together (either may be None)."""

    def __init__(self, time: TrackCheck | None = None, counter: TrackCheck | None = None) -> None:
        self.time = time
        self.counter = counter

    def __bool__(self) -> bool:
        return self.time is not None or self.counter is not None

    def sort(self, time_raw: np.ndarray | None, counter_raw: np.ndarray | None,
             final: bool = False) -> GateVerdict:
        """Judge the frames of a read (the raw time and counter column, None where the
        stream has none), remember the kept ones, and say which to keep, which are bad
        and which to hold for the next read."""
        pairs = [(check, np.asarray(col, dtype=np.float64).reshape(-1))
                 for check, col in ((self.time, time_raw), (self.counter, counter_raw))
                 if check is not None and col is not None]
        n = len(pairs[0][1]) if pairs else 0
        if not final and all(check.on_track(col) for check, col in pairs):
            for check, col in pairs:
                check.accept(col)
            return GateVerdict(np.ones(n, dtype=bool), n)
        bad = np.zeros(n, dtype=bool)
        wait = np.zeros(n, dtype=bool)
        reasons: dict[int, str] = {}
        for check, col in pairs:
            verdict, why = check.judge(col, final)
            bad |= verdict == BAD
            wait |= verdict == WAIT
            for i, text in why.items():
                reasons.setdefault(i, text)
        hold_from = int(np.argmax(wait)) if wait.any() else n
        keep = ~bad
        keep[hold_from:] = False
        for check, col in pairs:
            check.accept(col[keep])
        listed = sorted(i for i in reasons if i < hold_from)
        return GateVerdict(keep, hold_from, [(i, reasons[i]) for i in listed])


def _show(value: float) -> str:
    return f"{value:.10g}"
