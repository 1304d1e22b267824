"""One time-column rule for every verb (replay.timecolumn): live and record over a real pty
or stdin take a recognised column as device time; apply and replay take it as the time of
each row; --time-column overrides. Also the rate fallback of apply and replay to the
chain's rate_hz for a file without a time column."""

from __future__ import annotations

import os
import re
import subprocess
import time

import numpy as np
import pytest
from replay_helpers import tunetrace_cmd, wait_until

from monitor.decoding import TextDecoder
from replay.reader import read_recording
from replay.timecolumn import find_time_column, time_scale_of

RATE_HZ = 250.0
CHAIN = """rate_hz = 100.0

[[stage]]
kind = "rc-lowpass"
cutoff_hz = 5.0
"""


def board_rows(n: int, seed: int = 3) -> np.ndarray:
    """(n, 2) load [kg] with a parcel step and noise, and motor current [A] (demo numbers)."""
    rng = np.random.default_rng(seed)
    step = np.where(np.arange(n) >= n // 2, 14.5, 2.0)
    load = step + 0.05 * rng.normal(size=n)
    current = 1.2 + 0.01 * rng.normal(size=n)
    return np.column_stack([load, current])


def stream_text(header: str, n: int, time_scale: float = 1.0, t0: float = 7.0) -> str:
    """A board's text stream: header line, then `time, load, current` rows at 250 Hz with
    the time written in units of `time_scale` seconds."""
    rows = board_rows(n)
    t = (t0 + np.arange(n) / RATE_HZ) / time_scale
    body = "".join(f"{ti!r},{a!r},{b!r}\n" for ti, (a, b) in zip(t.tolist(), rows.tolist(),
                                                                  strict=True))
    return header + "\n" + body


@pytest.mark.parametrize(("name", "scale"), [
    ("t", 1.0), ("TIME", 1.0), ("time_s", 1.0), ("T_S", 1.0), ("Timestamp", 1.0),
    ("t_host", 1.0), ("t_dev", 1.0), ("t_ms", 1e-3), ("time [ms]", 1e-3), ("t_dev_us", 1e-6),
    ("millis", 1e-3), ("Micros", 1e-6), ("time[S]", 1.0),
    ("load", None), ("time_of_day", None), ("tare", None), ("millis_s", None),
    ("t [kg]", None),
])
def test_the_rule_names_time_columns_ignoring_case(name, scale):
    # the recognised names and unit suffixes are common practice (no single source)
    assert time_scale_of(name) == scale


def test_override_wins_and_the_first_recognised_column_is_time():
    assert find_time_column(["load", "t_ms", "time"]) == (1, 1e-3)
    assert find_time_column(["load", "t_ms", "time"], override="time") == (2, 1.0)
    assert find_time_column(["load", "stamp"], override="STAMP") == (1, 1.0)
    assert find_time_column(["load", "stamp"], override="missing") is None
    assert find_time_column(["load", "current"]) is None


def test_text_decoder_takes_a_recognised_column_as_device_time():
    decoder = TextDecoder()
    lines = stream_text("Time_ms,load[kg],current[A]", 20, time_scale=1e-3).splitlines()
    block = decoder.decode([line.encode() for line in lines], 0.0)
    assert decoder.schema.channels == ("load", "current")
    assert decoder.schema.time_column == "Time_ms"
    np.testing.assert_allclose(block.t_dev, 7.0 + np.arange(20) / RATE_HZ, rtol=1e-12)
    assert decoder.device_rate() == pytest.approx(RATE_HZ)
    # --time-column names another column: only that one is time, `t` stays a reading
    decoder = TextDecoder(time_column="stamp")
    block = decoder.decode([b"t,stamp,load", b"5,0.5,1.0", b"6,0.504,1.1"], 0.0)
    assert decoder.schema.channels == ("t", "load")
    np.testing.assert_array_equal(block.t_dev, [0.5, 0.504])
    # without a header nothing is guessed: ch0, ch1 are readings
    decoder = TextDecoder()
    decoder.decode([b"0.0,1.0", b"0.004,1.1"], 0.0)
    assert decoder.schema.channels == ("ch0", "ch1") and decoder.schema.time_column is None


def test_record_from_stdin_writes_time_s_as_device_time(tmp_path):
    out = tmp_path / "rec.csv"
    text = stream_text("time_s,load[kg],current[A]", 600)
    result = subprocess.run(tunetrace_cmd("record", "-", "-o", str(out)), input=text,
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    rec = read_recording(out)
    assert rec.schema.channels == ("load", "current")
    assert rec.header.device_time_column == "time_s"
    assert rec.header.rate_origin == "device"
    assert rec.header.rate_hz == pytest.approx(RATE_HZ, rel=1e-6)
    blocks = list(rec.blocks())
    t_dev = np.concatenate([b.t_dev for b in blocks])
    values = np.vstack([b.values for b in blocks])
    np.testing.assert_allclose(t_dev, 7.0 + np.arange(600) / RATE_HZ, rtol=1e-12)
    np.testing.assert_array_equal(values, board_rows(600))


def test_live_over_a_pty_takes_t_ms_as_device_time(pty_sender, tmp_path):
    out = tmp_path / "live.csv"
    proc = subprocess.Popen(tunetrace_cmd("live", pty_sender.path, "--plain", "--duration",
                                          "3", "--record", str(out)),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        opened = wait_until(lambda: _holds_open(proc.pid, pty_sender.path), timeout=20)
        assert opened, proc.stderr.read() if proc.poll() is not None else "port not opened"
        time.sleep(0.3)                  # pyserial flushes its input once it has opened
        lines = stream_text("T_MS,load[kg],current[A]", 500, time_scale=1e-3)
        pty_sender.write(b"\n" + lines.encode())
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        proc.kill()
    assert proc.returncode == 0, stderr
    summary = stdout.strip().splitlines()[-1]
    # ms converted to s: 4 ms steps are 250 Hz of device time, not 0.25 Hz
    assert re.search(r"\b250 Hz device\b", summary), summary
    rec = read_recording(out)
    assert rec.schema.channels == ("load", "current")
    assert rec.header.device_time_column == "T_MS"


def _holds_open(pid: int, path: str) -> bool:
    try:
        return any(os.readlink(f"/proc/{pid}/fd/{fd}") == path
                   for fd in os.listdir(f"/proc/{pid}/fd"))
    except OSError:
        return False


@pytest.mark.parametrize(("header", "scale"), [("TIME_S", 1.0), ("t_ms", 1e-3),
                                                ("Time [us]", 1e-6)])
def test_apply_and_replay_take_a_recognised_column_as_time(tmp_path, header, scale):
    src = tmp_path / "logger.csv"
    src.write_text(stream_text(f"{header},load [kg],current [A]", 500, time_scale=scale))
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN.replace("rate_hz = 100.0\n", ""))
    out = tmp_path / "out.csv"
    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain), "-o",
                                          str(out)), capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert " rows at 250 Hz (estimated)" in result.stdout
    assert out.read_text().splitlines()[0] == (f"{header},load [kg],current [A],"
                                               "load_filtered,current_filtered")
    result = subprocess.run(tunetrace_cmd("replay", str(src), "--chain", str(chain), "--plain",
                                          "--speed", "max"),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert "~250 Hz estimated" in result.stdout.strip().splitlines()[-1]


def test_time_column_override_for_files(tmp_path):
    src = tmp_path / "logger.csv"
    rows = board_rows(300)
    stamp = np.arange(300) / 500.0                  # 500 Hz in a column the rule does not know
    pairs = zip(stamp.tolist(), rows[:, 0].tolist(), strict=True)
    src.write_text("time,stamp,load\n" + "".join(
        f"{i},{s!r},{v!r}\n" for i, (s, v) in enumerate(pairs)))
    rec = read_recording(src, time_column="Stamp")
    assert rec.schema.channels == ("time", "load")
    assert rec.rate() == (pytest.approx(500.0), "estimated")
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN)
    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain),
                                          "--time-column", "stamp", "-o",
                                          str(tmp_path / "o.csv")),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert " rows at 500 Hz (estimated)" in result.stdout
    # the chain's rate_hz = 100 is overruled by the file's own rate, and apply says so
    assert "rate_hz = 100 differs from the 500 Hz" in result.stderr
    # replay runs the chain at the file's rate too, and keeps the chain as written
    result = subprocess.run(tunetrace_cmd("replay", str(src), "--chain", str(chain),
                                          "--time-column", "stamp", "--plain", "--speed", "max"),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert "rate_hz = 100 differs from the 500 Hz" in result.stderr
    assert "500 Hz" in result.stdout.strip().splitlines()[-1]


def test_apply_and_replay_fall_back_to_the_chains_rate(tmp_path):
    src = tmp_path / "logger.csv"
    rows = board_rows(400)
    src.write_text("load [kg],current [A]\n" + "".join(f"{a!r},{b!r}\n" for a, b in rows.tolist()))
    chain = tmp_path / "chain.toml"
    chain.write_text(CHAIN)
    out = tmp_path / "out.csv"
    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain), "-o",
                                          str(out)), capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert " 400 rows at 100 Hz (declared)" in result.stdout
    from scipy import signal

    # the chain ran at 100 Hz: a 5 Hz RC by Tustin with prewarping at fs = 100 equals
    # scipy.signal.butter(1, 5, fs=100) (a first-order Butterworth is the RC low-pass),
    # started in steady state at the first sample (scipy.signal.lfilter_zi)
    b, a = signal.butter(1, 5.0, fs=100.0)
    expected = signal.lfilter(b, a, rows[:, 0], zi=signal.lfilter_zi(b, a) * rows[0, 0])[0]
    table = np.loadtxt(out, delimiter=",", skiprows=1)
    np.testing.assert_allclose(table[:, 2], expected, rtol=1e-9, atol=1e-9)
    result = subprocess.run(tunetrace_cmd("replay", str(src), "--chain", str(chain), "--plain",
                                          "--speed", "max"),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    summary = result.stdout.strip().splitlines()[-1]
    assert " 400 frames " in summary and "100 Hz declared" in summary
    # --rate still comes first; without a chain rate the refusal names the fix
    result = subprocess.run(tunetrace_cmd("apply", str(src), "--chain", str(chain), "--rate",
                                          "100", "-o", str(tmp_path / "o2.csv")),
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and "at 100 Hz (declared)" in result.stdout
    chain.write_text(CHAIN.replace("rate_hz = 100.0\n", ""))
    for verb in (["apply", "-o", str(tmp_path / "o3.csv")], ["replay", "--plain"]):
        result = subprocess.run(tunetrace_cmd(verb[0], str(src), "--chain", str(chain),
                                              *verb[1:]),
                                capture_output=True, text=True, timeout=60)
        assert result.returncode == 2
        assert result.stderr.count("\n") == 1 and "--rate HZ" in result.stderr
