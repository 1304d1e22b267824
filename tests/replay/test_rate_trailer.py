"""The closing rate_hz_measured trailer: written on close, preferred by the reader to an
estimated header rate, ignored when torn or missing."""

from __future__ import annotations

import numpy as np
import pytest

from monitor.block import Block, Schema
from replay.header import parse_rate_trailer
from replay.reader import read_recording
from replay.writer import RecordingWriter

SCHEMA = Schema(("load", "current"), ("kg", "A"))


def write(path, rate_header, origin, rate_true=250.0, seconds=4.0, backlog=300, gap_at=None):
    """A recording whose blocks arrive like a live read loop: a backlog block at open, then
    one block per 20 ms at rate_true (the reference), optionally a gap and a pause."""
    writer = RecordingWriter(path, SCHEMA, "test board", rate_header, origin, None)
    rng = np.random.default_rng(2)
    t, k = 100.0, 0
    writer.write_block(block(t, backlog, k, rate_true))
    k += backlog
    produced = float(backlog)
    while t < 100.0 + seconds:
        t += 0.02
        if gap_at is not None and abs(t - 100.0 - gap_at) < 0.01:
            writer.write_gap("device vanished (test)")
            t += 1.0                                  # the outage
            writer.write_gap("reconnected after 1.0 s")
        produced += 0.02 * rate_true
        n = int(produced) - k
        if n:
            writer.write_block(block(t + rng.uniform(0, 0.002), n, k, rate_true))
            k += n
    writer.close()
    return k


def block(t_last, n, k, rate):
    t = t_last - (n - 1 - np.arange(n)) / rate
    values = np.column_stack([2.0 + 0.01 * np.arange(k, k + n), np.full(n, 1.2)])
    return Block(t, values)


def test_trailer_written_and_preferred_to_an_estimated_header(tmp_path):
    path = tmp_path / "r.csv"
    rows = write(path, 330.0, "estimated")         # a header fooled by the backlog
    last = path.read_text().splitlines()[-1]
    rate, method, samples = parse_rate_trailer(last)
    assert method == "arrival" and samples == rows
    rec = read_recording(path)
    assert rec.header.rate_hz == 330.0 and rec.header.rate_origin == "estimated"
    assert rec.rate() == (pytest.approx(250.0, rel=5e-4), "recording")
    assert rec.rate_origin == "trailer" and rec.rate_hz == pytest.approx(250.0, rel=5e-4)


def test_a_gap_does_not_bend_the_session_rate(tmp_path):
    path = tmp_path / "r.csv"
    write(path, None, None, seconds=5.0, gap_at=2.5)
    rec = read_recording(path)
    assert "# rate_hz: unknown" in path.read_text()
    assert rec.rate_hz == pytest.approx(250.0, rel=5e-4) and rec.rate_origin == "trailer"


def test_declared_header_stays_and_the_trailer_is_kept_beside_it(tmp_path):
    path = tmp_path / "r.csv"
    write(path, 250.0, "declared", rate_true=251.0)
    rec = read_recording(path)
    assert rec.rate() == (250.0, "recording") and rec.rate_origin == "header"
    assert rec.header.measured_rate_hz == pytest.approx(251.0, rel=5e-4)


@pytest.mark.parametrize("damage", ["torn", "missing", "rows after"])
def test_torn_or_missing_trailer_falls_back_to_the_header(tmp_path, damage):
    path = tmp_path / "r.csv"
    write(path, 330.0, "estimated")
    text = path.read_text()
    body, trailer = text[:-1].rsplit("\n", 1)
    if damage == "torn":
        text = body + "\n" + trailer[:-9]           # cut mid-line, no newline
    elif damage == "missing":
        text = body + "\n"
    else:
        text = body + "\n" + trailer + "\n" + body.rsplit("\n", 1)[-1] + "\n"
    path.write_text(text)
    rec = read_recording(path)
    assert rec.rate() == (330.0, "recording") and rec.rate_origin == "header"
    assert rec.header.measured_rate_hz is None


def test_rate_change_line_sits_between_the_rows(tmp_path):
    path = tmp_path / "r.csv"
    writer = RecordingWriter(path, SCHEMA, "test board", 1000.0, "estimated", None)
    writer.write_block(block(1.0, 10, 0, 1000.0))
    writer.write_rate_change(1010.0, "estimated", 1000.0)
    writer.write_block(block(1.01, 10, 10, 1010.0))
    writer.close()
    lines = path.read_text().splitlines()
    at = lines.index("# rate_hz_changed: 1010.0 (estimated, was 1000.0)")
    assert sum(1 for line in lines[:at] if line[:1].isdigit()) == 10
    assert sum(1 for line in lines[at:] if line[:1].isdigit()) == 10
    rec = read_recording(path)
    assert sum(len(b) for b in rec.blocks()) == 20
