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
