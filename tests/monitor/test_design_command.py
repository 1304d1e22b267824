"""`tunetrace design`: text and JSON output, channel selection and error exits."""

from __future__ import annotations

import json

import numpy as np
import pytest

from filters.design import design_stage
from filters.spec import StageSpec
from monitor.cli import main

WEIGH = """\
rate_hz = 250.0

[[stage]]
kind = "median"
window = 5

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
channels = ["load"]

[[stage]]
kind = "rc-lowpass"
cutoff_hz = 8.0
method = "tustin-prewarp"

[[stage]]
kind = "butterworth"
order = 2
cutoff_hz = 3.0
channels = ["current"]
bypass = true
"""


@pytest.fixture
def chain(tmp_path):
    def write(text: str = WEIGH, name: str = "weigh.toml") -> str:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return str(path)
    return write


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(["design", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_text_output(chain, capsys):
    code, out, err = run(capsys, chain(), "--rate", "250")
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert all(len(line) <= 80 for line in lines[1:]), [ln for ln in lines if len(ln) > 80]
    assert "rate 250 Hz (from --rate)\nlag figures at each first cutoff, else 1 Hz" in out
    # median of 5: a delay of (5 - 1)/2 = 2 samples = 8 ms at 250 Hz (common practice)
    assert "  at 1 Hz: group delay 8 ms, phase lag 2.9 deg (8 ms)" in out  # median: 2 samples
    # RC at its cutoff lags 45 deg, i.e. 45/360/8 s = 15.6 ms of phase delay, any
    # electronics handbook (the 10 ms group delay is checked against
    # scipy.signal.group_delay in tests/monitor/tui/test_lag_readout.py)
    assert "  at 8 Hz: group delay 10 ms, phase lag 45.0 deg (15.6 ms)" in out  # RC at cutoff
    assert "stage 1: median (all channels)" in out
    assert "stage 2: notch (channels load)" in out
    assert "stage 4: butterworth (channels current; BYPASSED; method tustin-prewarp)" in out
    notch = design_stage(StageSpec("notch", {"freq_hz": 50.0, "q": 30.0}), 250.0)
    row = ", ".join(f"{v:.12g}" for v in notch.sos[0, :3])
    assert f"section 1  b = [{row}]" in out
    # notch -3 dB bandwidth f0/Q = 50/30 Hz around 50 Hz (scipy.signal.iirnotch: Q = w0/bw,
    # after Orfanidis, Introduction to Signal Processing, 1996): 49.17 and 50.84 Hz
    assert "-3 dB at 49.17, 50.84 Hz" in out
    assert "analog dB" in out  # the rc-lowpass table compares with its prototype
    assert "channel load: 1 median, 2 notch, 3 rc-lowpass" in out
    assert "channel current: 1 median, 3 rc-lowpass" in out  # stage 4 is bypassed
    assert "channel other channels: 1 median, 3 rc-lowpass" in out
    assert "Caution:" in out and "control loop" in out


def test_json_output(chain, capsys):
    code, out, _ = run(capsys, chain(), "--json", "--at", "5")
    assert code == 0
    data = json.loads(out)
    assert data["rate_hz"] == 250.0 and data["rate_origin"] == "the chain file's rate_hz"
    assert data["at_hz"] == 5.0
    assert [s["kind"] for s in data["stages"]] == ["median", "notch", "rc-lowpass", "butterworth"]
    assert data["stages"][3]["bypass"] is True
    rc = design_stage(StageSpec("rc-lowpass", {"cutoff_hz": 8.0}), 250.0)
    np.testing.assert_array_equal(data["stages"][2]["coefficients"]["sos"], rc.sos)
    assert data["stages"][2]["minus3db_hz"] == pytest.approx([8.0], rel=1e-9)
    assert data["stages"][0]["coefficients"] == {} and data["stages"][0]["noise_gain"] is None
    names = [c["channel"] for c in data["channels"]]
    assert names == ["load", "current", "other channels"]
    load = data["channels"][0]
    assert load["stages"] == [0, 1, 2] and load["at_hz"] == 5.0
    assert load["group_delay_ms"] > data["channels"][2]["group_delay_ms"]


def test_channels_option_and_default_analysis_frequency(chain, capsys):
    code, out, _ = run(capsys, chain(), "--json", "--channels", "vib,load")
    data = json.loads(out)
    assert code == 0 and data["at_hz"] is None
    assert [c["at_hz"] for c in data["channels"]] == [8.0, 8.0]  # each chain's first cutoff
    assert [s["at_hz"] for s in data["stages"]] == [1.0, 1.0, 8.0, 3.0]
    assert [c["channel"] for c in data["channels"]] == ["vib", "load"]
    assert data["channels"][0]["stages"] == [0, 2]


def test_warnings_are_printed(chain, capsys):
    text = '[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 60.0\nmethod = "matched"\n'
    code, out, _ = run(capsys, chain(text), "--rate", "250")
    assert code == 0 and "warning: T = 0.004 s is too long for matched" in out
    assert "  at 60 Hz: group delay" in out


def test_rate_missing_is_one_sentence(chain, capsys):
    code, out, err = run(capsys, chain('[[stage]]\nkind = "median"\nwindow = 3\n'))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "--rate" in err and "rate_hz" in err


@pytest.mark.parametrize("text,needle", [
    (WEIGH.replace("cutoff_hz = 8.0", "cutoff_hz = 300.0"),
     "stage 3 (rc-lowpass): cutoff_hz = 300 Hz is outside the allowed range"),
    (WEIGH.replace("window = 5", "window = 4"), "stage 1 (median): window = 4 must be odd"),
    (WEIGH.replace('method = "tustin-prewarp"', 'method = "forward-euler"').replace(
        "rate_hz = 250.0", "rate_hz = 20.0").replace("freq_hz = 50.0", "freq_hz = 5.0"),
     "largest stable sample time is 0.0397887 s"),
    (WEIGH.replace("q = 30.0", "qq = 30.0"), "qq"),
    ("[[stage]\n", "not valid TOML"),
])
def test_bad_chain_exits_2_with_one_sentence(chain, capsys, text, needle):
    code, out, err = run(capsys, chain(text))
    assert code == 2 and out == ""
    assert err.startswith("tunetrace design: ") and err.count("\n") == 1
    assert needle in err and "Traceback" not in err


def test_missing_file_and_bad_at(chain, capsys, tmp_path):
    code, _, err = run(capsys, str(tmp_path / "nope.toml"), "--rate", "250")
    assert code == 2 and "does not exist" in err
    code, _, err = run(capsys, chain(), "--at", "125")
    assert code == 2 and "--at 125 is outside the allowed range 0 <= HZ < 125" in err
