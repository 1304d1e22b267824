"""`tunetrace design --target`: the export quantization report beside the design."""

from __future__ import annotations

import json

from monitor.cli import main

CHAIN = """
rate_hz = 250.0
[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 1.0
channels = ["load"]
[[stage]]
kind = "ema"
alpha = 0.2
"""


def test_design_target_prints_the_quantization_report(tmp_path, capsys):
    path = tmp_path / "slow.toml"
    path.write_text(CHAIN)
    assert main(["design", str(path), "--target", "c-q15"]) == 0
    out = capsys.readouterr().out
    assert "Quantization for c-q15 at 250 Hz" in out
    assert "channel load" in out and "stage 1: butterworth" in out and "stage 2: ema" in out
    assert "PROBLEM" in out and "suggested fix: use --target c-q31" in out
    assert main(["design", str(path), "--target", "c-q31", "--json"]) == 0
    report = json.loads(capsys.readouterr().out)["quantization"]
    assert report["target"] == "c-q31" and report["ok"] is True
    assert set(report["channels"]) == {"load", "other channels"}
    assert main(["design", str(path)]) == 0
    assert "Quantization" not in capsys.readouterr().out


def test_design_target_c_float_states_structure_vector_error_and_dc_gain(tmp_path, capsys):
    path = tmp_path / "slow.toml"
    path.write_text(CHAIN.replace("250.0", "1000.0"))
    assert main(["design", str(path), "--target", "c-float"]) == 0
    out = capsys.readouterr().out
    assert "Quantization for c-float at 1000 Hz" in out
    assert "biquad structure: delta form" in out and "of peak (tolerance 1e-05)" in out
    assert "DC gain" in out and "c-float holds this chain." in out
    assert main(["design", str(path), "--target", "c-float", "--json"]) == 0
    report = json.loads(capsys.readouterr().out)["quantization"]
    load = report["channels"]["load"]
    assert report["ok"] is True and report["tolerance"] == 1e-5
    assert load["structure"] == "delta" and load["vector_error_of_peak"] < 1e-5
    # handbook: a Butterworth low-pass has unity DC gain (times the EMA's, also 1)
    assert abs(load["dc_gain"] - 1.0) < 1e-5 and abs(load["dc_gain_designed"] - 1.0) < 1e-9
