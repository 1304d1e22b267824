"""Smoke test of `tunetrace bench --render` (quick sizes; targets are judged on full runs)."""

from __future__ import annotations

import pytest
from conftest import need


@pytest.mark.slow
def test_render_bench_reports_frame_rates_and_their_ratio():
    from monitor.bench import render

    try:
        metrics = render.run(quick=True)
    except OSError as exc:
        need("headless OpenGL (EGL)", False, str(exc))
    assert metrics["render_fps"] > 0 and metrics["render_undecimated_fps"] > 0
    assert metrics["render_speedup"] == pytest.approx(
        metrics["render_fps"] / metrics["render_undecimated_fps"])
    assert isinstance(metrics["render_fps_ok"], bool)
    assert isinstance(metrics["render_speedup_ok"], bool)
    assert metrics["render_window_samples_per_channel"] == 60_000
