"""Budgets of filters: window lengths, the memory of stage histories, numeric ranges.

Each limit is stated with its derivation beside it (filters.limits, filters.stages,
filters.checks); these tests hold the runtimes to the memory those derivations promise
and check that what lies inside the limits still computes what scipy computes.
"""

from __future__ import annotations

import math
import re
import tracemalloc

import numpy as np
import pytest
from scipy import signal

from filters.chainset import ChainSet
from filters.design import design_stage
from filters.prototypes import rc_cutoff_hz, rl_cutoff_hz, rlc_centre_q
from filters.spec import ChainSpec, StageSpec
from filters.stages import (
    MAX_AVERAGE_WINDOW,
    MAX_HISTORY_BYTES,
    MAX_MEDIAN_WINDOW,
    MEDIAN_WORK_VALUES,
    FirStage,
    MedianStage,
)

RATE = 250.0


def _peak_bytes(action) -> int:
    """Peak bytes numpy and Python allocate during action() (numpy reports its buffers
    to tracemalloc)."""
    tracemalloc.start()
    try:
        action()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_fir_steady_state_is_scipys_without_its_square_matrix():
    rng = np.random.default_rng(3)
    for taps in (2, 3, 17, 400):
        fir = rng.normal(size=taps)
        design = design_stage(StageSpec("moving-average", {"window": 5}), RATE)
        stage = FirStage(type(design)(**{**design.__dict__, "fir": fir}), 1)
        # the reference: scipy.signal.lfilter_zi for b = fir, a = [1]
        assert np.allclose(stage.unit_state, signal.lfilter_zi(fir, [1.0]), rtol=1e-12,
                           atol=1e-12)
    # the longest average builds with O(taps) memory, not lfilter_zi's (taps-1)^2 matrix
    longest = design_stage(StageSpec("moving-average", {"window": MAX_AVERAGE_WINDOW}), RATE)
    assert _peak_bytes(lambda: FirStage(longest, 4)) < 8 * 1024 * 1024
    y = FirStage(longest, 1).process(np.full((50, 1), 3.0))
    assert np.allclose(y, 3.0)                  # steady at the first sample: no ramp


def test_median_of_long_blocks_works_in_bounded_pieces():
    window, width, rows = MAX_MEDIAN_WINDOW, 8, 3000
    design = design_stage(StageSpec("median", {"window": window}), RATE)
    rng = np.random.default_rng(5)
    x = rng.normal(size=(rows, width))
    stage = MedianStage(design, width, start="zero")
    result = {}
    peak = _peak_bytes(lambda: result.setdefault("y", stage.process(x)))
    # the reference: numpy's median over every window of [zero history; x]
    padded = np.vstack([np.zeros((window - 1, width)), x])
    expected = np.median(np.lib.stride_tricks.sliding_window_view(padded, window, axis=0),
                         axis=-1)
    assert np.array_equal(result["y"], expected)
    # one piece copies at most MEDIAN_WORK_VALUES (plus a row), never window x rows x width
    # (1001 x 3000 x 8 values = 192 MB)
    assert peak < 8 * (MEDIAN_WORK_VALUES + window * width) + 4 * 8 * (rows + window) * width


@pytest.mark.parametrize(("kind", "largest"), [("moving-average", MAX_AVERAGE_WINDOW),
                                               ("median", MAX_MEDIAN_WINDOW)])
def test_windows_beyond_their_budget_are_refused_by_name(kind, largest):
    design_stage(StageSpec(kind, {"window": largest}), RATE)
    with pytest.raises(ValueError, match=f"window = {largest + 2} is more than the {largest}"):
        design_stage(StageSpec(kind, {"window": largest + 2}), RATE)


def test_chain_histories_beyond_their_budget_are_refused_before_allocation():
    spec = ChainSpec((StageSpec("moving-average", {"window": MAX_AVERAGE_WINDOW}),))
    # 2 x 10 000 values x 8 bytes per channel: 160 kB; 64 MiB holds 419 channels
    fits = MAX_HISTORY_BYTES // (2 * MAX_AVERAGE_WINDOW * 8)
    ChainSet(spec, [f"c{i}" for i in range(fits)], RATE)
    channels = [f"c{i}" for i in range(fits + 1)]
    peak = _peak_bytes(lambda: pytest.raises(ValueError, ChainSet, spec, channels, RATE))
    assert peak < 16 * 1024 * 1024
    with pytest.raises(ValueError, match=r"need 64 MiB, more than the 64 MiB allowed"):
        ChainSet(spec, channels, RATE)


def test_component_formulas_are_the_handbooks_inside_the_float_range_and_safe_outside():
    # RC cutoff 1/(2 pi R C), RL R/(2 pi L), series RLC f0 = 1/(2 pi sqrt(LC)),
    # Q = sqrt(L/C)/R (any electronics handbook), to the last digit where they fit
    assert rc_cutoff_hz(1e3, 1e-6) == 1 / (2 * math.pi * 1e3 * 1e-6)
    assert rl_cutoff_hz(10.0, 1e-3) == 10.0 / (2 * math.pi * 1e-3)
    assert rlc_centre_q(10.0, 1e-3, 1e-6) == (1 / (2 * math.pi * math.sqrt(1e-9)),
                                              math.sqrt(1e-3 / 1e-6) / 10.0)
    # where R C leaves the float range the plain product raises or rounds to 0
    assert rc_cutoff_hz(1e-200, 1e-200) == math.inf
    assert rc_cutoff_hz(1e200, 1e200) == 0.0
    assert rlc_centre_q(1e300, 1e-300, 1e-300)[0] == pytest.approx(1 / (2 * math.pi * 1e-300))


@pytest.mark.parametrize(("kind", "params", "fragment"), [
    ("rc-lowpass", {"r_ohm": 1e200, "c_farad": 1e-6}, "below the lowest allowed"),
    ("ema", {"alpha": 1e-300}, "alpha = 1e-300 gives a cutoff of"),
    ("notch", {"freq_hz": 50.0, "q": 1e300}, "q = 1e+300 gives a notch bandwidth"),
    ("second-order-lowpass", {"cutoff_hz": 10.0, "q": 1e-300}, "outside the allowed range"),
    ("chebyshev1", {"order": 4, "cutoff_hz": 10.0, "ripple_db": 1e300}, "ripple_db"),
    ("gain", {"scale": 1e308}, "scale = 1e+308"),
    ("gain", {"scale": 10**400}, "must be a finite number"),
])
def test_values_beyond_the_computable_range_are_refused_by_name(kind, params, fragment):
    with pytest.raises(ValueError, match=re.escape(fragment)):
        design_stage(StageSpec(kind, params), RATE)


@pytest.mark.parametrize("rate", [1e308, 1e-308, 2e9])
def test_sample_rates_beyond_any_link_are_refused(rate):
    with pytest.raises(ValueError, match="rate_hz .* outside the allowed range"):
        design_stage(StageSpec("ema", {"alpha": 0.5}), rate)


def test_the_lowest_allowed_cutoff_still_designs_a_stable_filter():
    # 1e-6 of the rate: the poles' 1 + a1 + a2 = d^2 is still far above rounding
    design = design_stage(StageSpec("butterworth", {"order": 10, "cutoff_hz": 1.0001e-6 * RATE}),
                          RATE)
    assert np.all(np.abs(np.roots(np.r_[1.0, design.sos[0, 4:]])) < 1)
    with pytest.raises(ValueError, match="lowest allowed"):
        design_stage(StageSpec("butterworth", {"order": 10, "cutoff_hz": 0.99e-6 * RATE}), RATE)
