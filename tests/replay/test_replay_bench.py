"""Smoke test of the replay bench part (targets are judged on full runs, not here)."""

from __future__ import annotations

from monitor.bench import replay as bench


def test_quick_bench_reports_every_metric():
    metrics = bench.run(quick=True)
    assert metrics["replay_file_lines"] == bench.QUICK_LINES
    for key in ("apply_lines_per_s", "apply_reference_lines_per_s", "apply_ratio",
                "apply_peak_rss_mb", "apply_reference_peak_rss_mb", "replay_max_lines_per_s"):
        assert isinstance(metrics[key], float) and metrics[key] > 0, key
    for key in ("apply_ratio_ok", "apply_memory_ok", "replay_ok"):
        assert isinstance(metrics[key], bool), key
    # peak RSS is per child process: a Python with numpy and scipy is tens of MB
    assert 20 < metrics["apply_peak_rss_mb"] < 2000


def test_bench_recording_is_a_valid_recording(tmp_path):
    from replay.reader import read_recording

    path = tmp_path / "b.csv"
    skip = bench.write_bench_recording(str(path), 1234, channels=3)
    rec = read_recording(path)
    assert rec.schema.channels == ("ch0", "ch1", "ch2")
    assert rec.rate() == (bench.RATE_HZ, "recording")
    assert sum(len(b) for b in rec.blocks()) == 1234
    assert path.read_text().splitlines()[skip - 1].startswith("t_host,")
