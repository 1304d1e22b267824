"""The arrival-rate estimator on synthetic arrival times: backlog bursts, 1 ms packets,
pauses and jitter. The reference is the rate the synthetic board is built with."""

from __future__ import annotations

import numpy as np
import pytest

from monitor.arrival_rate import ArrivalRate, robust_rate

READ_LIMIT = 800          # samples a read takes at most (a 64 KiB batch of ~80-byte lines)


def feed(est: ArrivalRate, rate: float, seconds: float, *, head_start: float = 0.0,
         packet_s: float = 0.0, jitter_s: float = 0.0, read_every_s: float = 0.001,
         pause: tuple[float, float] | None = None, stall: tuple[float, float] | None = None,
         seed: int = 1, t0: float = 1000.0) -> list[float]:
    """Play a board producing sample k at k/rate - head_start (s after the port opened) to
    a reader polling every read_every_s. packet_s: bytes leave the board in packets every
    packet_s (USB full-speed CDC: 1 ms). jitter_s: each read's arrival is late by up to
    this much. pause: the board sends nothing in (start, end) and does not catch up.
    stall: the host reads nothing in (start, end), then takes the waiting backlog.
    Returns the times (s since open) at which the estimate first settled."""
    rng = np.random.default_rng(seed)
    got, t, settled_at = 0, 0.0, []
    paused = 0.0
    while t < seconds:
        t += read_every_s
        if stall and stall[0] <= t < stall[1]:
            continue
        seen = t - rng.uniform(0, jitter_s) if jitter_s else t
        if packet_s:
            seen = np.floor(seen / packet_s) * packet_s
        if pause and seen >= pause[0]:
            paused = min(seen, pause[1]) - pause[0]
        produced = int(max(0.0, seen - paused + head_start) * rate)
        n = min(produced - got, READ_LIMIT)
        if n > 0:
            est.add(t0 + t, n)
            got += n
        if est.settled() and not settled_at:
            settled_at.append(t)
    return settled_at


def naive_rate(rate: float, head_start: float, seconds: float) -> float:
    """What count / span gives when the backlog counts (the estimator this one replaced)."""
    return (head_start + seconds) * rate / seconds


@pytest.mark.parametrize("head_start", [0.0, 0.4, 1.0, 1.4, 2.0])
@pytest.mark.parametrize("packet_s", [0.0, 0.001])
def test_backlog_at_open_does_not_move_the_rate(head_start, packet_s):
    est = ArrivalRate()
    settled_at = feed(est, 1000.0, 3.0, head_start=head_start, packet_s=packet_s,
                      jitter_s=0.0005)
    assert settled_at and settled_at[0] < 3.0
    assert est.rate() == pytest.approx(1000.0, rel=2e-3)
    assert est.session().rate_hz == pytest.approx(1000.0, rel=5e-4)
    if head_start >= 1.0:     # the mean over the session would be off by a third or more
        assert abs(naive_rate(1000.0, head_start, 3.0) / 1000.0 - 1) > 0.3


def test_backlog_delivered_over_many_reads_is_cut():
    # a board 2 s ahead at 250 Hz whose backlog drains 5 samples per 1 ms read (0.1 s)
    t = np.arange(1, 3001) * 0.001
    got = np.zeros(t.size)
    for i, now in enumerate(t):
        before = got[i - 1] if i else 0.0
        got[i] = min(np.floor((now + 2.0) * 250.0), before + 5)
    fit = robust_rate(t, got)
    assert fit is not None and fit[0] == pytest.approx(250.0, rel=1e-3)
    assert (got[-1] - got[0]) / (t[-1] - t[0]) > 1.15 * 250.0     # the mean is fooled


def test_jitter_and_late_reads_do_not_bend_the_fit():
    est = ArrivalRate()
    feed(est, 500.0, 6.0, jitter_s=0.004, read_every_s=0.003, packet_s=0.001, seed=7)
    assert est.rate() == pytest.approx(500.0, rel=1e-3)
    assert est.session().rate_hz == pytest.approx(500.0, rel=3e-4)


def test_a_pause_restarts_the_fit_and_the_rate_holds():
    est = ArrivalRate()
    feed(est, 1000.0, 6.0, pause=(3.0, 4.0), jitter_s=0.0005)
    # the board was silent for a second: a fit across it would read about 5/6 of the rate
    assert est.rate() == pytest.approx(1000.0, rel=2e-3)
    assert est.session().rate_hz == pytest.approx(1000.0, rel=5e-4)
    assert len(est._segments) == 2


def test_a_host_stall_then_its_backlog_does_not_move_the_rate():
    est = ArrivalRate()
    feed(est, 1000.0, 7.0, stall=(3.0, 3.8), jitter_s=0.0005)
    assert est.rate() == pytest.approx(1000.0, rel=2e-3)
    assert est.session().rate_hz == pytest.approx(1000.0, rel=5e-4)


def test_settles_only_when_stable():
    est = ArrivalRate()
    for i in range(100):                     # 1 s of a read every 10 ms: too short
        est.add(i * 0.01, 1)
    assert est.estimate() == pytest.approx(100.0) and not est.settled()
    est2 = ArrivalRate()
    rng = np.random.default_rng(3)
    t = 0.0
    for _ in range(300):                     # 3 s of arrivals whose spacing swings wildly
        t += rng.choice([0.002, 0.03])
        est2.add(t, 1)
        assert not est2.settled() or est2.rate() == pytest.approx(
            est2.estimate(), rel=1e-3)


def test_a_rate_change_is_followed_once_the_window_is_past_it():
    est = ArrivalRate()
    t, k = 0.0, 0
    while t < 12.0:
        t += 0.001
        rate = 1000.0 if t < 4.0 else 1010.0
        due = int(4.0 * 1000.0 + (t - 4.0) * rate) if t >= 4.0 else int(t * rate)
        if due > k:
            est.add(t, due - k)
            k = due
        if 3.5 < t < 4.0:
            assert est.rate() == pytest.approx(1000.0, rel=1e-3)
    assert est.rate() == pytest.approx(1010.0, rel=1e-3)


def test_restart_after_a_source_gap_keeps_the_rate():
    est = ArrivalRate()
    for i in range(301):
        est.add(i * 0.01, 1)
    assert est.settled()
    est.restart()
    est.add(100.0, 1)
    est.add(100.5, 50)
    assert est.rate() == pytest.approx(100.0) and est.estimate() == pytest.approx(100.0)
