"""The session noise figure does not count what a gap hides as noise.

A hopper fills slowly (the load ramps up) while white noise of a known sigma sits on
the load cell. The link drops for 0.8 s (200 samples at 250 Hz): when it comes back
the ramp has moved on by two sigma, too small to be found as a step. The pipeline
calls SessionNoise.gap() there; the measured figures must then be what the generator
put in, raw sigma and, through an 8-sample moving average, sigma / sqrt(8) (white
noise through an N-tap average, Parseval): a straight-line piece across the gap would
count the hidden two-sigma offset, and the chain's transient over it, as noise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.stats import SessionNoise

RATE_HZ = 250.0
SIGMA = 0.01              # kg
SLOPE = 1e-4              # kg per sample: 0.025 kg/s
LOST = 200                # samples the outage took: 2 sigma of ramp


def session_figures(seed: int, with_gap: bool):
    chain = ChainSet(parse_chain('[[stage]]\nkind = "moving-average"\nwindow = 8\n'),
                     ("load",), RATE_HZ)
    rng = np.random.default_rng(seed)
    meter = SessionNoise()
    before = np.arange(1300)                        # the outage falls inside one chunk
    after = np.arange(1300 + LOST, 5000 + LOST)
    for k in (before, after):
        raw = (20.0 + SLOPE * k + SIGMA * rng.standard_normal(k.size)).reshape(-1, 1)
        for i in range(0, len(raw), 25):              # live-sized blocks
            meter.feed(chain, raw[i:i + 25], chain.process(raw[i:i + 25]))
        if with_gap and k is before:
            meter.gap()
    return meter.figures()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_noise_across_a_gap_is_the_noise_put_in(seed):
    figures = session_figures(seed, with_gap=True)
    # ~5000 samples: the raw sigma estimate is good to about 1 % (1 / sqrt(2 n)); the
    # filtered one, coloured over 8 samples, to about 3 %; tolerances are twice that
    assert figures.noise_raw[0] == pytest.approx(SIGMA, rel=0.02)
    assert figures.noise_filtered[0] == pytest.approx(SIGMA / math.sqrt(8), rel=0.06)
    assert figures.reduction_db[0] == pytest.approx(10 * math.log10(8), abs=0.6)
    assert figures.white_reduction_db[0] == pytest.approx(10 * math.log10(8), abs=1e-9)


def test_without_the_gap_mark_the_offset_would_show():
    # what the test above guards against: the same data with no gap() call
    figures = session_figures(0, with_gap=False)
    assert figures.noise_filtered[0] > 1.1 * SIGMA / math.sqrt(8)
