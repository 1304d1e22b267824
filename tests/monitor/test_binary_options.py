"""The binary framing options from the command line to a running pipeline and a recording."""

from __future__ import annotations

import struct
import time

import numpy as np
import pytest

from monitor.binary_options import binary_framing
from monitor.cli import build_parser
from monitor.commands.common import build_pipeline
from monitor.crc import crc_algorithm
from monitor.errors import UserError
from monitor.framing_binary import cobs_encode


def parse(*argv: str):
    return build_parser().parse_args(list(argv))


def test_sim_url_describes_its_own_frames():
    framing = binary_framing(parse("live", "sim://?format=sync&crc=crc32"),
                             "sim://?format=sync&crc=crc32")
    assert framing.framing == "sync"
    assert framing.decoder.schema.channels == ("load", "current", "vib")
    assert framing.decoder.schema.time_column == "t_us"
    assert framing.decoder.crc.name == "crc32"
    assert binary_framing(parse("live", "sim://"), "sim://") is None


@pytest.mark.parametrize(("argv", "message"), [
    (["live", "/dev/ttyX", "--framing", "cobs"], "need --layout"),
    (["live", "/dev/ttyX", "--framing", "slip", "--layout", "<H2f"], "need --fields"),
    (["live", "/dev/ttyX", "--layout", "<H2f"], "--layout describes binary frames"),
    (["live", "/dev/ttyX", "--crc", "crc32"], "--crc describes binary frames"),
    (["live", "sim://?format=cobs", "--framing", "slip"], "disagrees with format=cobs"),
    (["live", "/dev/ttyX", "--framing", "cobs", "--layout", "H2f", "--fields", "n,a,b"],
     "byte order"),
    (["live", "/dev/ttyX", "--framing", "cobs", "--layout", "<H2f", "--fields", "n,a"],
     "one name per value"),
    (["live", "/dev/ttyX", "--framing", "cobs", "--layout", "<H2f", "--fields", "n,a,b",
      "--time-column", "t"], "time field 't' is not one of the fields"),
    (["live", "sim://?format=cobs&crc=crc7"], "crc 'crc7' is not known"),
    (["live", "/dev/ttyX", "--framing", "cobs", "--layout", "<HI2f", "--fields", "n,t,a,b",
      "--time-column", "t"], "integer ticks; give their unit"),
])
def test_mistakes_give_one_sentence_naming_the_option(argv, message):
    args = parse(*argv)
    with pytest.raises(UserError, match=message) as caught:
        binary_framing(args, args.source)
    text = str(caught.value)
    assert text.endswith(".") and "\n" not in text


def test_sync_word_option_is_read_as_hex():
    args = parse("live", "/dev/ttyX", "--framing", "sync", "--sync-word", "0xAA55",
                 "--layout", "<H2f", "--fields", "n,a,b")
    assert binary_framing(args, args.source).framer.sync_word == b"\xaa\x55"
    with pytest.raises(SystemExit):
        parse("live", "/dev/ttyX", "--sync-word", "xyz")


def board_frames(n: int) -> tuple[list[bytes], np.ndarray]:
    """A board of our own: uint8 counter, 16-bit millisecond clock, two int16 ADC counts,
    CRC-16/MODBUS, COBS; the clock starts 300 ms before its 16-bit wrap."""
    rng = np.random.default_rng(5)
    adc = rng.integers(-2000, 2000, size=(n, 2))
    frames = []
    modbus = crc_algorithm("crc16-modbus")
    for i in range(n):
        payload = struct.pack("<BHhh", i % 256, (65236 + 2 * i) % 65536, *adc[i])
        frames.append(cobs_encode(modbus.append(payload)))
    return frames, adc


def test_pty_board_through_cli_options_pipeline_and_recording(pty_board, tmp_path):
    frames, adc = board_frames(700)
    lost = {100, 101, 400}
    sent = [f for i, f in enumerate(frames) if i not in lost]
    sent[200] = sent[200][:5] + bytes([sent[200][5] ^ 0x04]) + sent[200][6:]   # a bit error
    keep = np.array([i for i in range(700) if i not in lost])
    keep = np.delete(keep, 200)
    path = tmp_path / "board.csv"
    args = parse("live", pty_board.path, "--framing", "cobs", "--layout", "<BHhh",
                 "--fields", "n,t_ms,bridge[count],shunt[count]", "--crc", "crc16-modbus",
                 "--time-column", "t_ms", "--time-unit", "ms", "--counter-column", "n",
                 "--record", str(path), "--plain")
    pipeline = build_pipeline(args, args.source)
    pipeline.start()
    try:
        pty_board.write(b"boot v1\r\n\x00")     # a text banner before the binary stream
        pty_board.play(sent, rate_hz=2000.0)
        deadline = time.monotonic() + 20.0
        while pipeline.status().frames < keep.size and time.monotonic() < deadline:
            time.sleep(0.02)
        time.sleep(0.2)
    finally:
        pipeline.stop()
    status = pipeline.status()
    assert status.frames == keep.size
    assert status.bad == 1
    assert status.dropped == 4
    assert status.rate_origin == "device" and status.rate_hz == pytest.approx(500.0)
    assert status.jitter_s == pytest.approx(0.0, abs=1e-9)   # the board's clock steps exactly
    snapshot = pipeline.ring.latest(10_000)
    np.testing.assert_array_equal(snapshot.raw, adc[keep].astype(float))
    assert pipeline.schema.units == ("count", "count")

    lines = path.read_text().splitlines()
    header = next(line for line in lines if line.startswith("t_host,"))
    assert header == "t_host,n,t_ms,bridge,shunt"
    rows = np.array([[float(x) for x in line.split(",")] for line in lines
                     if line and line[0].isdigit()])
    t_dev = rows[:, 2]
    np.testing.assert_allclose(t_dev - t_dev[0], (keep - keep[0]) * 0.002, atol=1e-9)
    assert sum(line.startswith("# gap:") for line in lines) == 3


def test_text_columns_take_the_same_units_and_wraparound(pty_board, tmp_path):
    n = 600
    t_ms = (65000 + 2 * np.arange(n)) % 65536          # 16-bit milliseconds, wraps at i = 268
    seq = np.arange(n) % 256                           # 8-bit counter
    lines = [f"{seq[i]},{t_ms[i]},{0.01 * i:.2f}\n".encode() for i in range(n) if i != 300]
    args = parse("live", pty_board.path, "--channels", "seq,t_ms,load",
                 "--time-column", "t_ms", "--time-unit", "ms", "--time-bits", "16",
                 "--counter-column", "seq", "--counter-bits", "8", "--plain",
                 "--record", str(tmp_path / "text.csv"))
    pipeline = build_pipeline(args, args.source)
    pipeline.start()
    try:
        pty_board.write(b"\n")
        pty_board.play(lines, rate_hz=2000.0)
        deadline = time.monotonic() + 20.0
        while pipeline.status().frames < n - 1 and time.monotonic() < deadline:
            time.sleep(0.02)
    finally:
        pipeline.stop()
    status = pipeline.status()
    assert status.frames == n - 1
    assert status.dropped == 1 and status.gaps == 1
    assert status.rate_origin == "device" and status.rate_hz == pytest.approx(500.0)
    rows = [line.split(",") for line in (tmp_path / "text.csv").read_text().splitlines()
            if line and line[0].isdigit()]
    t_dev = np.array([float(r[2]) for r in rows])
    counter = np.array([int(r[1]) for r in rows])
    true_index = np.delete(np.arange(n), 300)
    np.testing.assert_allclose(t_dev, 65.0 + 0.002 * true_index, atol=1e-9)  # no 65.5 s jump
    np.testing.assert_array_equal(counter, true_index)                      # unwrapped past 255


def test_time_options_need_the_column_they_describe():
    with pytest.raises(UserError, match="--time-unit needs --time-column"):
        build_pipeline(parse("live", "sim://", "--time-unit", "ms"), "sim://")
    with pytest.raises(UserError, match="--counter-bits needs --counter-column"):
        build_pipeline(parse("live", "/dev/ttyX", "--framing", "cobs", "--layout", "<H2f",
                             "--fields", "n,a,b", "--counter-bits", "8"), "/dev/ttyX")


def test_plain_rate_shows_device_clock_jitter():
    from monitor.commands.live import rate_text
    from monitor.pipeline import PipelineStatus

    status = PipelineStatus(rate_hz=250.0, rate_origin="device", jitter_s=12e-6)
    assert rate_text(status) == "250 Hz device (jitter 12.0 us)"
    assert rate_text(PipelineStatus(rate_hz=250.0, rate_origin="declared")) == "250 Hz declared"
