"""Per-channel statistics of the newest samples: level, noise and noise reduction.

Noise here is the RMS of the deviation from the mean (the AC RMS), so a load
sitting at 12 kg with 0.4 kg of ripple has noise 0.4, and the noise reduction
of a chain is 20 log10(noise_raw / noise_filtered) dB. A window longer than
SEGMENTS * MIN_SEGMENT samples is cut into SEGMENTS equal sub-windows and the
noise is the median of their AC RMS values: a step inside the window (a parcel
landing) then disturbs one or two sub-windows and does not count as noise.
Content slower than a sub-window is treated as signal.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from monitor.ring import Ring, RingSnapshot

ROUNDING = 1e-12              # relative size below which a deviation is float rounding
SEGMENTS = 10                 # sub-windows of a long window (the median resists steps)
MIN_SEGMENT = 16              # samples in a sub-window at the least


@dataclass(frozen=True)
class ChannelStats:
    """One channel over one window. Means and noise in the channel's unit; reduction in dB."""

    mean_raw: float
    mean_filtered: float
    noise_raw: float
    noise_filtered: float
    reduction_db: float
    samples: int


def noise_reduction_db(noise_raw: float, noise_filtered: float) -> float:
    """20 log10(raw / filtered); inf when the filter removes all noise, 0 when there is none."""
    if noise_filtered > 0:
        return 20.0 * math.log10(noise_raw / noise_filtered) if noise_raw > 0 else -math.inf
    return math.inf if noise_raw > 0 else 0.0


def channel_stats(snapshot: RingSnapshot) -> list[ChannelStats]:
    """Statistics of every channel of `snapshot` (NaN samples ignored); [] when it is empty."""
    if len(snapshot) == 0:
        return []
    out = []
    means_raw, means_filtered = _nanmean(snapshot.raw), _nanmean(snapshot.filtered)
    noise_raw = _noise(snapshot.raw)
    noise_filtered = _noise(snapshot.filtered)
    counts = np.sum(~np.isnan(snapshot.raw), axis=0)
    for k in range(snapshot.raw.shape[1]):
        out.append(ChannelStats(
            mean_raw=float(means_raw[k]), mean_filtered=float(means_filtered[k]),
            noise_raw=float(noise_raw[k]), noise_filtered=float(noise_filtered[k]),
            reduction_db=noise_reduction_db(float(noise_raw[k]), float(noise_filtered[k])),
            samples=int(counts[k]),
        ))
    return out


def ring_stats(ring: Ring, samples: int) -> list[ChannelStats]:
    """channel_stats over the newest `samples` of `ring`."""
    return channel_stats(ring.latest(samples))


def _noise(values: np.ndarray) -> np.ndarray:
    """(n, k) -> (k,): AC RMS of the window, or the median over SEGMENTS sub-windows."""
    n = values.shape[0]
    if n < SEGMENTS * MIN_SEGMENT:
        return _ac_rms(values, _nanmean(values))
    size = n // SEGMENTS
    newest = values[n - size * SEGMENTS:]
    per_segment = np.array([_ac_rms(part, _nanmean(part))
                            for part in np.split(newest, SEGMENTS)])   # (SEGMENTS, k)
    with warnings.catch_warnings():      # a channel with no finite sample: NaN, quietly
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmedian(per_segment, axis=0)


def _nanmean(values: np.ndarray) -> np.ndarray:
    finite = ~np.isnan(values)
    counts = finite.sum(axis=0)
    sums = np.where(finite, values, 0.0).sum(axis=0)
    return np.divide(sums, counts, out=np.full(values.shape[1], np.nan), where=counts > 0)


def _ac_rms(values: np.ndarray, means: np.ndarray) -> np.ndarray:
    deviation = values - means
    finite = ~np.isnan(deviation)
    counts = finite.sum(axis=0)
    squares = np.where(finite, deviation * deviation, 0.0).sum(axis=0)
    rms = np.sqrt(np.divide(squares, counts, out=np.full(values.shape[1], np.nan),
                            where=counts > 0))
    # A constant channel's deviations are rounding of the mean, not noise.
    return np.where(rms <= ROUNDING * np.maximum(1.0, np.abs(means)), 0.0, rms)
