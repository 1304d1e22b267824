"""Per-channel statistics of the newest samples: level, noise and noise reduction.

Noise is measured by filters.noise: steps (a parcel landing) and ramps are the
signal, the rest is noise, and the filtered signal's noise is not counted
until the chain has settled after a step. The noise reduction of a chain is
20 log10(noise_raw / noise_filtered) dB, measured; beside it stands the
chain's exact white-noise reduction (Parseval), which depends on the chain
only. Windows are counted in samples, so the figures do not depend on the
playback speed or on how the stream was cut into blocks.

SessionNoise pools the measured figure over a whole session (the reader
thread feeds it every block); channel_stats measures one window of the ring.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from filters.noise import (
    ChannelNoiseModel,
    NoiseMeter,
    NoiseSums,
    chain_noise_models,
    measure,
    reduction_db,
)
from monitor.ring import Ring, RingSnapshot

SESSION_CHUNK_S = 10.0        # the session meter measures this much at a time (sample time)

MEASURED_HELP = ("measured noise reduction: raw noise over filtered noise on this data, in "
                 "dB; a parcel's step and a slow ramp are signal, not noise, and the "
                 "filtered signal counts only once the chain has settled after a step")
WHITE_HELP = ("white-noise reduction: what the chain takes off white noise, exactly, "
              "-10 log10(sum h^2) dB (h its impulse response); it depends on the chain only")
FIGURES_HELP = (f"Noise figures, measured/white: the {MEASURED_HELP}; the {WHITE_HELP}. "
                "Well above white: the noise has hum a low-pass removes; well below: "
                "the noise is slow.")


@dataclass(frozen=True)
class ChannelStats:
    """One channel over one window. Means and noise in the channel's unit; reductions in dB.

    reduction_db: measured, 20 log10(noise_raw / noise_filtered).
    white_reduction_db: the chain's exact reduction of white noise, -10 log10(sum h^2).
    """

    mean_raw: float
    mean_filtered: float
    noise_raw: float
    noise_filtered: float
    reduction_db: float
    samples: int
    white_reduction_db: float = 0.0


noise_reduction_db = reduction_db      # 20 log10(raw / filtered), inf/0/NaN at the edges


def format_db(value: float) -> str:
    """A reduction in dB with one decimal; "-" when nothing was measured (NaN), "inf" when
    the filter removed all the noise."""
    return "-" if value != value else f"{value:.1f}"


_model_cache: dict[str, Any] = {"chain": None, "models": []}
_model_lock = threading.Lock()


def chain_models(chain: Any, width: int, rate_hz: float = 1.0) -> list[ChannelNoiseModel]:
    """filters.noise.chain_noise_models, cached for the last chain seen (the table asks
    twice a second). rate_hz sizes the pieces when the chain has no rate of its own."""
    key = (chain, width, None if getattr(chain, "rate_hz", None) else round(rate_hz, 3))
    with _model_lock:
        if _model_cache["chain"] == key:
            return _model_cache["models"]
    models = chain_noise_models(chain, width, rate_hz)
    with _model_lock:
        _model_cache.update(chain=key, models=models)
    return models


def channel_stats(snapshot: RingSnapshot, chain: Any = None, since: int = 0
                  ) -> list[ChannelStats]:
    """Statistics of every channel of `snapshot` (NaN samples ignored); [] when it is empty.

    chain: the ChainSet that made snapshot.filtered (its noise models guard steps and
    give the white-noise figure); None treats filtered as unrelated white-noise data,
    its sample rate taken from the snapshot's host times. since: ring sample index from
    which `chain` filtered (PipelineStatus.chain_since); older rows are left out, and the
    chain's start there is guarded like a step.
    """
    first = snapshot.total - len(snapshot)
    if since > first:
        keep = slice(min(since - first, len(snapshot)), None)
        snapshot = RingSnapshot(snapshot.t_host[keep], snapshot.raw[keep],
                                snapshot.filtered[keep], snapshot.total)
        first = snapshot.total - len(snapshot)
    if len(snapshot) == 0:
        return []
    width = snapshot.raw.shape[1]
    models = chain_models(chain, width, _span_rate(snapshot.t_host))
    fresh = first - since < max(m.guard for m in models)
    sums = measure(snapshot.raw, snapshot.filtered, models, fresh=fresh)
    return _assemble(snapshot.raw, snapshot.filtered, sums, models)


def ring_stats(ring: Ring, samples: int, chain: Any = None, since: int = 0
               ) -> list[ChannelStats]:
    """channel_stats over the newest `samples` of `ring`."""
    return channel_stats(ring.latest(samples), chain, since)


def _span_rate(t: np.ndarray) -> float:
    """Samples per second over the whole span of host times (bursts average out); 1.0
    when the span is empty."""
    span = float(t[-1] - t[0]) if len(t) > 1 else 0.0
    return (len(t) - 1) / span if span > 0 and math.isfinite(span) else 1.0


def _assemble(raw: np.ndarray, filtered: np.ndarray, sums: NoiseSums,
              models: Sequence[ChannelNoiseModel]) -> list[ChannelStats]:
    means_raw, means_filtered = _nanmean(raw), _nanmean(filtered)
    noise_raw, noise_filtered = sums.noise_raw(), sums.noise_filtered()
    counts = np.sum(~np.isnan(raw), axis=0)
    out = []
    for k in range(raw.shape[1]):
        nr, nf = _tidy(noise_raw[k], means_raw[k]), _tidy(noise_filtered[k], means_filtered[k])
        out.append(ChannelStats(
            mean_raw=float(means_raw[k]), mean_filtered=float(means_filtered[k]),
            noise_raw=nr, noise_filtered=nf, reduction_db=reduction_db(nr, nf),
            samples=int(counts[k]), white_reduction_db=models[k].white_reduction_db,
        ))
    return out


def _tidy(noise: float, mean: float) -> float:
    """A constant channel's residuals are rounding of its level, not noise."""
    if math.isfinite(noise) and noise <= 1e-12 * max(1.0, abs(mean)):
        return 0.0
    return float(noise)


def _nanmean(values: np.ndarray) -> np.ndarray:
    finite = ~np.isnan(values)
    counts = finite.sum(axis=0)
    sums = np.where(finite, values, 0.0).sum(axis=0)
    return np.divide(sums, counts, out=np.full(values.shape[1], np.nan), where=counts > 0)


@dataclass(frozen=True)
class SessionFigures:
    """Measured noise figures pooled over the session so far, per channel (dB, unit).

    samples: samples measured with the current chain (the figure restarts when the chain
    is replaced or redesigned).
    """

    reduction_db: tuple[float, ...]
    white_reduction_db: tuple[float, ...]
    noise_raw: tuple[float, ...]
    noise_filtered: tuple[float, ...]
    samples: int


class SessionNoise:
    """The session's measured noise reduction, fed by the reader thread, read by any thread.

    feed() every block that went through a running chain; gap() where samples were lost.
    A new chain object (replaced, redesigned, fallen back to raw) starts a new figure.
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._chain: Any = None
        self._meter: NoiseMeter | None = None
        self._samples = 0

    def feed(self, chain: Any, raw: np.ndarray, filtered: np.ndarray) -> None:
        """Add one block. raw, filtered: (n, channels) float64."""
        with self._lock:
            if chain is not self._chain or self._meter is None:
                models = chain_models(chain, raw.shape[1])
                rate = float(getattr(chain, "rate_hz", 0.0) or 1.0)
                chunk = max(int(SESSION_CHUNK_S * rate), 64)
                self._chain, self._meter, self._samples = chain, NoiseMeter(models, chunk), 0
            self._meter.update(raw, filtered)
            self._samples += len(raw)

    def gap(self) -> None:
        """Samples were lost here: no piece spans the gap, the chain's restart is guarded."""
        with self._lock:
            if self._meter is not None:
                self._meter.break_here()

    def figures(self) -> SessionFigures | None:
        """The pooled figures including samples not yet measured; None before any sample."""
        with self._lock:
            if self._meter is None:
                return None
            meter = self._meter
            sums = meter.total()
            return SessionFigures(
                reduction_db=tuple(float(v) for v in sums.reduction_db()),
                white_reduction_db=tuple(m.white_reduction_db for m in meter.models),
                noise_raw=tuple(float(v) for v in sums.noise_raw()),
                noise_filtered=tuple(float(v) for v in sums.noise_filtered()),
                samples=self._samples,
            )
