"""`tunetrace live --plain` and `tunetrace demo --plain` as real subprocesses, and their errors."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys

import pytest
import serial

STATS = re.compile(r"^\s*\d+\.\d s  .*frames \d+  bad \d+  dropped \d+  \| ")


def tunetrace(*args: str, stdin: bytes | None = None, timeout: float = 60.0):
    return subprocess.run([sys.executable, "-m", "monitor", *args], input=stdin,
                          capture_output=True, timeout=timeout)


def one_sentence(stderr: bytes) -> str:
    text = stderr.decode()
    assert "Traceback" not in text, text
    lines = text.strip().splitlines()
    assert len(lines) == 1, text
    return lines[0]


def board_lines(n: int) -> list[bytes]:
    return [b"%d,%.3f,%.4f\n" % (i, 12.0 + (i % 7) * 0.01, (i % 5) * 0.1) for i in range(n)]


def has_open(pid: int, path: str) -> bool:
    """Whether process `pid` holds `path` open (Linux /proc)."""
    try:
        fds = os.listdir(f"/proc/{pid}/fd")
    except OSError:
        return False
    for fd in fds:
        try:
            if os.readlink(f"/proc/{pid}/fd/{fd}") == path:
                return True
        except OSError:
            pass
    return False


def test_live_pty_plain_prints_stats_and_exits_zero(pty_board, wait_for):
    proc = subprocess.Popen([sys.executable, "-m", "monitor", "live", pty_board.path, "--plain",
                             "--duration", "2.2", "--rate", "250"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        assert wait_for(lambda: has_open(proc.pid, pty_board.path), timeout=20)
        # mid-line when the port opened, then the header and 250 lines a second
        pty_board.play([b"3,1", b"\n", b"n,load[kg],current[A]\n"] + board_lines(5000), 250.0)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        proc.kill()
    assert proc.returncode == 0, stderr.decode()
    out = stdout.decode().splitlines()
    stats = [line for line in out if STATS.match(line)]
    assert len(stats) >= 1, out
    assert "250 Hz declared" in stats[0]
    assert "load[kg] raw" in stats[0] and "current[A] raw" in stats[0]
    assert out[-1].startswith("summary: ") and "bad 0" in out[-1]
    assert stderr == b""


def test_demo_plain_prints_stats_and_exits_zero():
    result = tunetrace("demo", "--plain", "--duration", "2.2")
    assert result.returncode == 0, result.stderr.decode()
    out = result.stdout.decode().splitlines()
    stats = [line for line in out if STATS.match(line)]
    assert stats and all("load[kg]" in s and "vib[g]" in s for s in stats), out
    summary = out[-1]
    assert summary.startswith("summary: ") and "noise reduction measured/white" in summary
    # the demo chain really filters: load noise comes down by more than 10 dB
    load_db = float(re.search(r"load\[kg\] (-?[\d.]+)/(-?[\d.]+) dB", summary).group(1))
    assert load_db > 10.0, summary


def test_stdin_keeps_the_first_line_and_ends_with_the_input():
    data = b"load;vib\n1;2\n3;4\n5;6"          # no terminator after the last line
    result = tunetrace("live", "-", "--plain", "--rate", "10", stdin=data)
    assert result.returncode == 0, result.stderr.decode()
    summary = result.stdout.decode().splitlines()[-1]
    assert "3 frames" in summary and "bad 0" in summary


def test_missing_port_is_one_sentence_and_nonzero(tmp_path):
    result = tunetrace("live", str(tmp_path / "ttyACM9"), "--plain", "--duration", "1")
    assert result.returncode != 0
    assert "does not exist" in one_sentence(result.stderr)


def test_busy_port_is_one_sentence(pty_board):
    holder = serial.Serial(pty_board.path, exclusive=True)
    try:
        result = tunetrace("live", pty_board.path, "--plain", "--duration", "1")
    finally:
        holder.close()
    assert result.returncode != 0
    assert "busy" in one_sentence(result.stderr)


@pytest.mark.parametrize("baud,word", [("fast", "whole number"), ("-9600", "baud rate")])
def test_bad_baud_is_one_sentence(pty_board, baud, word):
    result = tunetrace("live", pty_board.path, "--baud", baud, "--plain", "--duration", "1")
    assert result.returncode != 0
    assert word in one_sentence(result.stderr)


def test_permission_denied_is_one_sentence(tmp_path):
    if os.geteuid() == 0:
        pytest.skip("root opens any device: permission cannot be denied")
    master, slave = os.openpty()
    try:
        path = str(tmp_path / "board")
        os.symlink(os.ttyname(slave), path)
        result = subprocess.run(
            [sys.executable, "-c", "import os,sys; os.chmod(sys.argv[1], 0)", path])
        result = tunetrace("live", path, "--plain", "--duration", "1")
        assert result.returncode != 0
        assert "permission" in one_sentence(result.stderr)
    finally:
        os.close(master)
        os.close(slave)


def test_bad_chain_and_existing_recording_are_one_sentence(tmp_path):
    chain = tmp_path / "chain.toml"
    chain.write_text('[[stage]]\nkind = "rc-lowpass"\n')
    result = tunetrace("demo", "--plain", "--duration", "1", "--chain", str(chain))
    assert result.returncode != 0 and "chain.toml" in one_sentence(result.stderr)

    chain.write_text('rate_hz = 250.0\n[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 300.0\n')
    result = tunetrace("demo", "--plain", "--duration", "1", "--chain", str(chain))
    assert result.returncode != 0 and "250 Hz" in one_sentence(result.stderr)

    taken = tmp_path / "taken.csv"
    taken.write_text("keep me\n")
    result = tunetrace("demo", "--plain", "--duration", "1", "--record", str(taken))
    assert result.returncode != 0 and "already exists" in one_sentence(result.stderr)
    assert taken.read_text() == "keep me\n"


def test_conflicting_rates_are_one_sentence(tmp_path, pty_board):
    chain = tmp_path / "c.toml"
    chain.write_text('rate_hz = 500.0\n[[stage]]\nkind = "median"\nwindow = 3\n')
    result = tunetrace("live", pty_board.path, "--rate", "250", "--chain", str(chain),
                       "--plain", "--duration", "1")
    assert result.returncode != 0 and "disagrees" in one_sentence(result.stderr)


def test_demo_records_a_readable_file(tmp_path):
    out = tmp_path / "session.csv"
    result = tunetrace("demo", "--plain", "--duration", "1.5", "--record", str(out))
    assert result.returncode == 0, result.stderr.decode()
    text = out.read_text().splitlines()
    assert text[0] == "# tunetrace recording 1"
    assert any(line.startswith("# rate_hz: 250") for line in text)
    header = next(line for line in text if not line.startswith("#"))
    assert header == "t_host,load,current,vib"
    assert len([line for line in text if line and line[0].isdigit()]) > 200


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_interrupt_ends_with_the_summary_and_exit_zero(sig):
    proc = subprocess.Popen([sys.executable, "-m", "monitor", "demo", "--plain"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        first = proc.stdout.readline()             # the first stats line: streaming for sure
        proc.send_signal(sig)
        rest, stderr = proc.communicate(timeout=30)
    finally:
        proc.kill()
    assert STATS.match(first.decode()), first
    assert proc.returncode == 0, stderr.decode()
    assert rest.decode().splitlines()[-1].startswith("summary: ")
    assert b"Traceback" not in stderr


def test_history_larger_than_memory_is_one_sentence():
    # the ring is held to --ring-memory bytes: more seconds than fit keep fewer, and say so
    result = tunetrace("live", "sim://", "--plain", "--duration", "1", "--ring-seconds", "1e12")
    assert result.returncode == 0, result.stderr
    # 1e12 s at 1 kHz (the rate is not declared when the ring is asked for): 1e15 samples
    assert "fewer than the 1e+15 samples asked, within the 256 MiB ring budget" in \
        result.stderr.decode()
    result = tunetrace("live", "sim://", "--plain", "--duration", "1", "--ring-memory", "1e12")
    assert result.returncode != 0 and "--ring-memory" in one_sentence(result.stderr)
