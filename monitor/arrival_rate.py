"""Sample rate from arrival times, for boards that do not say their rate.

The measure is a robust straight-line fit of the cumulative sample count
against host arrival time: the slope is the rate. What it must not be fooled by:

- a backlog at open: a board that talked before the port opened hands over
  seconds of samples in the first reads (and a paced writer that was held up
  catches up as fast as the link allows). Those points lie below the line of
  the steady stream; they are cut off (`_trim_backlog`) and the fit is redone.
- packetisation (USB full-speed CDC delivers every 1 ms, a read may hold many
  lines) and scheduling jitter: the Theil-Sen slope (scipy.stats.theilslopes,
  the median of all pairwise slopes) ignores the odd late read, where a
  least-squares or first-to-last slope bends towards it.
- a pause: no arrivals for PAUSE_MIN_S (or ten sample periods, if longer), or a
  gap from the source (reconnect), starts a new segment; the fit never spans
  the outage, and the settled rate is kept until the new segment settles again.

Points are thinned to one per BIN_S (the newest read in it) so a fast stream
with a read per line costs the same as a slow one. `estimate()` is the slope
over the last WINDOW_S of the current segment, refreshed every UPDATE_S.

Stability criterion of `settled()`: the segment spans at least MIN_SPAN_S and
MIN_SAMPLES, and the window estimate agrees with the one STABLE_LAG_S earlier
within STABLE_TOLERANCE (0.1 %). The settled rate then follows the stable
estimate; while the estimate moves (a rate change crossing the window) the
last settled value holds. `session()` fits every segment's thinned history
and gives the rate measured over the whole session.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numpy as np

BIN_S = 0.02                 # one fit point per 20 ms of arrivals
WINDOW_S = 4.0               # sliding window of the live estimate
WINDOW_SAMPLES = 50          # ... widened for slow boards to hold this many samples
UPDATE_S = 0.25              # how often the live estimate is refitted
MIN_SPAN_S = 1.5             # shortest segment that can settle
MIN_SAMPLES = 20
STABLE_LAG_S = 1.0           # the estimate this long ago ...
STABLE_TOLERANCE = 1e-3      # ... agrees with the newest within 0.1 %
PAUSE_MIN_S = 0.5            # silence that starts a new segment
PAUSE_PERIODS = 10.0         # ... or this many sample periods, whichever is longer
SESSION_POINTS = 512         # thinned points kept per segment for the session fit
SESSION_MIN_SPAN_S = 1.0


@dataclass(frozen=True)
class SessionRate:
    """The rate measured over a whole session.

    rate_hz: slope of count against time, segments weighted by their span (Hz).
    samples: samples counted (all segments, backlog included).
    span_s:  seconds of steady stream the fit covers.
    """

    rate_hz: float
    samples: int
    span_s: float


def warm_up() -> None:
    """Import scipy.stats now (about 0.8 s), so the first fit does not stall a reader thread."""
    import scipy.stats  # noqa: F401


def robust_rate(t: np.ndarray, count: np.ndarray) -> tuple[float, float] | None:
    """(slope Hz, intercept) of cumulative `count` against arrival `t` (s), backlog cut.

    t, count: (n,) float64, t increasing. None with fewer than three points.
    """
    from scipy.stats import theilslopes

    if t.size < 3 or t[-1] <= t[0]:
        return None
    fit = _fit(theilslopes, t, count)
    if fit is None:
        return None
    start = _trim_backlog(t, count, *fit)
    if start:
        fit = _fit(theilslopes, t[start:], count[start:]) or fit
    return fit


def _fit(theilslopes, t: np.ndarray, count: np.ndarray) -> tuple[float, float] | None:
    if t.size < 3 or t[-1] <= t[0]:
        return None
    t0 = t[0]                                   # centred: intercepts stay well conditioned
    slope = float(theilslopes(count, t - t0)[0])
    if not slope > 0:
        return None
    return slope, float(np.median(count - slope * (t - t0))) - slope * t0


def _trim_backlog(t: np.ndarray, count: np.ndarray, slope: float, intercept: float) -> int:
    """Index of the first point of the steady stream: leading points far below the line
    (samples that were waiting before the stream reached steady state) are cut."""
    residual = count - (slope * t + intercept)
    spread = float(np.median(np.abs(residual - np.median(residual))))
    # 5 median absolute deviations, at least 2 samples: common practice for outliers
    tolerance = max(5.0 * spread, 2.0)
    low = residual < -tolerance
    if not low[0]:
        return 0
    steady = np.flatnonzero(~low)
    return int(steady[0]) if steady.size else 0


class _Segment:
    """Thinned (time, cumulative count) points of one stretch of uninterrupted arrivals.

    One point per BIN_S bin (the newest read in it) in `window`; every stride-th
    bin also in `history`, thinned by halves to at most SESSION_POINTS.
    """

    def __init__(self, t: float, samples_before: int) -> None:
        self.first_t = t
        self.base = samples_before
        self.window: deque[tuple[float, float]] = deque()
        self.history: list[tuple[float, float]] = []
        self._bin = -1
        self._bins = 0
        self._stride = 1
        self._history_live = False       # history[-1] is the current bin

    def add(self, t: float, count: float) -> None:
        index = int((t - self.first_t) / BIN_S)
        if index == self._bin:
            self.window[-1] = (t, count)
            if self._history_live:
                self.history[-1] = (t, count)
            return
        self._bin = index
        self.window.append((t, count))
        self._history_live = self._bins % self._stride == 0
        self._bins += 1
        if self._history_live:
            self.history.append((t, count))
            if len(self.history) > SESSION_POINTS:
                self.history = self.history[::2]
                self._stride *= 2
                self._history_live = False

    def drop_before(self, t: float) -> None:
        while len(self.window) > 3 and self.window[0][0] < t:
            self.window.popleft()


class ArrivalRate:
    """Sample rate estimated from when samples arrive.

    add(t, n) after each read that produced n samples at host time t (s, monotonic).
    estimate() -> Hz of the newest window, or None; settled() once stable (see the
    module docstring) and stays True; rate() -> the settled rate (Hz) or None.
    restart() after a gap from the source so the outage does not count as slow
    arrival. session() -> SessionRate over every segment, or None.
    live: False keeps only the points for session() (no sliding refits), for a recorder.
    """

    def __init__(self, live: bool = True) -> None:
        self.live = live
        self._segments: list[_Segment] = []
        self._count = 0                  # samples seen so far (the fit's y axis)
        self._last_t: float | None = None
        self._restart = True
        self._estimate: float | None = None
        self._history: deque[tuple[float, float]] = deque()   # (t, window estimate)
        self._next_fit = -np.inf
        self._settled: float | None = None

    def add(self, t: float, n: int) -> None:
        """Count n samples that arrived by host time t (seconds)."""
        t = float(t)
        if n <= 0:
            return
        if self._last_t is not None and t < self._last_t:
            t = self._last_t
        if not self._restart and self._last_t is not None and t - self._last_t > self._pause_s():
            self._restart = True
        self._count += int(n)
        if self._restart:
            self._segments.append(_Segment(t, self._count - int(n)))
            self._history.clear()          # the estimate and settled rate hold meanwhile
            self._restart = False
        segment = self._segments[-1]
        segment.add(t, float(self._count))
        self._last_t = t
        if not self.live:
            segment.drop_before(t - WINDOW_S)
        elif t >= self._next_fit:
            self._next_fit = t + UPDATE_S
            self._refit(segment, t)

    def restart(self) -> None:
        """A gap from the source: the next arrival starts a new segment."""
        self._restart = True

    def estimate(self) -> float | None:
        """Rate over the newest window of the current segment (Hz), or None."""
        return self._estimate

    def settled(self) -> bool:
        """True once the estimate has been stable (and from then on)."""
        return self._settled is not None

    def rate(self) -> float | None:
        """The settled rate (Hz): the newest stable estimate, or None before it settles."""
        return self._settled

    def session(self) -> SessionRate | None:
        """The rate over the whole session, or None before a segment spans SESSION_MIN_SPAN_S."""
        rates, spans = [], []
        for segment in self._segments:
            points = np.array(segment.history + [segment.window[-1]], dtype=np.float64)
            points = points[np.concatenate(([True], np.diff(points[:, 0]) > 0))]
            fit = robust_rate(points[:, 0], points[:, 1])
            span = float(points[-1, 0] - points[0, 0]) if len(points) else 0.0
            samples = points[-1, 1] - segment.base if len(points) else 0
            if fit is None or span < SESSION_MIN_SPAN_S or samples < MIN_SAMPLES:
                continue
            rates.append(fit[0])
            spans.append(span)
        if not rates:
            return None
        weights = np.array(spans)
        return SessionRate(float(np.dot(rates, weights) / weights.sum()), self._count,
                           float(weights.sum()))

    # -- internals -------------------------------------------------------------

    def _pause_s(self) -> float:
        rate = self._estimate or self._settled
        if rate is None and self._segments:         # not refitted: the segment's mean rate
            segment = self._segments[-1]
            span = (self._last_t or segment.first_t) - segment.first_t
            rate = (self._count - segment.base) / span if span > PAUSE_MIN_S else None
        return max(PAUSE_MIN_S, PAUSE_PERIODS / rate) if rate else PAUSE_MIN_S * 4

    def _window_s(self) -> float:
        rate = self._estimate or self._settled
        return max(WINDOW_S, WINDOW_SAMPLES / rate) if rate else np.inf

    def _refit(self, segment: _Segment, now: float) -> None:
        segment.drop_before(now - self._window_s())
        points = np.array(segment.window, dtype=np.float64)
        fit = robust_rate(points[:, 0], points[:, 1]) if len(points) >= 3 else None
        if fit is None:
            return
        self._estimate = fit[0]
        self._history.append((now, fit[0]))
        while len(self._history) > 2 and self._history[1][0] <= now - STABLE_LAG_S:
            self._history.popleft()
        span = now - segment.first_t
        samples = self._count - segment.base
        lagged_t, lagged = self._history[0]
        if (span >= MIN_SPAN_S and samples >= MIN_SAMPLES and now - lagged_t >= STABLE_LAG_S
                and abs(fit[0] - lagged) <= STABLE_TOLERANCE * fit[0]):
            self._settled = fit[0]
