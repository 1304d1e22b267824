"""Replay pacing held to both bounds at every read, whatever the machine's load.

ReplaySource releases a row when its recording time is due: at speed s, a read that
starts at wall time w0 and returns at w1 hands out every row up to s * (w0 - start) of
recording time and none beyond s * (w1 - start), start being the first read. Both
bounds hold exactly for each read (a slow machine only makes the reads fewer), so
they are checked on every read instead of timing a whole replay with a generous
margin, and they tell a speed applied the wrong way round in either direction. After
a pause the clock starts again: resuming must not release the paused time at once.
"""

from __future__ import annotations

import time

import pytest
from replay_helpers import RATE_HZ, weigh_station, write_recording

from replay.player import ReplaySource

STEP = 1 / RATE_HZ
EPS = 2e-5                     # the file's t_host has 6 decimals


def read_on(source: ReplaySource, wall_s: float) -> list[tuple[float, float, float, float]]:
    """Read for wall_s seconds (or to the end): (w0, w1, oldest, newest t_host) per read
    that returned rows, w0 and w1 the wall times around the read_block call."""
    reads = []
    end = time.monotonic() + wall_s
    while source.state != "ended" and time.monotonic() < end:
        w0 = time.monotonic()
        block = source.read_block(0.02)
        w1 = time.monotonic()
        if block is not None:
            reads.append((w0, w1, float(block.t_host[0]), float(block.t_host[-1])))
    return reads


def check_bounds(reads: list, speed: float, last_t: float = float("inf")) -> None:
    """Each read against the rule of the module docstring: the clock starts in the first
    read, at its first row; last_t: the recording's last row (nothing is due after it)."""
    start0, start1, first_t, _ = reads[0]
    for w0, w1, _, newest in reads:
        released = newest - first_t
        assert released <= speed * (w1 - start0) + STEP + EPS, (released, w1 - start0)
        due = min(speed * (w0 - start1), last_t - first_t)
        assert released >= due - STEP - EPS, (released, due)


@pytest.mark.parametrize("speed,rows", [(4.0, 500), (0.5, 60), (1.0, 100)])
def test_every_read_releases_what_is_due_at_the_speed_and_nothing_more(tmp_path, speed,
                                                                       rows):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(rows))
    source = ReplaySource(path, speed=speed)
    reads = read_on(source, 30.0)
    assert source.state == "ended"
    first_t, last_t = reads[0][2], reads[-1][3]
    assert last_t - first_t == pytest.approx((rows - 1) * STEP, abs=EPS)   # every row
    check_bounds(reads, speed, last_t)


def test_a_resumed_replay_does_not_release_the_paused_time_at_once(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(250))          # 1 s at 250 Hz
    source = ReplaySource(path, speed=1.0)
    before = read_on(source, 0.2)
    source.pause()
    assert source.read_block(0.01) is None
    time.sleep(0.3)
    source.resume()
    after = read_on(source, 0.2)
    assert after and after[0][2] == pytest.approx(before[-1][3] + STEP, abs=EPS)
    check_bounds(before, 1.0)
    check_bounds(after, 1.0)      # the clock starts again at the row after the pause
