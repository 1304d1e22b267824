"""The float model of the exported C: both biquad structures against scipy.signal, the
float32 DC gain problem of plain TDF2 near z = 1, and the report's float figures."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from filters.design import design_stage
from filters.fixedpoint import plan_stage
from filters.fixedreport import FLOAT_TOLERANCE, quantization_report
from filters.float32model import (
    FloatChainModel,
    float_figures,
    reference_output,
    rows_response,
    section_poles,
    section_rows,
)
from filters.spec import StageSpec


def design(kind: str, rate: float, **params):
    return design_stage(StageSpec(kind, params), rate)


def weigh_load(n: int, rate: float, seed: int = 3) -> np.ndarray:
    """Load-cell-like input (kg): 12 kg, parcels as steps, 18 Hz belt, 50 Hz mains, noise,
    one spike; float32-exact like the export's vectors."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    x = 12.0 + 3.5 * (t > 0.3 * t[-1]) - 2.0 * (t > 0.7 * t[-1]) \
        + 0.3 * np.sin(2 * np.pi * 18 * t) + 0.2 * np.sin(2 * np.pi * 50 * t) \
        + 0.05 * rng.standard_normal(n)
    x[n // 2] += 4.0
    return x.astype(np.float32).astype(np.float64)


@pytest.mark.parametrize("sos", [
    signal.butter(4, 1.0, fs=1000.0, output="sos"),
    signal.butter(4, 110.0, fs=250.0, output="sos"),
    signal.cheby1(2, 0.5, [10.0, 30.0], btype="bandpass", fs=250.0, output="sos"),
    signal.tf2sos(*signal.iirnotch(50.0, 30.0, fs=250.0)),
    signal.butter(2, 0.5, btype="highpass", fs=1000.0, output="sos"),
])
def test_delta_table_is_the_same_filter_as_scipy_designs_it(sos):
    # scipy.signal.freqz_sos and tf2zpk are the references for response and poles
    freqs = np.array([0.0, 0.3, 1.0, 7.0, 30.0, 50.0, 100.0])
    _, want = signal.freqz_sos(sos, worN=freqs, fs=1000.0)
    for structure in ("tdf2", "delta"):
        got = rows_response(section_rows(sos, structure), structure, freqs, 1000.0)
        assert np.allclose(got, want, rtol=1e-9, atol=1e-12), structure
    for row, table in zip(sos, section_rows(sos, "delta"), strict=True):
        _, poles, _ = signal.tf2zpk(row[:3], row[3:])
        got = np.sort_complex(section_poles(table, "delta"))
        assert np.allclose(got, np.sort_complex(poles), atol=1e-10)


@pytest.mark.parametrize("structure", ["tdf2", "delta"])
@pytest.mark.parametrize("rate,params", [(250.0, {"order": 4, "cutoff_hz": 20.0}),
                                         (1000.0, {"order": 4, "cutoff_hz": 1.0})])
def test_float64_model_equals_scipy_sosfilt(structure, rate, params):
    d = design("butterworth", rate, **params)
    x = weigh_load(3000, rate)
    got = FloatChainModel([plan_stage(d)], structure, np.float64).process(x)
    sos = signal.butter(params["order"], params["cutoff_hz"], fs=rate, output="sos")
    want = signal.sosfilt(sos, x, zi=signal.sosfilt_zi(sos) * x[0])[0]   # steady start
    assert np.max(np.abs(got - want)) <= 1e-11 * np.max(np.abs(want))


def test_plain_float32_loses_the_dc_gain_near_z_1_and_the_delta_form_keeps_it():
    # handbook: a Butterworth low-pass has |H(0)| = 1 (scipy.signal.butter designs it)
    plans = [plan_stage(design("butterworth", 1000.0, order=4, cutoff_hz=1.0))]
    x = weigh_load(4000, 1000.0)
    plain = float_figures(plans, x, "tdf2")
    delta = float_figures(plans, x, "delta")
    assert plain.dc_gain_design == pytest.approx(1.0, abs=1e-12)
    assert plain.dc_settled and delta.dc_settled
    assert abs(plain.dc_gain_model - 1.0) > 1e-3           # measured: 0.99858
    assert abs(delta.dc_gain_model - 1.0) < 1e-6
    assert plain.vector_error > 1e-4 and delta.vector_error < 1e-6


def test_moving_average_median_gain_and_missing_samples_in_float32():
    plans = [plan_stage(design(k, 250.0, **p), start) for k, p, start in (
        ("median", {"window": 5}, "steady"), ("moving-average", {"window": 8}, "steady"),
        ("gain", {"scale": -2.5, "offset": 0.75}, "steady"),
        ("ema", {"alpha": 0.2}, "zero"))]
    x = weigh_load(2000, 250.0)
    got = FloatChainModel(plans).process(x)
    # numpy and scipy (median of a padded window, convolve, sosfilt) as the reference
    pad = np.concatenate([np.full(4, x[0]), x])
    v = np.median(np.lib.stride_tricks.sliding_window_view(pad, 5), axis=1)
    v = np.convolve(np.concatenate([np.full(7, v[0]), v]), np.full(8, 1 / 8), mode="valid")
    v = -2.5 * v + 0.75
    want = signal.lfilter([0.2], [1.0, -0.8], v)              # ema from rest
    assert np.max(np.abs(got - want)) < 1e-5 * np.max(np.abs(want))
    assert np.allclose(reference_output(plans, x), want, rtol=1e-12, atol=1e-12)
    holes = x.copy()
    holes[[10, 11, 500]] = [np.nan, np.inf, np.nan]
    out = FloatChainModel(plans).process(holes)
    assert np.isnan(out[10]) and np.isinf(out[11]) and np.isnan(out[500])
    # the stages saw the last finite input instead of the holes
    filled = holes.copy()
    filled[[10, 11, 500]] = holes[[9, 9, 499]]
    ok = np.isfinite(holes)
    assert np.array_equal(out[ok], FloatChainModel(plans).process(filled)[ok])


def test_report_picks_the_structure_and_states_the_figures():
    d = design("butterworth", 1000.0, order=4, cutoff_hz=1.0)
    report = quantization_report({"load": [d]}, 1000.0, "c-float")
    assert report.ok and report.tolerance == FLOAT_TOLERANCE["c-float"] == 1e-5
    (ch,) = report.channels
    assert ch.structure == "delta" and ch.plain is not None and not ch.plain.holds(1e-5)
    text = report.format_text()
    assert "biquad structure: delta form" in text and "c-float holds this chain." in text
    assert "DC gain" in text and "tolerance 1e-05" in text
    summary = report.to_dict()["channels"]["load"]
    assert summary["structure"] == "delta" and summary["vector_error_of_peak"] < 1e-6
    from filters.fixedreport import report_for_plans

    forced = report_for_plans({"load": [plan_stage(d)]}, 1000.0, "c-float", structure="tdf2")
    assert not forced.ok and "of peak on the test vectors" in forced.problems[0]
    assert "use --double" in forced.suggestion and "decimating" in forced.suggestion
    easy = quantization_report([design("butterworth", 250.0, order=4, cutoff_hz=20.0)],
                               250.0, "c-float")
    assert easy.ok and easy.channels[0].structure == "tdf2"    # the cheaper form holds
    with pytest.raises(ValueError, match="structure = 'df2'"):
        report_for_plans({"load": [plan_stage(d)]}, 1000.0, "c-float", structure="df2")
    double = quantization_report([d], 1000.0, "c-double")
    assert double.ok and double.tolerance == 1e-12
