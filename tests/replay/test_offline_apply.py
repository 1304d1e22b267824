"""Offline apply: same numbers as the chain on the samples, every input column kept."""

from __future__ import annotations

import numpy as np
import pytest
from replay_helpers import (
    CHAIN_TEXT,
    RATE_HZ,
    SCHEMA,
    data_lines,
    weigh_station,
    write_recording,
)

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from replay.offline import apply_chain
from replay.reader import RecordingError, read_recording

BUTTER_TEXT = """\
[[stage]]
kind = "butterworth"
band = "lowpass"
order = 2
cutoff_hz = 10.0
"""


def table(path) -> tuple[list[str], np.ndarray]:
    lines = data_lines(path)
    return lines[0].split(","), np.loadtxt(lines[1:], delimiter=",", ndmin=2)


def test_apply_equals_the_chain_on_the_original_samples(tmp_path):
    src, out = tmp_path / "rec.csv", tmp_path / "out.csv"
    values = weigh_station(6000)
    write_recording(src, values, gaps_at=(3000,))
    spec = parse_chain(CHAIN_TEXT)
    summary = apply_chain(read_recording(src, chunk_rows=500), spec, out, chain_text=CHAIN_TEXT)
    assert (summary.rows, summary.bad_rows, summary.gaps) == (6000, 0, 1)
    assert (summary.rate_hz, summary.rate_origin) == (RATE_HZ, "recording")
    names, got = table(out)
    assert names == ["t_host", "load", "current", "vib",
                     "load_filtered", "current_filtered", "vib_filtered"]
    np.testing.assert_array_equal(got[:, 1:4], values)
    expected = ChainSet(spec, SCHEMA.channels, RATE_HZ).process(values)
    np.testing.assert_allclose(got[:, 4:], expected, rtol=1e-12, atol=1e-12)
    # input rows are copied as text, the gap line stays where it was
    src_rows = data_lines(src)
    out_rows = data_lines(out)
    assert [r.rsplit(",", 3)[0] for r in out_rows[1:]] == src_rows[1:]
    assert "# gap: reconnected at row 3000" in out.read_text().splitlines()
    assert f"# rate_hz: {RATE_HZ!r} (recording)" in out.read_text()
    assert out.read_text().count("# chain: ") == CHAIN_TEXT.count("\n") - CHAIN_TEXT.count(
        "\n\n")


def test_butterworth_matches_scipy_with_steady_state_start(tmp_path):
    import scipy.signal as signal

    src, out = tmp_path / "rec.csv", tmp_path / "out.csv"
    values = weigh_station(2000)
    write_recording(src, values)
    apply_chain(read_recording(src), parse_chain(BUTTER_TEXT), out)
    _, got = table(out)
    # scipy.signal.butter designs the digital Butterworth by the bilinear transform with
    # prewarping at the cutoff (= tustin-prewarp, the default method); the steady-state
    # start is scipy's sosfilt_zi scaled by the first sample.
    sos = signal.butter(2, 10.0, fs=RATE_HZ, output="sos")
    for k in range(3):
        zi = signal.sosfilt_zi(sos) * values[0, k]
        expected, _ = signal.sosfilt(sos, values[:, k], zi=zi)
        np.testing.assert_allclose(got[:, 4 + k], expected, rtol=1e-9, atol=1e-9)


def test_recorded_filtered_columns_are_replaced(tmp_path):
    src, out = tmp_path / "rec.csv", tmp_path / "out.csv"
    values = weigh_station(300)
    from monitor.block import Block
    from replay.writer import RecordingWriter

    writer = RecordingWriter(src, SCHEMA, "sim://", RATE_HZ, "declared", None,
                             with_filtered=True)
    writer.write_block(Block(np.arange(300) / RATE_HZ, values), values * 0.0)
    writer.close()
    apply_chain(read_recording(src), parse_chain(BUTTER_TEXT), out)
    names, got = table(out)
    assert names == ["t_host", "load", "current", "vib",
                     "load_filtered", "current_filtered", "vib_filtered"]
    assert np.all(got[1:, 4] != 0.0)


def test_plain_csv_with_text_column_and_semicolons(tmp_path):
    src, out = tmp_path / "logger.csv", tmp_path / "out.csv"
    values = weigh_station(400)[:, :1]
    rows = [f"ok;{i * 4};{v!r}" for i, v in enumerate(values[:, 0].tolist())]
    rows[7] = "late;28;oops"
    src.write_text("state;t_ms;load [kg]\n" + "\n".join(rows) + "\n")
    summary = apply_chain(read_recording(src), parse_chain(BUTTER_TEXT), out)
    assert (summary.rows, summary.bad_rows, summary.rate_origin) == (399, 1, "estimated")
    text = out.read_text().splitlines()
    assert text[0] == "state,t_ms,load [kg],load_filtered"       # plain CSV stays plain
    assert text[1].startswith("ok,0,")
    assert len(text) == 400


def test_output_rules(tmp_path):
    src, out = tmp_path / "rec.csv", tmp_path / "out.csv"
    write_recording(src, weigh_station(50))
    spec = parse_chain(BUTTER_TEXT)
    out.write_text("keep me\n")
    with pytest.raises(FileExistsError):
        apply_chain(read_recording(src), spec, out)
    assert out.read_text() == "keep me\n"
    apply_chain(read_recording(src), spec, out, force=True)
    assert len(data_lines(out)) == 51
    with pytest.raises(RecordingError, match="is the input recording"):
        apply_chain(read_recording(src), spec, src, force=True)
    assert len(data_lines(src)) == 51


def test_unknown_rate_and_impossible_chain(tmp_path):
    src, out = tmp_path / "logger.csv", tmp_path / "out.csv"
    src.write_text("time,load\n0,1\n")
    with pytest.raises(RecordingError, match="--rate HZ"):
        apply_chain(read_recording(src), parse_chain(BUTTER_TEXT), out)
    with pytest.raises(ValueError, match="cutoff"):
        apply_chain(read_recording(src), parse_chain(BUTTER_TEXT), out, rate_hz=15.0)
