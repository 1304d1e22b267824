"""`tunetrace snapshot`: a recording rendered headless to a PNG, and one-sentence errors."""

from __future__ import annotations

import numpy as np
import pytest
from canvas_pixels import colour_mask, crop, read_png

from monitor.canvas import palette
from monitor.canvas.layout import compute_layout
from monitor.cli import main

CHAIN = """[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0

[[stage]]
kind = "butterworth"
order = 2
cutoff_hz = 8.0
"""


@pytest.fixture()
def recording(tmp_path):
    """A 12 s weigh-station recording at 250 Hz in the recording format of DESIGN.md,
    with the chain it ran stored in its header (invented demo numbers)."""
    rate = 250.0
    n = 3000
    t = np.arange(n) / rate
    rng = np.random.default_rng(1)
    load = 2.0 + 8.0 * (t > 6.0) + 0.2 * np.sin(2 * np.pi * 50 * t) + 0.05 * rng.standard_normal(n)
    current = 1.2 + 0.05 * np.sin(2 * np.pi * 18 * t) + 0.01 * rng.standard_normal(n)
    vib = 0.1 * np.sin(2 * np.pi * 18 * t) + 0.02 * rng.standard_normal(n)
    lines = ["# tunetrace recording 1", "# started: 2026-12-01T21:40:12Z",
             "# source: sim:// (simulated weigh station)", f"# rate_hz: {rate} (declared)",
             "# channels: load [kg], current [A], vib [g]"]
    lines += [f"# chain: {line}".rstrip() for line in CHAIN.splitlines()]
    lines.append("t_host,load,current,vib")
    lines += [f"{a:.6f},{b:.4f},{c:.4f},{d:.4f}" for a, b, c, d in zip(t, load, current, vib,
                                                                        strict=True)]
    path = tmp_path / "weigh.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_snapshot_writes_the_three_panels_to_a_png(headless, recording, tmp_path, capsys):
    out = tmp_path / "plot.png"
    code = main(["snapshot", str(recording), "--start", "4", "--window", "4",
                 "--size", "1024x700", "--channel", "current", "-o", str(out)])
    assert code == 0, capsys.readouterr().err
    assert "wrote" in capsys.readouterr().out
    image = read_png(out)
    assert image.shape[:2] == (700, 1024)
    layout = compute_layout((1024, 700), 3)
    for k, lane in enumerate(layout.lanes):
        assert crop(colour_mask(image, palette.filtered_colour(k)), lane).sum() > 200
        assert crop(colour_mask(image, palette.raw_colour(k)), lane).sum() > 50
    # the spectrum and response panels show the selected channel (current, colour 1)
    for rect in (layout.spectrum, layout.magnitude):
        assert crop(colour_mask(image, palette.filtered_colour(1)), rect).sum() > 200
    # the stored chain was used: its 50 Hz notch is marked in the response panel
    assert crop(colour_mask(image, palette.CUTOFF), layout.magnitude).any(axis=0).sum() >= 2


def test_snapshot_takes_a_chain_file_and_refuses_to_overwrite(headless, recording, tmp_path,
                                                              capsys):
    chain = tmp_path / "smooth.toml"
    chain.write_text('[[stage]]\nkind = "moving-average"\nwindow = 25\n')
    out = tmp_path / "plot.png"
    assert main(["snapshot", str(recording), "--chain", str(chain), "-o", str(out)]) == 0
    first = out.read_bytes()
    capsys.readouterr()
    assert main(["snapshot", str(recording), "--window", "2", "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert "already exists" in err and "--force" in err and len(err.splitlines()) == 1
    assert out.read_bytes() == first
    assert main(["snapshot", str(recording), "--window", "2", "--force", "-o", str(out)]) == 0
    assert out.read_bytes() != first


@pytest.mark.parametrize("args, words", [
    (["{missing}"], "does not exist"),
    (["{rec}", "--size", "12x5"], "--size 12x5 is out of range"),
    (["{rec}", "--size", "wide"], "WIDTHxHEIGHT"),
    (["{rec}", "--start", "60"], "choose an earlier --start"),
    (["{rec}", "--channel", "belt"], "it has load, current, vib"),
    (["{rec}", "--chain", "{missing}"], "does not exist"),
])
def test_bad_input_gives_one_sentence_and_exit_2(recording, tmp_path, capsys, args, words):
    missing = tmp_path / "nothing.csv"
    argv = ["snapshot"] + [a.format(rec=recording, missing=missing) for a in args]
    out = tmp_path / "never.png"
    assert main(argv + ["-o", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert words in err and len(err.splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()
