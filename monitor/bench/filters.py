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
compared too (they must agree to float rounding). Each round runs every
contender in turn, so all see the same machine load; the best of 3 rounds counts.

Target: the block-wise IIR part reaches >= 0.5 of the reference's speed.
Samples are counted per channel (rows x channels).
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from filters.chainset import ChainSet
from filters.spec import ChainSpec, StageSpec

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


def _interleaved(repeats: int, contenders: dict[str, Callable[[], object]]) -> dict[str, float]:
    """Best wall time (s) of each contender over `repeats` rounds, every round running all
    contenders in turn, so that each sees the same machine load."""
    best = dict.fromkeys(contenders, float("inf"))
    for _ in range(repeats):
        for name, work in contenders.items():
            start = time.perf_counter()
            work()
            best[name] = min(best[name], time.perf_counter() - start)
    return best


def _blockwise(spec: ChainSpec, x: np.ndarray, block: int) -> Callable[[], object]:
    """A fresh ChainSet fed all of x in blocks of `block` samples, one process() each."""
    names = [f"ch{i}" for i in range(CHANNELS)]
    blocks = [x[i:i + block] for i in range(0, len(x), block)]

    def work() -> None:
        process = ChainSet(spec, names, RATE_HZ).process
        for piece in blocks:
            process(piece)

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
    iir = ChainSpec((NOTCH, LOWPASS))
    chain = ChainSet(iir, [f"ch{i}" for i in range(CHANNELS)], RATE_HZ)
    sos = np.vstack([design.sos for design in chain.designs])
    zi = sosfilt_zi(sos)[:, :, None] * x[0][None, None, :]
    seconds = _interleaved(repeats, {
        "reference": lambda: sosfilt(sos, x, axis=0, zi=zi),
        "iir": _blockwise(iir, x, BLOCK),
        "iir_100": _blockwise(iir, x, 100),
        "chain": _blockwise(ChainSpec((MEDIAN, NOTCH, LOWPASS)), x, BLOCK),
    })

    filtered = np.vstack([chain.process(x[i:i + BLOCK]) for i in range(0, n, BLOCK)])
    expected, _ = sosfilt(sos, x, axis=0, zi=zi)
    ratio = seconds["reference"] / seconds["iir"]
    return {
        "filters_iir_block_samples_per_s": samples / seconds["iir"],
        "filters_iir_reference_samples_per_s": samples / seconds["reference"],
        "filters_iir_ratio": ratio,
        "filters_iir_ratio_ok": bool(ratio >= TARGET_RATIO) if not quick else True,
        "filters_iir_max_abs_diff": float(np.abs(filtered - expected).max()),
        "filters_iir_ratio_100": seconds["reference"] / seconds["iir_100"],
        "filters_chain_samples_per_s": samples / seconds["chain"],
    }
