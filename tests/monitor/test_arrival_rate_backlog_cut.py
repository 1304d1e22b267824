"""The arrival-rate fit cuts a backlog that drains at the link's limit.

A board writing 35-byte lines at 250 Hz over 115200 baud (8N1: 10 bits a byte, so
11520 bytes/s, 329 lines/s) uses 76 % of its link. Held up for 0.4 s (the port opened
late, or the host stalled), it drains the backlog at the link's 329 lines/s for about
1.3 s before the stream is steady again. Those points sit below the steady line; a
plain Theil-Sen slope over them (scipy.stats.theilslopes, the estimator the fit is
built on) reads about 2 % high, so this checks that monitor.arrival_rate cuts them.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import theilslopes

from monitor.arrival_rate import BIN_S, ArrivalRate, robust_rate

RATE_HZ = 250.0
LINK_LINES_PER_S = 115200 / 10 / 35      # 8N1 framing: 10 bits on the wire per byte
AHEAD_S = 0.4                            # samples waiting when the reads begin


def arrivals(seconds: float, read_every_s: float = 0.001) -> tuple[np.ndarray, np.ndarray]:
    """(read times s, cumulative samples): the board's samples, no faster than the link."""
    t = np.arange(1, int(round(seconds / read_every_s)) + 1) * read_every_s
    produced = np.floor((t + AHEAD_S) * RATE_HZ)
    carried = np.floor(t * LINK_LINES_PER_S)
    return t, np.minimum(produced, carried)


def test_a_backlog_drained_at_the_link_limit_is_cut_from_the_fit():
    t, count = arrivals(4.0)
    # thinned as the live path does: the newest read in each BIN_S bin
    bins = np.floor(t / BIN_S)
    last = np.flatnonzero(np.diff(bins, append=np.inf) > 0)
    t, count = t[last], count[last]
    plain = theilslopes(count, t)[0]
    assert abs(plain / RATE_HZ - 1) > 0.015          # the trap is real
    fit = robust_rate(t, count)
    assert fit is not None and fit[0] == pytest.approx(RATE_HZ, rel=1e-3)


def test_the_session_rate_of_such_a_start_is_the_boards_rate():
    t, count = arrivals(4.0)
    est = ArrivalRate(live=False)                  # as the recorder measures its trailer
    reads = np.flatnonzero(np.diff(count, prepend=0.0) > 0)
    for i in reads:
        est.add(1000.0 + t[i], int(count[i] - (count[i - 1] if i else 0.0)))
    session = est.session()
    assert session is not None and session.rate_hz == pytest.approx(RATE_HZ, rel=1e-3)
    assert session.samples == int(count[-1])
