"""The simulated weigh-station board behind pyserial's URL mechanism."""

from __future__ import annotations

import numpy as np
import pytest
import serial

from monitor.errors import UserError
from monitor.sim.weighstation import MAINS_HZ, WeighStation, channel_names
from monitor.sources import open_byte_source, register_sim_scheme


def collect_lines(url: str, count: int) -> list[str]:
    src = open_byte_source(url)
    data = b""
    try:
        while data.count(b"\n") < count:
            data += src.read(0.1)
    finally:
        src.close()
    return data.decode().split("\r\n")


def test_banner_header_then_rows():
    lines = collect_lines("sim://?rate=2000&seed=3", 50)
    assert lines[0] == ""                      # the banner's line end: a partial-line guard
    assert lines[1] == "load[kg],current[A],vib[g]"
    rows = [list(map(float, line.split(","))) for line in lines[2:40]]
    assert all(len(r) == 3 for r in rows)


def test_serial_for_url_opens_sim():
    register_sim_scheme()
    port = serial.serial_for_url("sim://?rate=1000&pace=0", timeout=0.5)
    assert port.__class__.__module__ == "monitor.sim.protocol_sim"
    assert len(port.read(100)) == 100
    port.close()


def test_same_seed_same_stream_flood():
    a = collect_lines("sim://?pace=0&seed=5", 300)[:250]
    b = collect_lines("sim://?pace=0&seed=5", 300)[:250]
    c = collect_lines("sim://?pace=0&seed=6", 300)[:250]
    assert a == b and a != c


def test_counter_and_clock_columns():
    lines = collect_lines("sim://?rate=500&pace=0&seq=1&clock=1", 40)
    assert lines[1] == "seq,t_s[s],load[kg],current[A],vib[g]"
    seq = [int(line.split(",")[0]) for line in lines[2:30]]
    assert seq == list(range(28))
    t = [float(line.split(",")[1]) for line in lines[2:30]]
    assert np.allclose(np.diff(t), 1 / 500)


def test_drop_option_leaves_counter_gaps():
    lines = collect_lines("sim://?pace=0&seq=1&drop=0.2&seed=2", 400)
    seq = np.array([int(line.split(",")[0]) for line in lines[2:300]])
    assert (np.diff(seq) > 1).any() and (np.diff(seq) >= 1).all()


def test_glitch_option_makes_bad_lines():
    lines = collect_lines("sim://?pace=0&glitch=0.1&seed=2", 400)[2:300]
    bad = [line for line in lines if "#?" in line]
    assert 10 < len(bad) < 60


@pytest.mark.parametrize("url, word", [
    ("sim://?rate=-1", "rate"),
    ("sim://?format=morse", "format"),
    ("sim://?volume=11", "unknown"),
    ("sim://?channels=0", "channels"),
])
def test_bad_options(url, word):
    with pytest.raises(UserError, match=word):
        open_byte_source(url)


def test_eight_channel_names():
    names = [n for n, _ in channel_names(8)]
    assert names == ["load", "current", "vib", "load2", "current2", "vib2", "load3", "current3"]


def test_signal_has_mains_and_parcels():
    board = WeighStation(250.0, 3, seed=1)
    x = board.generate(250 * 60)
    load = x[:, 0]
    # parcels: the load rises well above the 2 kg tare several times a minute
    assert (load > 4.0).mean() > 0.1
    # 50 Hz pickup visible in the current channel's spectrum (demo data, invented level)
    cur = x[:, 1] - x[:, 1].mean()
    spectrum = np.abs(np.fft.rfft(cur))
    freqs = np.fft.rfftfreq(len(cur), 1 / 250.0)
    assert abs(freqs[np.argmax(spectrum[freqs > 5]) + np.sum(freqs <= 5)] - MAINS_HZ) < 0.5
