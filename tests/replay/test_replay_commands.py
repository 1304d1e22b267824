"""The record, replay and apply verbs end to end: a real pty, real processes, real errors."""

from __future__ import annotations

import resource
import signal
import subprocess
import time

import numpy as np
import pytest
from replay_helpers import (
    CHAIN_TEXT,
    data_lines,
    tunetrace_cmd,
    wait_until,
    weigh_station,
    write_recording,
)

from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.cli import main
from monitor.pipeline import Pipeline
from replay.player import ReplaySource
from replay.reader import read_recording

BAD_LINES = [b"garbage", b"1.5,2.5", b"\xff\xfe\xfd", b"1,2,3,4,5", b"nan-ish,1,2"]


def start_record(port: str, out, *extra: str, **popen) -> subprocess.Popen:
    """`tunetrace record PORT -o OUT --rate 250`, returned once the port is open."""
    proc = subprocess.Popen(tunetrace_cmd("record", port, "-o", str(out), "--rate", "250",
                                          *extra),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **popen)
    # the verb says so on stderr after opening the port (pyserial flushes input at open)
    line = proc.stderr.readline()
    assert "Ctrl-C stops" in line, line + proc.stderr.read()
    return proc


def sample_lines(n: int, seed: int = 5) -> tuple[list[bytes], np.ndarray]:
    values = weigh_station(n, seed)[:, [0, 2]]
    values = np.column_stack([np.arange(n, dtype=float), values])
    return [(",".join(map(repr, row))).encode() for row in values.tolist()], values


def recorded_table(path) -> np.ndarray:
    rec = read_recording(path)
    return np.vstack([b.values for b in rec.blocks()])


def test_record_from_pty_keeps_every_good_line_then_round_trips(pty_sender, tmp_path):
    out = tmp_path / "rec.csv"
    lines, values = sample_lines(3000)
    proc = start_record(pty_sender.path, out)
    try:
        stream = b"\nseq,load[kg],vib[g]\n"
        for i, line in enumerate(lines):
            stream += line + b"\n"
            if i % 600 == 299:
                stream += BAD_LINES[i // 600] + b"\n"
        for start in range(0, len(stream), 4096):              # a board's bursts
            pty_sender.write(stream[start:start + 4096])
            time.sleep(0.005)
        assert wait_until(lambda: out.exists() and len(data_lines(out)) == 3001, timeout=20)
    finally:
        proc.send_signal(signal.SIGINT)                           # Ctrl-C
        stdout, stderr = proc.communicate(timeout=20)
    assert proc.returncode == 0, stderr
    assert stdout.startswith(f"recorded {out}: 3000 frames, 5 bad, 0 dropped, ")
    assert stdout.rstrip().endswith(f"{out.stat().st_size} bytes")
    rec = read_recording(out)
    assert rec.schema.channels == ("seq", "load", "vib") and rec.schema.units == ("", "kg", "g")
    assert rec.header.rate_hz == 250.0 and rec.header.rate_origin == "declared"
    np.testing.assert_array_equal(recorded_table(out), values)       # exact, in order

    # round trip: replay at max speed through the pipeline, and apply, against the
    # chain run directly on the samples that were sent
    spec = parse_chain(CHAIN_TEXT)
    expected = ChainSet(spec, ("seq", "load", "vib"), 250.0).process(values)
    pipeline = Pipeline(ReplaySource(out, speed=None), chain_spec=spec, ring_capacity=4000)
    pipeline.start()
    assert wait_until(lambda: not pipeline.status().running, timeout=20)
    snap = pipeline.ring.latest(4000)
    np.testing.assert_array_equal(snap.raw, values)
    np.testing.assert_allclose(snap.filtered, expected, rtol=1e-12, atol=1e-12)
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN_TEXT)
    applied = tmp_path / "applied.csv"
    assert main(["apply", str(out), "--chain", str(chain), "-o", str(applied)]) == 0
    table = np.loadtxt(data_lines(applied)[1:], delimiter=",")
    np.testing.assert_array_equal(table[:, 1:4], values)
    np.testing.assert_allclose(table[:, 4:], expected, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(table[:, 4:], snap.filtered, rtol=1e-12, atol=1e-12)


def test_kill_9_keeps_every_row_older_than_200_ms(pty_sender, tmp_path):
    out = tmp_path / "rec.csv"
    lines, values = sample_lines(20000, seed=9)
    proc = start_record(pty_sender.path, out)
    sent_at: list[float] = []

    def board(sender):
        sender.write(b"\nseq,load[kg],vib[g]\n")
        for start in range(0, len(lines), 10):
            if sender.stopping:
                return
            sender.write(b"".join(line + b"\n" for line in lines[start:start + 10]))
            sent_at.extend([time.monotonic()] * len(lines[start:start + 10]))
            time.sleep(0.01)

    pty_sender.run(board)
    try:
        time.sleep(1.5)
    finally:
        killed_at = time.monotonic()
        proc.kill()                                              # SIGKILL: no cleanup at all
        proc.wait(timeout=10)
        pty_sender.join()
    assert proc.returncode == -signal.SIGKILL
    must_have = sum(1 for t in sent_at if t < killed_at - 0.2)
    assert must_have > 500
    rec = read_recording(out)
    got = np.vstack([b.values for b in rec.blocks()])
    assert len(got) >= must_have
    np.testing.assert_array_equal(got, values[: len(got)])        # exact, in order, no holes
    assert rec.bad_rows == 0


def test_record_refuses_existing_and_directory_outputs(tmp_path, capsys):
    existing = tmp_path / "old.csv"
    existing.write_text("keep\n")
    assert main(["record", "sim://?rate=250", "-o", str(existing)]) == 2
    assert "already exists; choose another file or give --force" in capsys.readouterr().err
    assert existing.read_text() == "keep\n"
    assert main(["record", "sim://?rate=250", "-o", str(tmp_path)]) == 2
    assert "is a directory" in capsys.readouterr().err
    assert main(["record", "sim://?rate=250", "-o", str(tmp_path / "no" / "x.csv")]) == 2
    assert "folder" in capsys.readouterr().err
    assert main(["record", "sim://", "-o", str(tmp_path / "x.csv"), "--with-filtered"]) == 2
    assert "--with-filtered needs --chain FILE" in capsys.readouterr().err


def test_record_to_a_full_disk_is_one_sentence(tmp_path):
    # /dev/full: every write fails with ENOSPC (Linux, man 4 full)
    result = subprocess.run(tunetrace_cmd("record", "sim://?rate=500", "-o", "/dev/full",
                                          "--force", "--rate", "500", "--duration", "10"),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 1
    err = result.stderr.strip().splitlines()[-1]
    assert err == ("tunetrace record: writing the recording /dev/full failed: No space left "
                   "on device; free space or choose another disk.")
    assert "Traceback" not in result.stderr


def test_disk_filling_up_mid_recording_stops_with_one_sentence(tmp_path):
    out = tmp_path / "rec.csv"

    def small_disk():
        # the kernel refuses to grow a file past 20 kB (EFBIG), like a full disk
        resource.setrlimit(resource.RLIMIT_FSIZE, (20000, 20000))

    result = subprocess.run(tunetrace_cmd("record", "sim://?rate=2000", "-o", str(out),
                                          "--rate", "2000", "--duration", "30"),
                            capture_output=True, text=True, timeout=60, preexec_fn=small_disk)
    assert result.returncode == 1, result.stderr
    assert result.stderr.strip().splitlines()[-1] == (
        f"tunetrace record: writing the recording {out} failed: File too large; free space "
        "or choose another disk.")
    assert result.stdout.startswith(f"recorded {out}: ")
    assert read_recording(out).rows > 0                  # what was written reads back


def test_record_size_limit_ends_cleanly(tmp_path):
    out = tmp_path / "rec.csv"
    result = subprocess.run(tunetrace_cmd("record", "sim://?rate=1000", "-o", str(out),
                                          "--rate", "1000", "--max-bytes", "6000",
                                          "--duration", "30"),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert "reached the size limit of 6000 bytes" in result.stderr
    text = out.read_text()
    assert len(text[: text.index("# stopped:")].encode()) <= 6000
    assert read_recording(out).rows > 10


@pytest.mark.parametrize("content, message", [
    (None, "does not exist"),
    ("name,state\nx,ok\n", "no column under the header row holds numbers"),
    ("time,load\n", "has no data rows"),
])
def test_apply_bad_inputs(tmp_path, capsys, content, message):
    src = tmp_path / "in.csv"
    if content is not None:
        src.write_text(content)
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN_TEXT)
    assert main(["apply", str(src), "--chain", str(chain), "-o", str(tmp_path / "o.csv")]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1 and not (tmp_path / "o.csv").exists()


def test_apply_output_problems(tmp_path, capsys):
    src = tmp_path / "in.csv"
    write_recording(src, weigh_station(100))
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN_TEXT)
    args = ["apply", str(src), "--chain", str(chain), "-o"]
    assert main(args + [str(tmp_path)]) == 2
    assert "is a directory; give a file name for the output" in capsys.readouterr().err
    out = tmp_path / "o.csv"
    out.write_text("keep\n")
    assert main(args + [str(out)]) == 2
    assert "already exists; choose another file or give --force" in capsys.readouterr().err
    assert out.read_text() == "keep\n"
    assert main(args + ["/dev/full", "--force"]) == 1
    assert "No space left on device" in capsys.readouterr().err
    assert main(args + [str(out), "--force"]) == 0
    assert capsys.readouterr().out.startswith(f"wrote {out}: 100 rows at 250 Hz (recording)")
    assert main(["apply", str(tmp_path), "--chain", str(chain), "-o",
                 str(tmp_path / "o2.csv")]) == 2
    assert "is a directory" in capsys.readouterr().err


def test_replay_plain_at_max_speed(tmp_path):
    src = tmp_path / "in.csv"
    write_recording(src, weigh_station(2000))
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN_TEXT)
    result = subprocess.run(tunetrace_cmd("replay", str(src), "--speed", "max", "--plain",
                                          "--chain", str(chain)),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    last = result.stdout.strip().splitlines()[-1]
    assert last.startswith("summary: ") and " 2000 frames " in last and "250 Hz recording" in last


def test_replay_bad_inputs(tmp_path, capsys):
    assert main(["replay", str(tmp_path / "nope.csv"), "--plain"]) == 2
    assert "does not exist" in capsys.readouterr().err
    (tmp_path / "x.csv").write_text("a,b\n1,2\n")
    assert main(["replay", str(tmp_path / "x.csv"), "--plain"]) == 2
    assert "--rate HZ" in capsys.readouterr().err
    with pytest.raises(SystemExit):
        main(["replay", str(tmp_path / "x.csv"), "--speed", "fast"])
    assert "not a speed" in capsys.readouterr().err


def test_help_of_the_verbs(capsys):
    expected = {"record": "--max-bytes", "replay": "--speed X|max", "apply": "--time-column"}
    for verb, option in expected.items():
        with pytest.raises(SystemExit):
            main([verb, "--help"])
        assert option in capsys.readouterr().out
    for verb in ("live", "demo", "replay", "apply"):            # what each noise figure means
        with pytest.raises(SystemExit):
            main([verb, "--help"])
        text = " ".join(capsys.readouterr().out.split())
        assert "measured noise reduction" in text and "-10 log10(sum h^2)" in text, verb


def test_apply_running_out_of_space_removes_the_half_written_output(tmp_path):
    src, out = tmp_path / "in.csv", tmp_path / "out.csv"
    write_recording(src, weigh_station(5000))
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN_TEXT)
    size = src.stat().st_size

    def small_disk():
        # the kernel refuses to grow a file past the input's size (EFBIG), like a full disk
        resource.setrlimit(resource.RLIMIT_FSIZE, (size, size))

    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain), "-o",
                                          str(out)),
                            capture_output=True, text=True, timeout=60, preexec_fn=small_disk)
    assert result.returncode == 1
    assert result.stderr == (f"tunetrace apply: writing the output {out} failed: File too "
                             "large; free space or choose another disk.\n")
    assert not out.exists()
