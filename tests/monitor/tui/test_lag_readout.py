"""The lag readout agrees with scipy.signal.group_delay: filters.analysis.group_delay_s, the
terminal view's ChainSession.lag_ms on a live pipeline (real pty) and `design --json`, for a
Butterworth, an RC and a chain with a notch, on the designed SOS."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import signal

from filters.analysis import group_delay_s
from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from monitor.cli import main
from monitor.tui.session import ChainSession

RATE = 250.0
CHAINS = {
    "butterworth": 'rate_hz = 250.0\n[[stage]]\nkind = "butterworth"\norder = 4\n'
                   'cutoff_hz = 8.0\n',
    "rc": 'rate_hz = 250.0\n[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 5.0\n',
    "notch chain": 'rate_hz = 250.0\n[[stage]]\nkind = "median"\nwindow = 5\n'
                   '[[stage]]\nkind = "notch"\nfreq_hz = 50.0\nq = 30.0\n'
                   '[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 8.0\n',
}
AT_HZ = (1.0, 5.0, 8.0, 45.0)


def scipy_lag_ms(chain: ChainSet, channel: str, freq_hz: float) -> float:
    """Reference: scipy.signal.group_delay of each designed SOS section, summed (the group
    delay of a cascade is the sum of its sections'); a median counts as its
    (window - 1)/2-sample delay, as the readout documents."""
    samples = 0.0
    for _, d in chain.designs_for(channel):
        if d.sos is None:
            samples += d.delay_samples
            continue
        for section in d.sos:
            _, gd = signal.group_delay((section[:3], section[3:]), w=[freq_hz], fs=RATE)
            samples += float(gd[0])
    return 1e3 * samples / RATE


@pytest.mark.parametrize("name", list(CHAINS))
def test_group_delay_s_and_design_report_equal_scipy(name, tmp_path, capsys):
    spec = parse_chain(CHAINS[name])
    chain = ChainSet(spec, ("load",), RATE)
    path = tmp_path / "chain.toml"
    path.write_text(CHAINS[name])
    for at in AT_HZ:
        ref = scipy_lag_ms(chain, "load", at)
        designs = [d for _, d in chain.designs_for("load")]
        assert 1e3 * group_delay_s(designs, at) == pytest.approx(ref, rel=1e-9)
        assert main(["design", str(path), "--json", "--at", str(at)]) == 0
        report = json.loads(capsys.readouterr().out)
        (channel,) = report["channels"]
        assert channel["at_hz"] == at
        assert channel["group_delay_ms"] == pytest.approx(ref, rel=1e-9)


def test_the_terminal_views_lag_equals_scipy_on_a_live_pipeline(start_pipeline):
    spec = parse_chain(CHAINS["notch chain"])
    pipeline = start_pipeline(spec)
    session = ChainSession(pipeline)
    session.sync()
    assert session.ready
    for channel in session.channels:
        for at in AT_HZ:
            ref = scipy_lag_ms(session.chain, channel, at)
            assert session.lag_ms(channel, at) == pytest.approx(ref, rel=1e-9)
    # the readout honours the frequency: not one number for every frequency
    lags = np.array([session.lag_ms("load", f) for f in AT_HZ])
    assert np.ptp(lags) > 1.0
