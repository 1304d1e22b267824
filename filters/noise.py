"""Noise of a signal that also steps and ramps, and what a chain does to it.

Two figures describe a chain's noise reduction:

- **white-noise reduction** (exact): -10 log10(sum h[n]^2) dB, the factor by
  which the chain's linear model divides the power of white noise (Parseval's
  theorem). It depends on the chain only.
- **measured reduction**: noise power of the raw signal over that of the
  filtered signal, both measured on the same stretch of data. It counts the
  real noise, coloured or not (hum, vibration, spikes), but must not count the
  signal's own steps and ramps, nor the filter's slow response to a step.

How the measured noise is found (the choice, and why):

1. Steps are found in the raw signal by a level-change test: the median of
   the next STEP_HALF samples minus the median of the previous STEP_HALF, against
   STEP_SIGMAS standard errors of that difference. The noise scale comes from
   the median absolute first difference (robust: a step is one large difference
   among thousands; common practice). Medians make single-sample spikes count
   as noise, not as steps.
2. Around each step a zone of STEP_HALF samples is left out of both signals,
   and in the filtered signal also the chain's settling (its step response
   within SETTLE_FRACTION of final, plus any median window) after it.
3. What remains is cut into pieces of at most PIECE_S seconds (longer when the
   chain's output noise is correlated for longer), and a straight line is
   fitted to each piece by least squares: a ramp is signal, curvature inside a
   piece counts as noise.
4. Noise power is the pooled sum of squared residuals over the degrees of
   freedom left. For white raw noise a line removes 2 of them per piece. The
   filtered noise is coloured (its autocorrelation is that of the chain's
   impulse response), and a line fitted over a piece absorbs more of it: the
   degrees of freedom removed are trace(P R) / r0 (P the projection onto the
   line, R the noise covariance), the textbook correction for the expected
   residual power of a least-squares fit under correlated errors (any
   regression text, "generalised degrees of freedom"; written here because no
   library computes it for a Toeplitz R).

The result is unbiased for white noise on flat, stepped or ramped signals, and
the same whatever the block sizes or the playback speed, since it is defined on
sample indices only.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

STEP_HALF = 8            # samples each side of a candidate step
STEP_SIGMAS = 6.0        # level change that counts as a step, in standard errors
STEP_SPREADS = 10.0      # ... and in robust spreads of the level-change statistic
SETTLE_FRACTION = 1e-3   # step response within 0.1 % of final before filtered noise counts
PIECE_S = 4.0            # longest straight-line piece, seconds (at least)
PIECE_TAUS = 40          # and at least this many correlation lengths of the filtered noise
MIN_PIECE = 8            # shorter pieces are left out
_MAD_TO_SIGMA = 1.4826   # sigma of a Gaussian over its median absolute deviation (common practice)
_RHO_TAIL = 1e-6         # autocorrelation below which lags are dropped


@dataclass(frozen=True)
class ChannelNoiseModel:
    """What the measure needs to know of one channel's chain.

    rho: (lags,) float64, autocorrelation of the chain's impulse response,
    rho[0] = 1 (white noise through the chain). guard: samples after a step
    before the filtered output counts. piece: longest piece in samples.
    white_reduction_db: -10 log10(sum h^2) (exact, linear stages).
    """

    rho: np.ndarray
    guard: int
    piece: int
    white_reduction_db: float

    @classmethod
    def identity(cls, rate_hz: float) -> ChannelNoiseModel:
        """No stages: filtered equals raw."""
        return cls(np.ones(1), 0, _piece(rate_hz, 1.0), 0.0)

    @classmethod
    def from_designs(cls, designs: Sequence, rate_hz: float) -> ChannelNoiseModel:
        """From the StageDesigns a channel runs (bypassed ones left out), at rate_hz."""
        from filters.analysis import impulse_response, settling_time_s

        if not designs:
            return cls.identity(rate_hz)
        h = impulse_response(list(designs))
        energy = float(np.sum(h * h))
        median = sum(int(d.params.get("window", 0)) for d in designs if d.kind == "median")
        settle = settling_time_s(list(designs), SETTLE_FRACTION)
        settle_n = len(h) if not math.isfinite(settle) else int(math.ceil(settle * rate_hz))
        if energy <= 0:
            return cls(np.ones(1), settle_n + median, _piece(rate_hz, 1.0), math.inf)
        rho = _autocorrelation(h)
        tau = 1.0 + 2.0 * float(np.sum(np.abs(rho[1:])))
        return cls(rho, settle_n + median, _piece(rate_hz, tau),
                   -10.0 * math.log10(energy))


def chain_noise_models(chain: Any, width: int, rate_hz: float = 1.0
                       ) -> list[ChannelNoiseModel]:
    """The noise model of each of the first `width` channels of a ChainSet (bypassed stages
    left out); identity models past its channels, or for None or a chain without a rate
    (their pieces sized for `rate_hz`, the sample rate in Hz when the chain has none)."""
    rate = float(getattr(chain, "rate_hz", 0.0) or 0.0)
    if chain is None or rate <= 0:
        return [ChannelNoiseModel.identity(max(float(rate_hz), 1.0))] * width
    stages = chain.spec.stages
    models = []
    for name in list(chain.channels)[:width]:
        designs = [d for i, d in chain.designs_for(name) if not stages[i].bypass]
        models.append(ChannelNoiseModel.from_designs(designs, rate))
    return models + [ChannelNoiseModel.identity(rate)] * (width - len(models))


def _piece(rate_hz: float, tau: float) -> int:
    return max(int(PIECE_S * rate_hz), int(PIECE_TAUS * tau), 4 * MIN_PIECE)


def _autocorrelation(h: np.ndarray) -> np.ndarray:
    from scipy.signal import fftconvolve

    full = fftconvolve(h, h[::-1])[len(h) - 1:]
    rho = full / full[0]
    keep = np.nonzero(np.abs(rho) > _RHO_TAIL)[0]
    return rho[:int(keep[-1]) + 1] if keep.size else rho[:1]


@dataclass
class NoiseSums:
    """Pooled residual power and degrees of freedom, raw and filtered; all (channels,)."""

    ssr_raw: np.ndarray
    dof_raw: np.ndarray
    ssr_filtered: np.ndarray
    dof_filtered: np.ndarray

    @classmethod
    def zeros(cls, channels: int) -> NoiseSums:
        z = np.zeros(channels)
        return cls(z.copy(), z.copy(), z.copy(), z.copy())

    def add(self, other: NoiseSums) -> None:
        """Pool `other` into these sums."""
        self.ssr_raw += other.ssr_raw
        self.dof_raw += other.dof_raw
        self.ssr_filtered += other.ssr_filtered
        self.dof_filtered += other.dof_filtered

    def noise_raw(self) -> np.ndarray:
        """(channels,) RMS noise of the raw signal in its unit; NaN where nothing counted."""
        return _rms(self.ssr_raw, self.dof_raw)

    def noise_filtered(self) -> np.ndarray:
        """(channels,) RMS noise of the filtered signal in its unit; NaN where nothing counted."""
        return _rms(self.ssr_filtered, self.dof_filtered)

    def reduction_db(self) -> np.ndarray:
        """(channels,) measured noise reduction 20 log10(raw / filtered) in dB."""
        return np.array([reduction_db(r, f) for r, f in
                         zip(self.noise_raw(), self.noise_filtered(), strict=True)])


def _rms(ssr: np.ndarray, dof: np.ndarray) -> np.ndarray:
    return np.sqrt(np.divide(ssr, dof, out=np.full(ssr.shape, np.nan), where=dof > 0))


def reduction_db(noise_raw: float, noise_filtered: float) -> float:
    """20 log10(raw / filtered); inf when the filter removes all noise, 0 when there is
    none, NaN when either is unknown."""
    if math.isnan(noise_raw) or math.isnan(noise_filtered):
        return math.nan
    if noise_filtered > 0:
        return 20.0 * math.log10(noise_raw / noise_filtered) if noise_raw > 0 else -math.inf
    return math.inf if noise_raw > 0 else 0.0


def measure(raw: np.ndarray, filtered: np.ndarray, models: Sequence[ChannelNoiseModel],
            context: int = 0, fresh: bool = False) -> NoiseSums:
    """Residual sums of every channel over raw, filtered: (n, channels) float64.

    The first `context` rows are history: they are searched for steps (a step
    just before the stretch still guards the filtered output) but not counted.
    `fresh`: row 0 is where the chain started (stream start, gap, reset), so the
    chain's start-up is guarded like a step. NaN samples end a piece.
    """
    raw = np.asarray(raw, dtype=float)
    filtered = np.asarray(filtered, dtype=float)
    k = raw.shape[1]
    sums = NoiseSums.zeros(k)
    for c in range(k):
        r, f, model = raw[:, c], filtered[:, c], models[c]
        raw_ok, filtered_ok = _usable(r, f, model.guard, context)
        if fresh:
            filtered_ok[:model.guard] = False
        sums.ssr_raw[c], sums.dof_raw[c] = _pieces_sum(r, raw_ok, model.piece, None)
        sums.ssr_filtered[c], sums.dof_filtered[c] = _pieces_sum(f, filtered_ok, model.piece,
                                                                 model.rho)
        if sums.dof_raw[c] == 0 and sums.dof_filtered[c] == 0:
            # Too few samples for any straight-line piece (a window just opened): the
            # deviation from the mean over what there is, in both signals alike.
            sums.ssr_raw[c], sums.dof_raw[c] = _about_mean(r, context)
            sums.ssr_filtered[c], sums.dof_filtered[c] = _about_mean(f, context)
    return sums


def _about_mean(x: np.ndarray, context: int) -> tuple[float, float]:
    """Sum of squares about the mean of the finite samples after `context`, and their count."""
    x = x[context:]
    x = x[np.isfinite(x)]
    if x.size == 0:
        return 0.0, 0.0
    return float(np.sum((x - x.mean()) ** 2)), float(x.size)


def _usable(raw: np.ndarray, filtered: np.ndarray, guard: int, context: int
            ) -> tuple[np.ndarray, np.ndarray]:
    """(n,) bool masks of the raw and filtered samples that count as noise."""
    n = len(raw)
    finite = np.isfinite(raw) & np.isfinite(filtered)
    steps = _step_zone(raw, finite)
    raw_ok = finite & ~steps
    after = steps.copy()
    if guard > 0 and steps.any():
        # Each step zone's end casts a guard of `guard` samples forward.
        ends = np.nonzero(steps & ~np.append(steps[1:], False))[0]
        marks = np.zeros(n + 1, dtype=np.int64)
        np.add.at(marks, ends + 1, 1)
        np.add.at(marks, np.minimum(ends + 1 + guard, n), -1)
        after |= np.cumsum(marks[:n]) > 0
    filtered_ok = finite & ~after
    raw_ok[:context] = False
    filtered_ok[:context] = False
    return raw_ok, filtered_ok


def _step_zone(x: np.ndarray, finite: np.ndarray) -> np.ndarray:
    """(n,) bool: samples within STEP_HALF of a level change in x."""
    n, m = len(x), STEP_HALF
    zone = np.zeros(n, dtype=bool)
    if n < 2 * m + 1 or not finite.all() and finite.sum() < 2 * m + 1:
        return zone
    values = np.where(finite, x, np.nan)
    diffs = np.diff(values)
    diffs = diffs[np.isfinite(diffs)]
    if diffs.size == 0:
        return zone
    sigma = _MAD_TO_SIGMA * float(np.median(np.abs(diffs - np.median(diffs)))) / math.sqrt(2.0)
    from numpy.lib.stride_tricks import sliding_window_view

    windows = sliding_window_view(values, m)                     # (n - m + 1, m)
    with np.errstate(all="ignore"):
        medians = np.nanmedian(windows, axis=1) if not finite.all() else np.median(windows, axis=1)
    change = np.abs(medians[m:] - medians[:-m])                  # at split points m .. n - m
    # The median of m Gaussian samples has standard error sigma sqrt(pi / (2 m))
    # (large-sample result, common practice); the difference of two, sqrt(pi / m).
    threshold = STEP_SIGMAS * sigma * math.sqrt(math.pi / m)
    # Hum or vibration also moves short medians, by a bounded amount at every
    # period: a step must also stand out of the change statistic's own spread.
    centre = float(np.median(change))
    spread = _MAD_TO_SIGMA * float(np.median(np.abs(change - centre)))
    threshold = max(threshold, centre + STEP_SPREADS * spread)
    hits = np.nonzero(change > threshold)[0] + m if threshold > 0 else np.nonzero(change)[0] + m
    if hits.size:
        marks = np.zeros(n + 1, dtype=np.int64)
        np.add.at(marks, np.maximum(hits - m, 0), 1)
        np.add.at(marks, np.minimum(hits + m, n), -1)
        zone = np.cumsum(marks[:n]) > 0
    return zone


def _pieces_sum(x: np.ndarray, ok: np.ndarray, longest: int, rho: np.ndarray | None
                ) -> tuple[float, float]:
    """Pooled squared residual of straight-line fits over runs of `ok`, and the dof left."""
    ssr = dof = 0.0
    removed_by_length: dict[int, float] = {}
    for start, stop in _runs(ok):
        length = stop - start
        count = math.ceil(length / longest)
        edges = np.linspace(start, stop, count + 1).round().astype(int)
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            n = int(b - a)
            if n < MIN_PIECE:
                continue
            if n not in removed_by_length:
                removed_by_length[n] = _dof_removed(n, rho)
            removed = removed_by_length[n]
            if removed >= n - 1:
                continue
            ssr += _line_residual(x[a:b])
            dof += n - removed
    return ssr, dof


def _runs(ok: np.ndarray) -> list[tuple[int, int]]:
    edges = np.diff(np.concatenate([[0], ok.astype(np.int8), [0]]))
    return list(zip(np.nonzero(edges == 1)[0], np.nonzero(edges == -1)[0], strict=True))


def _line_residual(y: np.ndarray) -> float:
    n = len(y)
    t = np.arange(n) - (n - 1) / 2.0
    centred = y - y.mean()
    slope = float(np.dot(t, centred) / np.dot(t, t))
    residual = centred - slope * t
    return float(np.dot(residual, residual))


def _dof_removed(n: int, rho: np.ndarray | None) -> float:
    """trace(P R) / r0 for a straight-line fit over n samples of noise with autocorrelation
    rho (None: white, exactly 2)."""
    if rho is None or len(rho) == 1:
        return 2.0
    lags = min(len(rho), n)
    k = np.arange(1, lags)
    # Basis 1: the constant 1/sqrt(n); its lag products sum to (n - k) / n.
    const = 1.0 + 2.0 * float(np.sum(rho[1:lags] * (n - k) / n))
    # Basis 2: the centred ramp, normalised; lag products by correlation.
    t = np.arange(n) - (n - 1) / 2.0
    t /= math.sqrt(float(np.dot(t, t)))
    from scipy.signal import fftconvolve

    products = fftconvolve(t, t[::-1])[n - 1:n - 1 + lags]
    ramp = 1.0 + 2.0 * float(np.sum(rho[1:lags] * products[1:]))
    return const + ramp


@dataclass
class NoiseMeter:
    """Session-long measured noise: feed consecutive samples, read pooled figures.

    Samples are measured in chunks of `chunk` rows, each searched for steps with
    the last `context` rows of the one before, so the result depends only on the
    sample sequence, never on how it was split into blocks.
    """

    models: Sequence[ChannelNoiseModel]
    chunk: int
    sums: NoiseSums = field(init=False)
    _raw: list[np.ndarray] = field(init=False, default_factory=list)
    _filtered: list[np.ndarray] = field(init=False, default_factory=list)
    _history: tuple[np.ndarray, np.ndarray] | None = field(init=False, default=None)

    def __post_init__(self) -> None:
        if self.chunk < 4 * MIN_PIECE:
            raise ValueError(f"chunk = {self.chunk} samples is too short; allowed: "
                             f"{4 * MIN_PIECE} or more")
        self.sums = NoiseSums.zeros(len(self.models))
        self._pending = 0
        self._context = max(m.guard for m in self.models) + 2 * STEP_HALF if self.models else 0

    def update(self, raw: np.ndarray, filtered: np.ndarray) -> None:
        """Add rows raw, filtered: (n, channels) float64."""
        start, n = 0, len(raw)
        while start < n:
            take = min(self.chunk - self._pending, n - start)
            self._raw.append(np.array(raw[start:start + take], dtype=float))
            self._filtered.append(np.array(filtered[start:start + take], dtype=float))
            self._pending += take
            start += take
            if self._pending >= self.chunk:
                self._measure()

    def break_here(self) -> None:
        """Samples were lost (a gap): measure what is pending and forget the history."""
        self.flush()
        self._history = None

    def flush(self) -> None:
        """Measure the pending rows now (before a gap)."""
        if self._pending:
            self._measure()

    def total(self) -> NoiseSums:
        """The pooled sums including the rows still pending, without consuming them, so the
        result depends only on the samples fed, not on when it is asked."""
        out = NoiseSums.zeros(len(self.models))
        out.add(self.sums)
        if self._pending:
            raw, filtered, context = self._with_history(np.concatenate(self._raw),
                                                        np.concatenate(self._filtered))
            out.add(measure(raw, filtered, self.models, context, self._history is None))
        return out

    def _with_history(self, raw: np.ndarray, filtered: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray, int]:
        if self._history is None:
            return raw, filtered, 0
        old_raw, old_filtered = self._history
        return (np.concatenate([old_raw, raw]), np.concatenate([old_filtered, filtered]),
                len(old_raw))

    def _measure(self) -> None:
        """Measure every pending row (a whole chunk, or what is left before a gap)."""
        fresh = self._history is None
        raw, filtered, context = self._with_history(np.concatenate(self._raw),
                                                    np.concatenate(self._filtered))
        self._raw, self._filtered, self._pending = [], [], 0
        self.sums.add(measure(raw, filtered, self.models, context, fresh))
        keep = min(self._context, len(raw))
        self._history = (raw[len(raw) - keep:], filtered[len(filtered) - keep:])
