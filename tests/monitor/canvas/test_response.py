"""The response panel's curves: digital chain and analog prototype overlay."""

from __future__ import annotations

import math

import numpy as np
import pytest

from filters.design import design_stage
from filters.spec import StageSpec
from monitor.canvas.response_panel import chain_curves, magnitude_db, stage_markers

RATE = 250.0


def test_rc_prototype_is_minus_3_db_at_its_cutoff_and_overlaid_past_nyquist():
    r_ohm, c_farad = 10e3, 2.2e-6
    cutoff = 1 / (2 * math.pi * r_ohm * c_farad)   # handbook RC cutoff: 7.23 Hz
    rc = design_stage(StageSpec("rc-lowpass", {"r_ohm": r_ohm, "c_farad": c_farad}), RATE)
    curves = chain_curves([rc], RATE)
    assert curves.analog is not None and curves.analog_freqs[-1] > RATE / 2
    assert curves.freqs[-1] < RATE / 2
    # handbook: |H(j w)| = 1 / sqrt(1 + (w R C)^2), so -3.01 dB at the cutoff
    want = -10 * np.log10(1 + (2 * np.pi * curves.analog_freqs * r_ohm * c_farad) ** 2)
    np.testing.assert_allclose(magnitude_db(curves.analog), want, atol=1e-6)
    k = int(np.argmin(np.abs(curves.freqs - cutoff)))
    # Tustin with prewarping at the cutoff keeps -3 dB there (common practice)
    assert magnitude_db(curves.h)[k] == pytest.approx(-3.01, abs=0.1)
    assert stage_markers([rc]) == [(pytest.approx(cutoff), "fc 7.23 Hz")]


def test_a_digital_only_chain_has_no_overlay_and_an_empty_chain_is_flat():
    median = design_stage(StageSpec("median", {"window": 5}), RATE)
    notch = design_stage(StageSpec("notch", {"freq_hz": 50.0, "q": 30.0}), RATE)
    curves = chain_curves([median, notch], RATE)
    assert curves.analog is None
    k = int(np.argmin(np.abs(curves.freqs - 50.0)))
    assert magnitude_db(curves.h)[k] < -20
    flat = chain_curves([], RATE)
    np.testing.assert_allclose(np.abs(flat.h), 1.0)
