"""The fixed-point report's figures against scipy: L1 peak gains and response errors.

The quantization report shows, per section, the L1 norm of the impulse response from
the stage input (the worst-case gain that decides headroom and the error bound), and,
per stage, how far the stored coefficients move the response at DC and at the
characteristic frequencies; a move over RESPONSE_ERROR_LIMIT_DB refuses the export.
Both are recomputed here from the integers the report says it stores, with
scipy.signal (sosfilt over a long impulse, sosfreqz), not with the report's own helpers.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from filters.design import design_stage
from filters.fixedpoint import Q15, Q31
from filters.fixedreport import RESPONSE_ERROR_LIMIT_DB, quantization_report
from filters.spec import StageSpec

RATE = 250.0


def design(kind: str, **params):
    return design_stage(StageSpec(kind, params), RATE)


def stored_rows(stage, fmt) -> np.ndarray:
    """(m, 6) scipy rows of the integers the report lists: b0 b1 b2 a1 a2 in Q(F - shift)."""
    rows = []
    for section in stage.sections:
        scale = float(1 << (fmt.frac - section.shift))
        b0, b1, b2, a1, a2 = (c / scale for c in section.coefficients)
        rows.append([b0, b1, b2, 1.0, a1, a2])
    return np.array(rows)


@pytest.mark.parametrize("fmt", [Q15, Q31])
@pytest.mark.parametrize("kind,params", [
    ("butterworth", {"order": 4, "cutoff_hz": 2.0}),       # poles near z = 1: a long tail
    ("rc-lowpass", {"cutoff_hz": 0.5}),
    ("notch", {"freq_hz": 50.0, "q": 30.0}),              # poles near the unit circle
    ("chebyshev1", {"order": 4, "cutoff_hz": 10.0, "ripple_db": 3.0}),
])
def test_section_peak_gains_are_the_l1_norms_scipy_gives(fmt, kind, params):
    report = quantization_report([design(kind, **params)], RATE, "c-" + fmt.name)
    (stage,) = report.channels[0].stages
    rows = stored_rows(stage, fmt)
    radius = max(s.pole_radius for s in stage.sections)
    # scipy.signal.sosfilt on an impulse long enough to decay to 1e-16 of its start
    n = max(4096, int(math.log(1e-16) / math.log(radius)) + 1)
    impulse = np.zeros(n)
    impulse[0] = 1.0
    for i, section in enumerate(stage.sections):
        l1 = float(np.sum(np.abs(signal.sosfilt(rows[: i + 1], impulse))))
        assert section.l1_from_stage_input == pytest.approx(l1, rel=1e-9), i
    assert stage.peak_gain == pytest.approx(max(s.l1_from_stage_input
                                                for s in stage.sections), rel=1e-12)


@pytest.mark.parametrize("cutoff_hz,moves_db", [(1.0, 0.83), (0.5, 3.52)])
def test_a_q15_low_pass_too_slow_for_its_coefficients_is_refused_by_its_response_move(
        cutoff_hz, moves_db):
    # Butterworth-2 at 1 Hz and 0.5 Hz of 250 Hz: |a1| is about 1.96, so Q15 holds it in
    # Q14, and rounding b0 ~ 1.6e-4 (2.7 LSB) moves the DC gain by most of a dB.
    d = design("butterworth", order=2, cutoff_hz=cutoff_hz)
    report = quantization_report([d], RATE, "c-q15")
    (stage,) = report.channels[0].stages
    (section,) = stage.sections
    # the stored integers: round half up in Q14, floor(c * 2^14 + 1/2) (module contract)
    b0, b1, b2, _, a1, a2 = d.sos[0]
    assert section.shift == 1
    assert section.coefficients == tuple(math.floor(c * 2**14 + 0.5)
                                         for c in (b0, b1, b2, a1, a2))
    # the move at DC and at the cutoff: scipy.signal.sosfreqz, stored against designed
    freqs = np.array([0.0, cutoff_hz])
    _, exact = signal.sosfreqz(d.sos, worN=freqs, fs=RATE)
    _, stored = signal.sosfreqz(stored_rows(stage, Q15), worN=freqs, fs=RATE)
    expected = 20 * np.log10(np.abs(stored) / np.abs(exact))
    assert [f for f, _ in stage.response_error_db] == freqs.tolist()
    np.testing.assert_allclose([e for _, e in stage.response_error_db], expected, atol=1e-9)
    assert stage.worst_error_db == pytest.approx(moves_db, abs=0.01)
    assert stage.worst_error_db > RESPONSE_ERROR_LIMIT_DB == 0.5
    assert not report.ok
    assert any(f"move the response by {moves_db:.2f} dB (limit 0.5 dB)" in p
               for p in report.problems)


def test_a_response_move_inside_the_limit_is_no_problem():
    d = design("rc-lowpass", cutoff_hz=5.0)
    report = quantization_report([d], RATE, "c-q15")
    (stage,) = report.channels[0].stages
    _, exact = signal.sosfreqz(d.sos, worN=[0.0, 5.0], fs=RATE)
    _, stored = signal.sosfreqz(stored_rows(stage, Q15), worN=[0.0, 5.0], fs=RATE)
    assert np.max(np.abs(20 * np.log10(np.abs(stored) / np.abs(exact)))) < 0.01
    assert report.ok and not any("move the response" in p for p in report.problems)
