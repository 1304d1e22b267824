"""A replayed gap comes where it was recorded, among the rows, not just somewhere.

The block-source contract (DEVELOPERS.md, gap order): the gaps take_gaps() returns
after a read_block() came before that read's rows. So the rows and gaps a replay hands
out, put in that order, must be the recording itself: the `# gap:` line between row
4999 and row 5000 stays there, a loop's restart sits between the last row and the
first row again, and a seek's jump sits before the rows after it. One ordered list is
kept, so a gap handed out a block late cannot hide.
"""

from __future__ import annotations

import numpy as np
from replay_helpers import weigh_station, write_recording

from replay.player import ReplaySource


def replayed(source: ReplaySource, reads: int = 10_000) -> list[object]:
    """Rows (their load value) and gap reasons in the order the contract puts them."""
    out: list[object] = []
    for _ in range(reads):
        if source.state == "ended":
            break
        block = source.read_block(0.05)
        out += source.take_gaps()                # these came before the block's rows
        if block is not None:
            out += block.values[:, 0].tolist()
    out += source.take_gaps()
    return out


def test_a_recorded_gap_is_handed_out_between_the_rows_it_was_recorded_between(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(20000)            # more rows than one read hands out
    write_recording(path, values, gaps_at=(5000, 12000))
    seen = replayed(ReplaySource(path, speed=None))
    expected = (values[:5000, 0].tolist() + ["reconnected at row 5000"]
                + values[5000:12000, 0].tolist() + ["reconnected at row 12000"]
                + values[12000:, 0].tolist())
    assert seen == expected


def test_a_loop_restart_sits_between_the_last_and_the_first_row(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(300)
    write_recording(path, values)
    source = ReplaySource(path, speed=None, loop=True)
    seen: list[object] = []
    while source.loops < 2:
        block = source.read_block(0.05)
        seen += source.take_gaps()
        if block is not None:
            seen += block.values[:, 0].tolist()
    source.close()
    once = values[:, 0].tolist()
    restart = "replay started again from the beginning (loop)"
    assert seen[:len(once) * 2 + 2] == once + [restart] + once + [restart]


def test_a_seek_jump_comes_before_the_rows_after_it(tmp_path):
    path = tmp_path / "rec.csv"
    values = weigh_station(1000)                 # 4 s at 250 Hz
    write_recording(path, values)
    source = ReplaySource(path, speed=None)
    first = source.read_block(0.05)
    assert first is not None and source.take_gaps() == []
    source.seek(2.0)                             # row 500 is 2.0 s after row 0
    seen = replayed(source)
    assert seen[0] == "replay jumped to 2 s"
    rows = np.array(seen[1:])
    np.testing.assert_array_equal(rows, values[500:, 0])
