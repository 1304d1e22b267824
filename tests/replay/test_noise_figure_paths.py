"""One recording, one chain: replay at any speed and apply give the same noise figures.

The measured noise reduction is defined on sample indices (filters.noise), so the
speed of playback, the block sizes the player cuts, and the offline path must not
move it. Reference for the white figure: Parseval's theorem with h from
scipy.signal.sosfilt of a unit impulse (Oppenheim & Schafer, random signals
through LTI systems); for white noise the measured figure sits on it.
"""

from __future__ import annotations

import re
import subprocess

import numpy as np
import pytest
from replay_helpers import RATE_HZ, tunetrace_cmd, write_recording
from scipy import signal

CHAIN = '[[stage]]\nkind = "butterworth"\norder = 4\ncutoff_hz = 2.0\n'


def stepped_load(seconds: float, seed: int = 4) -> np.ndarray:
    """(n, 3) at 250 Hz: load with a parcel on every other 5 s and white noise 0.1 kg;
    current and vib plain white noise."""
    rng = np.random.default_rng(seed)
    n = int(seconds * RATE_HZ)
    on = (np.arange(n) // int(5 * RATE_HZ)) % 2 == 1
    load = 2.0 + np.where(on, 12.5, 0.0) + 0.1 * rng.standard_normal(n)
    return np.column_stack([load, 1.2 + 0.01 * rng.standard_normal(n),
                            0.005 * rng.standard_normal(n)])


def figures(text: str, label: str) -> tuple[float, float]:
    match = re.search(re.escape(label) + r" (-?[\d.]+)/(-?[\d.]+) dB", text)
    assert match, text
    return float(match.group(1)), float(match.group(2))


def test_replay_speeds_and_apply_give_one_noise_figure(tmp_path):
    src, chain = tmp_path / "parcels.csv", tmp_path / "chain.toml"
    write_recording(src, stepped_load(16.0), chain_text=None)
    chain.write_text(CHAIN)
    seen = {}
    for speed in ("1", "4", "max"):
        result = subprocess.run(tunetrace_cmd("replay", str(src), "--speed", speed, "--plain",
                                              "--chain", str(chain)),
                                capture_output=True, text=True, timeout=180)
        assert result.returncode == 0, result.stderr
        seen[speed] = figures(result.stdout.strip().splitlines()[-1], "load[kg]")
    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain), "-o",
                                          str(tmp_path / "out.csv")),
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    seen["apply"] = figures(result.stdout, "load[kg]")
    measured = [m for m, _ in seen.values()]
    assert max(measured) - min(measured) <= 0.1, seen        # one decimal shown: 0.1 apart
    parseval = -10 * np.log10(np.sum(signal.sosfilt(
        signal.butter(4, 2.0, fs=RATE_HZ, output="sos"), np.r_[1.0, np.zeros(15_000)]) ** 2))
    for m, white in seen.values():
        assert white == pytest.approx(parseval, abs=0.05)
        assert m == pytest.approx(parseval, abs=1.5)     # 16 s of white noise, steps left out
