"""Generated recording files with odd bytes: every good row kept, in order, exactly; every
bad one counted; or one sentence when nothing usable is there. Never a traceback.

Files start from real recordings (replay.writer.RecordingWriter) and from plain CSV of
another logger, then are corrupted the way files are in the field: a UTF-8 byte-order
mark (spreadsheets), CRLF, bare CR or mixed line ends, NUL padding (a preallocated file
after a power cut), random binary, ragged rows, overlong lines and huge fields, bytes
that are not UTF-8, control characters, the header row again (two logs concatenated),
rows without a finite time, and a last line torn mid-write.

The oracle is the generated file itself: which lines are good rows (and their values, read
from their text with Python's float), which are bad, which are gaps. read_recording must
return exactly the good rows with bad_rows equal to the bad lines; `apply` (run as a user
runs it, monitor.cli.main) must copy exactly the good rows' text and say how many bad rows
it skipped.
"""

from __future__ import annotations

import contextlib
import io
import os
import re
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path
from unittest import mock

import numpy as np
import pytest
from hostile_profile import hostile
from hypothesis import assume, given
from hypothesis import strategies as st

import replay.reader
from monitor.block import Block, Schema
from monitor.cli import main
from replay.reader import Recording, RecordingError

MAX_LINE = 512                  # the line cap the generated files are read with
GAIN = '[[stage]]\nkind = "gain"\nscale = 2.0\n'
ENDS = {"lf": b"\n", "crlf": b"\r\n", "cr": b"\r"}


@dataclass
class Line:
    """One line of a generated file: its bytes (no terminator) and what it is."""

    text: bytes
    kind: str                   # "row", "bad", "gap", "comment", "blank"
    values: tuple[float, ...] = ()     # for rows: t (seconds), then the channels


@dataclass
class Built:
    head: list[bytes]           # comment lines and header row
    lines: list[Line]
    ours: bool
    delimiter: bytes
    width: int                  # fields in a row
    head_junk: int = 0          # binary lines before the header row (plain only)
    bom: bool = False
    ends: list[bytes] = field(default_factory=list)
    torn: int | None = None     # bytes kept of the last line, when it is torn


# -- the two kinds of source file -------------------------------------------------------

def ours_file(tmp: Path, rng: np.random.Generator, n: int, gaps: list[int]) -> Built:
    """A real recording of the weigh station by RecordingWriter, split into Lines."""
    from replay.writer import RecordingWriter

    schema = Schema(("load", "current", "vib"), ("kg", "A", "g"))
    path = tmp / "written.csv"
    if path.exists():
        path.unlink()
    writer = RecordingWriter(path, schema, "/dev/ttyACM0 @ 115200", 250.0, "declared", GAIN)
    values = np.column_stack([2.0 + 15.0 * rng.random(n), 1.2 + 0.05 * rng.normal(size=n),
                              0.02 * rng.normal(size=n)])
    t = 1000.0 + np.arange(n) / 250.0
    cuts = sorted({0, n, *gaps})
    for start, stop in zip(cuts[:-1], cuts[1:], strict=True):
        if start in gaps:
            writer.write_gap(f"reconnected at row {start}")
        writer.write_block(Block(t[start:stop], values[start:stop]))
    writer.close()
    raw = path.read_bytes().split(b"\n")[:-1]
    at = next(i for i, line in enumerate(raw) if line.startswith(b"t_host"))
    lines = [Line(line, "gap" if line.startswith(b"# gap:") else
                  "comment" if line.startswith(b"#") else "row",
                  tuple(float(x) for x in line.split(b",")) if not line.startswith(b"#")
                  else ())
             for line in raw[at + 1:]]
    return Built(raw[: at + 1], lines, True, b",", 4)


PLAIN_HEADS = [
    (b",", [b"time", b"load [kg]", b"temp [C]"], 1.0, None),
    (b";", [b"t_ms", b"load", b"vib [g]"], 1e-3, None),
    (b"\t", [b"timestamp", b"load[kg]"], 1.0, None),
    (b",", [b"time_s", b"status", b"load [kg]", b"current [A]"], 1.0, 1),   # a text column
]


def plain_file(rng: np.random.Generator, n: int, head: int) -> Built:
    """Plain CSV as another logger writes it (its own header, delimiter and time unit)."""
    delimiter, names, scale, text_col = PLAIN_HEADS[head]
    lines = []
    for i in range(n):
        t_written = i * 4.0 if scale == 1e-3 else round(i * 0.004, 6)
        numbers = [t_written] + [float(np.round(rng.normal() * 10, 5))
                                 for _ in range(len(names) - 1 - (text_col is not None))]
        fields = [repr(x).encode() for x in numbers]
        if text_col is not None:
            # a Latin-1 word in a text column: not UTF-8, yet the row is good and its
            # bytes must come out of apply as they went in
            fields.insert(text_col, rng.choice([b"ok", b"tare", b"\xfcberlast"]))
        lines.append(Line(delimiter.join(fields), "row",
                          (numbers[0] * scale, *numbers[1:])))
    return Built([delimiter.join(names)], lines, False, delimiter,
                 len(names), ends=[])


# -- corruption -------------------------------------------------------------------------

JUNK = ["binary", "nul", "long", "short", "overlong", "not_utf8", "control", "header",
        "nan_time", "cr_split"]


def junk_line(kind: str, built: Built, good: bytes, data: st.DataObject) -> list[Line]:
    """Lines that must each be one bad row (cr_split gives two)."""
    d = built.delimiter
    if kind == "binary":
        raw = data.draw(st.binary(min_size=0, max_size=120)).replace(b"\r", b"").replace(
            b"\n", b"")
        at = data.draw(st.integers(0, len(raw)))
        return [Line(b"\x00" + raw[:at] + b"\x00" + raw[at:], "bad")]
    if kind == "nul":
        return [Line(good[: len(good) // 2] + b"\x00" * data.draw(st.integers(1, 700)), "bad")]
    if kind == "long":
        return [Line(good + d + b"1.5", "bad")]
    if kind == "short":
        return [Line(good.rsplit(d, 1)[0], "bad")]
    if kind == "overlong":                # a row of numbers, but longer than the cap
        digits = b"7" * data.draw(st.integers(MAX_LINE + 1, 3 * MAX_LINE))
        return [Line(good.rsplit(d, 1)[0] + d + digits, "bad")]
    if kind == "not_utf8":                # a Latin-1 degree sign inside a number
        fields = good.split(d)
        fields[-1] = fields[-1][:1] + b"\xb0" + fields[-1][1:]
        return [Line(d.join(fields), "bad")]
    if kind == "control":                 # a terminal's colour code before the row
        return [Line(b"\x1b[32m" + good, "bad")]
    if kind == "header":
        return [Line(built.head[-1], "bad")]
    if kind == "nan_time":
        return [Line(b"nan" + d + good.split(d, 1)[1], "bad")]
    # a bare CR inside a line of text ends it there: two bad lines
    return [Line(b"mains " + d + b"hum", "bad"), Line(b"belt" + d + b"slip", "bad")]


@st.composite
def hostile_files(draw, tmp: Path) -> Built:
    data = draw(st.data())
    ours = draw(st.booleans())
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    n = draw(st.integers(1, 120))
    if ours:
        gaps = draw(st.lists(st.integers(1, max(1, n - 1)), max_size=3, unique=True))
        built = ours_file(tmp, rng, n, [g for g in gaps if 0 < g < n])
    else:
        built = plain_file(rng, n, draw(st.integers(0, len(PLAIN_HEADS) - 1)))
    rows = [line.text for line in built.lines if line.kind == "row"]
    for _ in range(draw(st.integers(0, 8))):
        kind = draw(st.sampled_from(JUNK))
        at = draw(st.integers(0, len(built.lines)))
        good = rows[draw(st.integers(0, len(rows) - 1))]
        built.lines[at:at] = junk_line(kind, built, good, data)
    for _ in range(draw(st.integers(0, 2))):
        at = draw(st.integers(0, len(built.lines)))
        built.lines.insert(at, Line(draw(st.sampled_from([b"", b"  ", b"\t"])), "blank"))
    if not ours and draw(st.booleans()):     # a garbled line before the header row
        built.head_junk = draw(st.integers(1, 2))
    built.bom = draw(st.booleans())
    style = draw(st.sampled_from(["lf", "crlf", "cr", "mixed"]))
    count = len(built.head) + built.head_junk + len(built.lines)
    built.ends = [ENDS[draw(st.sampled_from(sorted(ENDS))) if style == "mixed" else style]
                  for _ in range(count)]
    if draw(st.integers(0, 3)) == 0:         # killed mid-write: cut into the last row
        last = max(i for i, line in enumerate(built.lines) if line.kind == "row")
        built.lines = built.lines[: last + 1]
        built.torn = draw(st.integers(1, len(built.lines[-1].text)))
    if not ours:
        assume(columns_stay_numeric(built))
    return built


def columns_stay_numeric(built: Built) -> bool:
    """The reader's rule for another logger's CSV: a column holds numbers when at least
    half of the first 50 rows of the header's width have a number there. Junk of the
    header's width that is not numbers must not outvote the good rows."""
    sample = [line for line in built.lines if line.kind in ("row", "bad")
              and len(line.text.split(built.delimiter)) == built.width
              and b"\x00" not in line.text and b"\x1b" not in line.text
              and len(line.text) <= 1 << 16][:50]
    spoilers = sum(line.kind == "bad" and line.text[:3] != b"nan" for line in sample)
    return 2 * spoilers < len(sample)


def file_bytes(built: Built) -> bytes:
    ends = iter(built.ends)
    out = [b"\xef\xbb\xbf"] if built.bom else []
    for _ in range(built.head_junk):
        out += [b"\x00\x13garbled \xff\xfe at 9600 baud\x00", next(ends)]
    for line in built.head:
        out += [line, next(ends)]
    for i, line in enumerate(built.lines):
        last = i == len(built.lines) - 1
        if last and built.torn is not None:
            out.append(line.text[: built.torn])
        else:
            out += [line.text, next(ends)]
    return b"".join(out)


def expected(built: Built) -> tuple[list[tuple[float, ...]], int, int]:
    """(good rows that must be read, bad rows, gaps) when no row is torn."""
    lines = built.lines[:-1] if built.torn is not None else built.lines
    rows = [line.values for line in lines if line.kind == "row"]
    bad = sum(line.kind == "bad" for line in lines) + built.head_junk
    return rows, bad, sum(line.kind == "gap" for line in lines)


def one_sentence(text: str) -> None:
    assert text.endswith(".") and "\n" not in text and "Traceback" not in text, text


def table(rec: Recording) -> list[tuple[float, ...]]:
    return [tuple(row) for block in rec.blocks()
            for row in np.column_stack([block.t_host, block.values]).tolist()]


# -- the attacks ------------------------------------------------------------------------

@hostile(150)
@given(data=st.data(), chunk_bytes=st.integers(7, 5000))
def test_read_recording_keeps_every_good_row_and_counts_every_bad_one(
        tmp_path_factory, data, chunk_bytes):
    tmp = tmp_path_factory.mktemp("files")
    built = data.draw(hostile_files(tmp))
    path = tmp / "hostile.csv"
    path.write_bytes(file_bytes(built))
    rows, bad, gaps = expected(built)
    try:
        rec = Recording(path, chunk_bytes=chunk_bytes, max_line_bytes=MAX_LINE)
    except RecordingError as exc:
        one_sentence(str(exc))
        assert not rows, f"{len(rows)} good rows refused: {exc}"
        return
    got = table(rec)
    if built.torn is not None and not built.ours and len(got) == len(rows) + 1:
        got = got[:-1]                       # a plain CSV's torn row that still parsed
        assert not rec.torn_last_line
    else:
        assert rec.torn_last_line == (built.torn is not None)
    assert got == rows                       # every good row, in order, exactly
    assert rec.bad_rows == bad
    assert rec.gaps == gaps
    if built.ours:
        assert rec.schema.channels == ("load", "current", "vib")


@hostile(40)
@given(data=st.data())
def test_apply_copies_every_good_row_and_reports_the_bad_ones(tmp_path_factory, data):
    tmp = tmp_path_factory.mktemp("apply")
    built = data.draw(hostile_files(tmp))
    path = tmp / "hostile.csv"
    path.write_bytes(file_bytes(built))
    chain = tmp / "gain.toml"
    chain.write_text(GAIN)
    out = tmp / "out.csv"
    rows, bad, _ = expected(built)
    # capsys is function-scoped, which hypothesis refuses: the same capture by hand
    stdout, stderr = io.StringIO(), io.StringIO()
    with mock.patch.object(replay.reader, "MAX_DATA_LINE", MAX_LINE), \
            contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(["apply", str(path), "--chain", str(chain), "-o", str(out),
                     "--rate", "250"])
    got_out, err = stdout.getvalue(), stderr.getvalue()
    assert "Traceback" not in err
    if code != 0:
        assert code == 2 and not rows, err
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("tunetrace apply: "), err
        return
    summary = got_out.splitlines()[0]
    written = out.read_bytes().split(b"\n")[:-1]
    data_rows = [line for line in written if not line.startswith(b"#")][1:]
    kept = [line.text for line in built.lines if line.kind == "row"]
    if built.torn is not None:
        kept = kept[:-1]
        if len(data_rows) == len(kept) + 1:
            data_rows = data_rows[:-1]       # a plain CSV's torn row that still parsed
    assert len(data_rows) == len(kept) == len(rows)
    for line, original, values in zip(data_rows, kept, rows, strict=True):
        if built.delimiter == b",":
            assert line.startswith(original + b","), (line, original)   # bytes as they were
        fields = line.split(b",")
        numbers = [float(x) for x in fields if re.fullmatch(rb"[-+0-9.e]+|nan|inf", x)]
        channels = len(values) - 1
        assert numbers[-channels:] == [2.0 * v for v in values[1:]]     # gain 2, exact
    assert (f"; {bad} bad rows skipped" in summary) == (bad > 0), summary


@hostile(150)
@given(data=st.binary(max_size=400).map(lambda b: b.replace(b"a", b"\r").replace(b"b", b"\n")),
       max_line=st.integers(1, 40), read=st.integers(1, 17))
def test_lines_split_like_the_live_framer_whatever_the_read_size(data, max_line, read):
    # the reference: the whole file split at CRLF, CR and LF at once (monitor.framing's
    # rule); reading it in pieces of `read` bytes with a line cap must give the same lines,
    # a CRLF cut between two reads included, and an overlong line as None
    import io as _io

    import replay.textlines as textlines

    pieces = re.split(rb"\r\n|\r|\n", data)
    if pieces and pieces[-1] == b"":
        pieces.pop()
    want = [None if len(p) > max_line else p for p in pieces]
    with mock.patch.object(textlines, "_READ", read):
        got = [line for _, line in textlines.iter_lines(_io.BytesIO(data), 0, max_line)]
    assert got == want


def test_an_overlong_line_is_counted_once_however_often_the_file_is_read(tmp_path):
    # the first pass (opening the file) counts it; replay --loop and apply read again;
    # last in the file (a power cut's NUL padding), with and without a line end
    for end in (b"\n", b""):
        path = tmp_path / "padded.csv"
        path.write_bytes(b"time,load\n0.0,1.5\n0.1,1.6\n0.2,1" + b"\x00" * 600 + end)
        rec = Recording(path, chunk_bytes=7, max_line_bytes=MAX_LINE)
        for _ in range(3):
            assert table(rec) == [(0.0, 1.5), (0.1, 1.6)]
            assert rec.bad_rows == 1


# -- fixed attacks through a real process ---------------------------------------------

def run_cli(*args: str, timeout: float = 60) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "monitor", *args], capture_output=True,
                          text=True, timeout=timeout, stdin=subprocess.DEVNULL)


FIXED = {
    "random binary": (bytes(np.random.default_rng(3).integers(0, 256, 20000, dtype=np.uint8)),
                      2, "header row"),
    "a bare CR inside the header row": (b"time,lo\rad,temp\n" + b"".join(
        b"%d.0,2.5,20.1\n" % i for i in range(50)), 2, "header row names 2 columns"),
    "UTF-16 from a spreadsheet": ("time,load\n0,1\n".encode("utf-16"), 2, "UTF-8"),
    "empty": (b"", 2, "no header row"),
    "header only": (b"\xef\xbb\xbftime,load\r\n", 2, "no data rows"),
    "byte-order mark and CR line ends": (b"\xef\xbb\xbftime,load [kg]\r" + b"".join(
        b"%d.0,2.5\r" % i for i in range(50)), 0, "50 rows"),
}


@pytest.mark.parametrize("name", sorted(FIXED))
def test_odd_files_through_apply_and_replay_in_a_real_process(tmp_path, name):
    content, code, says = FIXED[name]
    path = tmp_path / "odd.csv"
    path.write_bytes(content)
    chain = tmp_path / "gain.toml"
    chain.write_text(GAIN)
    done = run_cli("apply", str(path), "--chain", str(chain), "-o", str(tmp_path / "o.csv"))
    assert done.returncode == code and "Traceback" not in done.stderr, done.stderr
    assert says in (done.stdout + done.stderr)
    if code:
        assert len(done.stderr.strip().splitlines()) == 1
    replayed = run_cli("replay", str(path), "--speed", "max", "--plain")
    assert replayed.returncode == code and "Traceback" not in replayed.stderr, replayed.stderr


def test_devices_that_never_end_are_refused_in_bounded_time(tmp_path):
    chain = tmp_path / "gain.toml"
    chain.write_text(GAIN)
    for device in ("/dev/zero", "/dev/urandom"):
        done = run_cli("apply", device, "--chain", str(chain), "-o",
                       str(tmp_path / "o.csv"), timeout=120)
        assert done.returncode == 2 and "Traceback" not in done.stderr
        from replay.reader import read_recording
        with pytest.raises(RecordingError) as info:
            read_recording(device)
        one_sentence(str(info.value))


MEASURE = """
import resource, sys
from replay.reader import read_recording
rec = read_recording(sys.argv[1])
rows = sum(len(b) for b in rec.blocks())
print(rows, rec.bad_rows, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
"""


def test_a_huge_single_line_costs_bounded_memory(tmp_path):
    # 96 MiB of digits with no line end among good rows: read in bounded pieces and
    # counted as one bad row; peak memory (ru_maxrss, KiB on Linux) grows by far less
    # than the line compared with the same file without it
    rows = b"".join(b"%d.0,2.5\n" % i for i in range(20))
    small, huge = tmp_path / "small.csv", tmp_path / "huge.csv"
    small.write_bytes(b"time,load\n" + rows + rows)
    with open(huge, "wb") as f:
        f.write(b"time,load\n" + rows)
        for _ in range(96):
            f.write(b"7" * (1 << 20))
        f.write(b"\n" + rows)
    results = {}
    for path in (small, huge):
        done = subprocess.run([sys.executable, "-c", MEASURE, str(path)], capture_output=True,
                              text=True, timeout=120, check=True)
        results[path.name] = [int(x) for x in done.stdout.split()]
    assert results["small.csv"][:2] == [40, 0] and results["huge.csv"][:2] == [40, 1]
    grown_kib = results["huge.csv"][2] - results["small.csv"][2]
    assert grown_kib < 24 * 1024, f"peak memory grew by {grown_kib} KiB"
    os.unlink(huge)
