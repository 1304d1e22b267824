"""`tunetrace snapshot` follows the shared time-column rule and the rate order of apply and
replay (--rate, the file's own, the chain's rate_hz)."""

from __future__ import annotations

import numpy as np

from monitor.cli import main

CHAIN = """rate_hz = 100.0

[[stage]]
kind = "butterworth"
order = 2
cutoff_hz = 8.0
"""


def _load(n: int) -> list[float]:
    """Load-cell readings [kg]: a parcel step with noise (demo numbers)."""
    rng = np.random.default_rng(4)
    return (np.where(np.arange(n) >= n // 2, 14.5, 2.0) + 0.05 * rng.normal(size=n)).tolist()


def test_snapshot_takes_t_ms_as_time(headless, tmp_path, capsys):
    src, out = tmp_path / "logger.csv", tmp_path / "plot.png"
    values = _load(1000)
    src.write_text("load [kg],T_MS\n" + "".join(f"{v!r},{4 * i}\n" for i, v in
                                                enumerate(values)))
    assert main(["snapshot", str(src), "--window", "1", "-o", str(out)]) == 0
    # 1 s of rows 4 ms apart: 250 samples, and T_MS is time, not a channel
    assert capsys.readouterr().out.endswith("250 samples of load)\n")


def test_snapshot_without_a_time_column_runs_at_the_chains_rate(headless, tmp_path, capsys):
    src, out, chain = tmp_path / "logger.csv", tmp_path / "plot.png", tmp_path / "c.toml"
    src.write_text("load [kg]\n" + "".join(f"{v!r}\n" for v in _load(500)))
    chain.write_text(CHAIN)
    assert main(["snapshot", str(src), "--chain", str(chain), "--window", "1",
                 "-o", str(out)]) == 0
    assert capsys.readouterr().out.endswith("100 samples of load)\n")
    chain.write_text(CHAIN.replace("rate_hz = 100.0\n", ""))
    assert main(["snapshot", str(src), "--chain", str(chain), "-o", str(out), "--force"]) == 2
    assert "--rate HZ" in capsys.readouterr().err
