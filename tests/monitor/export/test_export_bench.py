"""Smoke test of the export bench part: callgrind counts of the generated step."""

from __future__ import annotations

import pytest


def test_export_bench_counts_instructions_per_sample(gcc, valgrind):
    from monitor.bench.export import run

    metrics = run(quick=True)
    for key in ("float", "q15"):
        generated = metrics[f"export_{key}_step_instr_per_sample"]
        reference = metrics[f"export_{key}_reference_instr_per_sample"]
        # two biquad sections cost tens of instructions, not one and not thousands
        assert 10 < generated < 1000 and 10 < reference < 1000
        assert metrics[f"export_{key}_instr_ratio"] == generated / reference
        assert isinstance(metrics[f"export_{key}_instr_ok"], bool)
    assert isinstance(metrics["export_instr_ok"], bool)
    # the delta form does more per section (compensated state sums) than plain TDF2
    delta = metrics["export_float_delta_step_instr_per_sample"]
    assert delta > metrics["export_float_step_instr_per_sample"]
    assert metrics["export_float_delta_instr_ratio"] == pytest.approx(
        delta / metrics["export_float_reference_instr_per_sample"])
