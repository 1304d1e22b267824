"""Exported C, compiled by the real gcc, against scipy.signal, numpy and the integer model."""

from __future__ import annotations

import platform
import subprocess

import numpy as np
import pytest
from scipy import signal

from filters.chainset import ChainSet
from filters.fixedpoint import Q15, FixedChainModel, from_fixed, q_format, to_fixed
from monitor.export.ccode import fixed_stages

EVERY_KIND = """
rate_hz = 250.0
[[stage]]
kind = "median"
window = 5
channels = ["load"]
[[stage]]
kind = "notch"
freq_hz = 50.0
q = 5.0
channels = ["load"]
[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 20.0
channels = ["load"]
[[stage]]
kind = "rlc-notch"
centre_hz = 18.0
q = 3.0
channels = ["load"]
[[stage]]
kind = "gain"
scale = 0.8
offset = 0.05
channels = ["load"]
[[stage]]
kind = "moving-average"
window = 10
channels = ["current"]
[[stage]]
kind = "ema"
alpha = 0.2
start = "zero"
channels = ["current"]
[[stage]]
kind = "rc-lowpass"
cutoff_hz = 30.0
method = "backward-euler"
channels = ["current"]
[[stage]]
kind = "rl-lowpass"
cutoff_hz = 40.0
method = "zoh"
channels = ["current"]
[[stage]]
kind = "second-order-lowpass"
cutoff_hz = 25.0
q = 0.9
channels = ["current"]
[[stage]]
kind = "dc-block"
cutoff_hz = 0.5
channels = ["vib"]
[[stage]]
kind = "rc-highpass"
cutoff_hz = 1.0
channels = ["vib"]
[[stage]]
kind = "rl-highpass"
cutoff_hz = 2.0
method = "matched"
channels = ["vib"]
[[stage]]
kind = "rlc-bandpass"
centre_hz = 18.0
q = 2.0
channels = ["vib"]
[[stage]]
kind = "bessel"
order = 3
cutoff_hz = 40.0
channels = ["vib"]
[[stage]]
kind = "chebyshev1"
order = 2
band = "bandpass"
low_hz = 10.0
high_hz = 30.0
ripple_db = 0.5
channels = ["vib"]
[[stage]]
kind = "butterworth"
order = 2
cutoff_hz = 60.0
bypass = true
"""
CHANNELS = ["load", "current", "vib"]


def relative_error(got: np.ndarray, want: np.ndarray) -> np.ndarray:
    """Per column: max |got - want| / max |want|."""
    return np.max(np.abs(got - want), axis=0) / np.maximum(np.max(np.abs(want), axis=0), 1e-30)


def vectors(built) -> tuple[np.ndarray, np.ndarray]:
    name = f"{built.plan.prefix}_vectors.csv"
    dtype = np.int64 if built.plan.fixed else np.float64
    table = np.loadtxt(built.directory / name, delimiter=",", skiprows=1, dtype=dtype, ndmin=2)
    k = len(built.plan.channels)
    return table[:, :k], table[:, k:]


@pytest.mark.parametrize("target,double", [("c-float", False), ("c-float", True),
                                           ("c-q15", False), ("c-q31", False)])
def test_every_kind_compiles_and_reproduces_its_vectors(export_build, target, double):
    built = export_build(EVERY_KIND, target, CHANNELS, full_scale=2.0, double=double)
    x, want = vectors(built)
    assert x[0].any()                                  # starts off zero: exercises steady start
    got = built.run(x)
    if built.plan.fixed:
        assert np.array_equal(got, want)               # bit-exact
        fmt = q_format(target)
        assert (x == fmt.max_int).any()                # the tail drives full scale
    else:
        assert np.all(relative_error(got, want) < (1e-12 if double else 1e-5))
    # no heap, no libm, no library calls at all: the object has no undefined symbols
    obj = built.directory / "weigh.o"
    subprocess.run(["gcc", "-std=c99", "-O2", "-c", "-o", str(obj),
                    str(built.directory / "weigh.c")], check=True, timeout=60)
    undefined = subprocess.run(["nm", "-u", str(obj)], capture_output=True, text=True,
                               check=True).stdout.split()
    assert undefined == []
    assert "bypassed" in built.texts["weigh.c"]


def weigh_station(n: int, rate: float = 250.0) -> np.ndarray:
    """Demo-like load cell (kg): 12 kg, parcels as steps, 50 Hz mains, 18 Hz belt, noise."""
    rng = np.random.default_rng(5)
    t = np.arange(n) / rate
    load = 12.0 + 3.5 * (t > 0.8) + 2.0 * (t > 2.1)
    return (load + 0.4 * np.sin(2 * np.pi * 50 * t) + 0.25 * np.sin(2 * np.pi * 18 * t)
            + 0.05 * rng.standard_normal(n))


def test_float_matches_scipy_sosfilt_steady_and_zero_start(export_build):
    chain = """
    [[stage]]
    kind = "notch"
    freq_hz = 50.0
    q = 5.0
    channels = ["load"]
    [[stage]]
    kind = "butterworth"
    order = 4
    cutoff_hz = 20.0
    channels = ["load"]
    [[stage]]
    kind = "butterworth"
    order = 4
    cutoff_hz = 20.0
    start = "zero"
    channels = ["raw"]
    """
    built = export_build(chain, "c-float", ["load", "raw"])
    x = weigh_station(1500).astype(np.float32).astype(np.float64)
    got = built.run(np.column_stack([x, x]))
    # references from scipy.signal alone (not our designer): iirnotch, butter, sosfilt
    notch = signal.tf2sos(*signal.iirnotch(50.0, 5.0, fs=250.0))
    butter = signal.butter(4, 20.0, fs=250.0, output="sos")
    both = np.vstack([notch, butter])
    steady = signal.sosfilt(both, x, zi=signal.sosfilt_zi(both) * x[0])[0]
    zero = signal.sosfilt(butter, x)
    assert np.all(relative_error(got, np.column_stack([steady, zero])) < 1e-5)
    assert abs(got[0, 0] - x[0]) < 1e-5 * abs(x[0])   # steady start: no ramp from zero


def test_median_moving_average_and_gain_match_numpy(export_build):
    chain = """
    [[stage]]
    kind = "median"
    window = 7
    channels = ["a"]
    [[stage]]
    kind = "moving-average"
    window = 10
    channels = ["b"]
    [[stage]]
    kind = "gain"
    scale = -2.5
    offset = 0.75
    channels = ["c"]
    """
    built = export_build(chain, "c-float", ["a", "b", "c"])
    rng = np.random.default_rng(11)
    x = (3.0 + rng.standard_normal((5000, 3))).astype(np.float32).astype(np.float64)
    got = built.run(x)
    pad = np.concatenate([np.full(6, x[0, 0]), x[:, 0]])        # steady: history of x[0]
    median = np.median(np.lib.stride_tricks.sliding_window_view(pad, 7), axis=1)
    pad = np.concatenate([np.full(9, x[0, 1]), x[:, 1]])
    mean = np.convolve(pad, np.full(10, 0.1), mode="valid")
    want = np.column_stack([median, mean, -2.5 * x[:, 2] + 0.75])
    assert np.array_equal(got[:, 0].astype(np.float32), median.astype(np.float32))
    assert np.all(relative_error(got, want) < 1e-5)


@pytest.mark.parametrize("target", ["c-q15", "c-q31"])
def test_fixed_point_is_bit_exact_and_within_the_stated_bound(export_build, target):
    built = export_build(EVERY_KIND, target, CHANNELS, full_scale=2.0)
    fmt = q_format(target)
    rng = np.random.default_rng(2)
    n = 3000
    units = 0.4 + 0.3 * np.sin(np.arange(n)[:, None] * [0.03, 0.11, 0.2]) \
        + 0.05 * rng.standard_normal((n, 3))
    units *= 2.0 * 0.5                       # half of the +-2.0 full scale: no saturation
    q = to_fixed(units, 2.0, fmt)
    got = built.run(q)
    for k, ch in enumerate(built.plan.channels):
        model = FixedChainModel(fixed_stages(ch, target)).process(q[:, k])
        assert np.array_equal(got[:, k], model)
    reference = ChainSet(built.spec, CHANNELS, 250.0).process(units)   # float64 chain
    for k, ch in enumerate(built.report.channels):
        err = np.max(np.abs(from_fixed(got[:, k], 2.0, fmt) - reference[:, k]))
        assert err <= ch.error_bound * ch.full_scale, (ch.channel, err)


def test_rc_worked_example_float_and_q15(export_build):
    # common practice: backward-Euler RC low-pass 5 Hz at 100 Hz, a = 0.2391, 1 - a = 0.7609
    chain = """
    [[stage]]
    kind = "rc-lowpass"
    cutoff_hz = 5.0
    method = "backward-euler"
    start = "zero"
    """
    step = np.ones((30, 1))
    f = export_build(chain, "c-float", rate=100.0)
    a = 0.01 / (0.01 + 1 / (2 * np.pi * 5.0))
    assert round(a, 4) == 0.2391
    n = np.arange(30)
    assert np.allclose(f.run(step)[:, 0], 1 - (1 - a) ** (n + 1), rtol=1e-6, atol=1e-7)
    q = export_build(chain, "c-q15", rate=100.0)
    assert "{7833, 0, 0, -24935, 0," in q.texts["weigh.c"]   # round(0.2390572 * 2^15)
    got = q.run(np.full((30, 1), 16384))[:, 0]
    y, expect = 0, []
    for _ in range(30):
        y = (16384 + 7833 * 16384 + 24935 * y) >> 15
        expect.append(y)
    assert got.tolist() == expect


HARNESS = """
#include <stdio.h>
#include "weigh.h"
int main(void)
{
    weigh_load_chain c;
    int i;
    weigh_load_init(&c);
    for (i = 0; i < 3; i++) printf("%.9g\\n", (double)weigh_load_step(&c, 2.5f));
    for (i = 0; i < 50; i++) weigh_load_step(&c, -7.0f);
    weigh_load_reset(&c);
    for (i = 0; i < 3; i++) printf("%.9g\\n", (double)weigh_load_step(&c, 2.5f));
    return 0;
}
"""


def test_steady_start_equals_python_and_reset_restarts(export_build):
    chain = """
    [[stage]]
    kind = "bessel"
    order = 4
    cutoff_hz = 10.0
    channels = ["load"]
    [[stage]]
    kind = "moving-average"
    window = 5
    channels = ["load"]
    [[stage]]
    kind = "gain"
    scale = 2.0
    offset = 1.0
    channels = ["load"]
    """
    built = export_build(chain, "c-float")
    exe = built.compile_main(HARNESS)
    out = np.array(subprocess.run([str(exe)], capture_output=True, text=True, check=True,
                                  timeout=30).stdout.split(), dtype=float)
    python = ChainSet(built.spec, ["load"], 250.0).process(np.full((3, 1), 2.5))[:, 0]
    assert np.allclose(python, 6.0)           # 2 * 2.5 + 1: the Python start has no transient
    assert np.allclose(out[:3], python, rtol=1e-6)
    assert np.array_equal(out[3:], out[:3])   # reset: the same start again


def test_q15_saturation_in_c_matches_the_model(export_build):
    chain = """
    [[stage]]
    kind = "butterworth"
    order = 4
    cutoff_hz = 20.0
    """
    built = export_build(chain, "c-q15")
    x = np.where((np.arange(1200) // 100) % 2 == 0, 32767, -32768)
    got = built.run(x[:, None])[:, 0]
    model = FixedChainModel(fixed_stages(built.plan.channels[0], "c-q15")).process(x)
    assert np.array_equal(got, model)
    assert got.max() == Q15.max_int and got.min() == Q15.min_int


def test_selftest_rejects_bad_rows_with_the_line_number(export_build):
    built = export_build('[[stage]]\nkind = "ema"\nalpha = 0.5\n', "c-q15")
    bad = subprocess.run([str(built.selftest)], input="signal\n12\n40000\n", capture_output=True,
                         text=True, timeout=30)
    assert bad.returncode == 1 and "line 3" in bad.stderr and "Q15" in bad.stderr
    assert bad.stdout.strip() == "12"      # the header row is skipped, the good row printed
    fl = export_build('[[stage]]\nkind = "ema"\nalpha = 0.5\n', "c-float")
    bad = subprocess.run([str(fl.selftest)], input="1.5\n2,x\n", capture_output=True,
                         text=True, timeout=30)
    assert bad.returncode == 1 and "line 2" in bad.stderr


def test_missing_samples_are_handled_as_on_the_host(export_build):
    chain = """
    [[stage]]
    kind = "median"
    window = 3
    [[stage]]
    kind = "butterworth"
    order = 2
    cutoff_hz = 15.0
    """
    built = export_build(chain, "c-float")
    x = 2.0 + np.sin(np.arange(300) * 0.05)
    x[[0, 1, 40, 41, 42, 200]] = [np.nan, np.inf, np.nan, -np.inf, np.nan, np.nan]
    x = x.astype(np.float32).astype(np.float64)
    got = built.run(x[:, None])[:, 0]
    # the Python chain: non-finite samples pass through, the stages see the last finite one
    want = ChainSet(built.spec, ["signal"], 250.0).process(x[:, None])[:, 0]
    bad = ~np.isfinite(x)
    np.testing.assert_array_equal(got[bad], x[bad])      # NaN and inf come out as they went in
    np.testing.assert_array_equal(want[bad], x[bad])
    assert np.max(np.abs(got[~bad] - want[~bad])) < 1e-5 * np.max(np.abs(want[~bad]))


@pytest.mark.parametrize("target", ["c-q15", "c-q31"])
def test_fixed_point_has_no_undefined_behaviour_at_the_extremes(export_build, target):
    # gcc's undefined-behaviour and address sanitizers: no signed overflow, no bad shift,
    # no out-of-bounds window access, even for inputs pinned at the ends of the range
    built = export_build(EVERY_KIND, target, CHANNELS, full_scale=2.0)
    exe = built.directory / "selftest_sanitized"
    subprocess.run(["gcc", "-std=c99", "-O1", "-g", "-fsanitize=undefined,address",
                    "-fno-sanitize-recover=all", "-o", str(exe),
                    str(built.directory / "weigh_selftest.c"), str(built.directory / "weigh.c")],
                   check=True, capture_output=True, timeout=120)
    fmt = q_format(target)
    rng = np.random.default_rng(9)
    x = rng.integers(fmt.min_int, fmt.max_int, size=(4000, 3), endpoint=True)
    ends = rng.random((4000, 3)) < 0.6
    x[ends] = np.where(rng.random(ends.sum()) < 0.5, fmt.min_int, fmt.max_int)
    text = "\n".join(",".join(str(v) for v in row) for row in x) + "\n"
    done = subprocess.run([str(exe)], input=text, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0 and done.stderr == "", done.stderr[-2000:]
    got = np.loadtxt(done.stdout.splitlines(), delimiter=",", dtype=np.int64)
    for k, ch in enumerate(built.plan.channels):
        model = FixedChainModel(fixed_stages(ch, target)).process(x[:, k])
        assert np.array_equal(got[:, k], model)


@pytest.mark.skipif(platform.machine() != "x86_64", reason="-m32 is an x86-64 gcc option")
@pytest.mark.parametrize("target", ["c-float", "c-q15", "c-q31"])
def test_freestanding_32_bit_build_needs_no_library(export_build, target):
    # a 32-bit ABI without a C library, as on a microcontroller: int and long are 32 bits,
    # 64-bit arithmetic must not pull in runtime helpers
    built = export_build(EVERY_KIND, target, CHANNELS, full_scale=2.0)
    obj = built.directory / "weigh32.o"
    subprocess.run(["gcc", "-m32", "-fno-pic", "-ffreestanding", "-std=c99", "-O2", "-Wall",
                    "-Wextra", "-Werror", "-pedantic", "-c", "-o", str(obj),
                    str(built.directory / "weigh.c")], check=True, capture_output=True,
                   timeout=60)
    undefined = subprocess.run(["nm", "-u", str(obj)], capture_output=True, text=True,
                               check=True).stdout.split()
    assert undefined == []
