"""Bench part "filters": a chain run block by block against one scipy.signal.sosfilt call.

Data: 8 channels at 1 kHz, 10 minutes (600 000 samples per channel; the quick
run uses 20 000), weigh-station-like: an offset, parcel steps, 50 Hz pickup,
white noise and rare spikes. Blocks are 10 ms of samples (10 per block), as a
live serial read hands them over.

Chain: median(5) + notch (50 Hz, q 30) + Butterworth low-pass order 4 at 8 Hz.
The IIR part (notch + Butterworth, 3 sections) is also run alone through
ChainSet, block by block, and compared with the reference measured in the same
run on the same data: one scipy.signal.sosfilt call over the whole (n, 8)
array with the same sections and the same steady start. Both results are
compared too (they must agree to float rounding).

Target: the block-wise IIR part reaches >= 0.5 of the reference's speed.
Samples are counted per channel (rows x channels).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from filters.chainset import ChainSet
from filters.spec import ChainSpec, StageSpec
from monitor.bench import best_of

TARGET_RATIO = 0.5
RATE_HZ = 1000.0
CHANNELS = 8
BLOCK = 10
MEDIAN = StageSpec("median", {"window": 5})
NOTCH = StageSpec("notch", {"freq_hz": 50.0, "q": 30.0})
LOWPASS = StageSpec("butterworth", {"order": 4, "cutoff_hz": 8.0})


def _weigh_data(n: int) -> np.ndarray:
    """(n, CHANNELS) float64 test signal in kg (invented demo numbers)."""
    rng = np.random.default_rng(11)
    t = np.arange(n) / RATE_HZ
    x = 12.0 + np.cumsum(rng.random((n, CHANNELS)) < 0.0005, axis=0) * 2.5
    x += 0.3 * np.sin(2 * np.pi * 50.0 * t)[:, None] + 0.05 * rng.standard_normal(x.shape)
    x[rng.random(x.shape) < 0.001] += 8.0
    return x


def _blockwise(spec: ChainSpec, blocks: list[np.ndarray]) -> Callable[[], np.ndarray]:
    names = [f"ch{i}" for i in range(CHANNELS)]

    def work() -> np.ndarray:
        chain = ChainSet(spec, names, RATE_HZ)
        process = chain.process
        last = None
        for block in blocks:
            last = process(block)
        return last

    return work


def run(quick: bool) -> dict[str, float | int | str | bool]:
    """Metrics: filters_iir_block_samples_per_s, filters_iir_reference_samples_per_s,
    filters_iir_ratio (block / reference speed), filters_iir_ratio_ok (>= 0.5; full runs
    only), filters_iir_max_abs_diff, filters_iir_ratio_100 (100-sample blocks),
    filters_chain_samples_per_s (median + notch + Butterworth, 10-sample blocks)."""
    from scipy.signal import sosfilt, sosfilt_zi

    n = 20_000 if quick else 600_000
    repeats = 1 if quick else 3
    x = _weigh_data(n)
    samples = x.size
    blocks = [x[i:i + BLOCK] for i in range(0, n, BLOCK)]
    iir = ChainSpec((NOTCH, LOWPASS))

    chain = ChainSet(iir, [f"ch{i}" for i in range(CHANNELS)], RATE_HZ)
    sos = np.vstack([design.sos for design in chain.designs])
    zi = sosfilt_zi(sos)[:, :, None] * x[0][None, None, :]
    reference_s = best_of(repeats, lambda: sosfilt(sos, x, axis=0, zi=zi))
    block_s = best_of(repeats, _blockwise(iir, blocks))

    wide = [x[i:i + 100] for i in range(0, n, 100)]
    wide_s = best_of(repeats, _blockwise(iir, wide))
    chain_s = best_of(repeats, _blockwise(ChainSpec((MEDIAN, NOTCH, LOWPASS)), blocks))

    filtered = np.vstack([chain.process(block) for block in blocks])
    reference, _ = sosfilt(sos, x, axis=0, zi=zi)
    ratio = reference_s / block_s
    return {
        "filters_iir_block_samples_per_s": samples / block_s,
        "filters_iir_reference_samples_per_s": samples / reference_s,
        "filters_iir_ratio": ratio,
        "filters_iir_ratio_ok": bool(ratio >= TARGET_RATIO) if not quick else True,
        "filters_iir_max_abs_diff": float(np.abs(filtered - reference).max()),
        "filters_iir_ratio_100": reference_s / wide_s,
        "filters_chain_samples_per_s": samples / chain_s,
    }
