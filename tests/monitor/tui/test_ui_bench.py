"""Smoke test of bench part "ui" (quick sizes; the targets are judged on full runs only)."""

from __future__ import annotations

import math

from monitor.bench import ui


def test_quick_ui_bench_reports_every_metric():
    metrics = ui.run(quick=True)
    for key in ("ui_cpu_percent_of_core", "ui_process_cpu_percent", "ui_plain_cpu_percent",
                "ui_key_to_chain_ms", "ui_key_to_chain_max_ms", "ui_terminal_bytes_per_s"):
        assert isinstance(metrics[key], float), key
    assert isinstance(metrics["ui_cpu_ok"], bool) and isinstance(metrics["ui_key_ok"], bool)
    assert metrics["ui_exit_status"] == 0 and metrics["ui_plain_exit_status"] == 0
    assert metrics["ui_terminal_bytes_per_s"] > 0              # the UI really drew
    assert metrics["ui_process_cpu_percent"] > 0 and metrics["ui_plain_cpu_percent"] > 0
    assert math.isfinite(metrics["ui_key_to_chain_ms"])       # every key reached the chain
