"""ChainSet: per-channel chains on streams, retune, refusal, missing samples."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st
from streaming_reference import RATE_HZ, design, loop_stage, weigh_signal

from filters.blockrun import FUSED_CHUNK
from filters.chainfile import parse_chain
from filters.chainset import ChainSet
from filters.spec import ChainSpec, StageSpec

CHANNELS = ("load", "current", "vib")

WEIGH_CHAIN = parse_chain("""
[[stage]]
kind = "median"
window = 5

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
channels = ["load", "current"]

[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 8.0
channels = ["load"]

[[stage]]
kind = "moving-average"
window = 5
channels = ["current"]
start = "zero"

[[stage]]
kind = "dc-block"
cutoff_hz = 0.5
channels = ["vib"]

[[stage]]
kind = "gain"
scale = 2.0
channels = ["vib"]
bypass = true

[[stage]]
kind = "ema"
alpha = 0.2
channels = ["vib"]
""")

# all-linear chains, so the fused short-block path runs; the second has too much state to fuse
LINEAR_CHAIN = parse_chain("""
[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 8.0
[[stage]]
kind = "gain"
scale = 1.0
bypass = true
[[stage]]
kind = "rc-highpass"
cutoff_hz = 0.2
start = "zero"
""")
BIG_STATE_CHAIN = parse_chain("""
[[stage]]
kind = "chebyshev1"
band = "bandstop"
order = 10
low_hz = 45.0
high_hz = 55.0
ripple_db = 0.5
[[stage]]
kind = "moving-average"
window = 40
""")
CHAINS = {"weigh": WEIGH_CHAIN, "linear": LINEAR_CHAIN, "big-state": BIG_STATE_CHAIN}
DATA = weigh_signal(700, 3, seed=7)


def loop_chain(spec: ChainSpec, channel: str, x: np.ndarray) -> np.ndarray:
    """The channel's stages in file order, each a plain per-sample loop."""
    for _, stage in spec.stages_for(channel):
        x = loop_stage(design(stage), x, stage.start, stage.bypass)
    return x


def run_blocks(chain: ChainSet, x: np.ndarray, sizes: list[int]) -> np.ndarray:
    out, i = [], 0
    for size in sizes:
        out.append(chain.process(x[i:i + size]))
        i += size
    out.append(chain.process(x[i:]))
    return np.vstack(out)


REFERENCE = {name: np.column_stack([loop_chain(spec, c, DATA[:, k])
                                    for k, c in enumerate(CHANNELS)])
             for name, spec in CHAINS.items()}


@settings(max_examples=60, deadline=None)
@given(name=st.sampled_from(sorted(CHAINS)),
       sizes=st.lists(st.integers(0, 2 * FUSED_CHUNK + 12), max_size=30))
def test_blocks_equal_a_per_sample_loop(name, sizes):
    chain = ChainSet(CHAINS[name], CHANNELS, RATE_HZ)
    got = run_blocks(chain, DATA, sizes)
    np.testing.assert_allclose(got, REFERENCE[name], rtol=0, atol=1e-12 * 30)


def test_many_short_blocks_equal_one_sosfilt_call():
    # 10-sample blocks take the fused path block after block; compare with one call of
    # scipy.signal.sosfilt over the whole array, zi = sosfilt_zi * first sample
    spec = ChainSpec(LINEAR_CHAIN.stages[:2])
    chain = ChainSet(spec, CHANNELS, RATE_HZ)
    x = weigh_signal(20000, 3, seed=2)
    got = np.vstack([chain.process(x[i:i + 10]) for i in range(0, len(x), 10)])
    sos = np.vstack([d.sos for d in chain.designs])
    zi = scipy.signal.sosfilt_zi(sos)[:, :, None] * x[0][None, None, :]
    want, _ = scipy.signal.sosfilt(sos, x, axis=0, zi=zi)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-11)


def test_channels_select_their_stages():
    chain = ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ)
    assert [i for i, _ in chain.designs_for("load")] == [0, 1, 2]
    assert [i for i, _ in chain.designs_for("current")] == [0, 1, 3]
    assert [i for i, _ in chain.designs_for("vib")] == [0, 4, 5, 6]  # bypassed gain included
    assert [d.kind for _, d in chain.designs_for("vib")] == ["median", "dc-block", "gain", "ema"]
    # columns come back in their own order whatever the grouping
    swapped = ChainSet(WEIGH_CHAIN, CHANNELS[::-1], RATE_HZ).process(DATA[:, ::-1])
    np.testing.assert_allclose(swapped[:, ::-1], REFERENCE["weigh"], atol=1e-12 * 30)


def test_empty_blocks_change_nothing():
    chain, plain = ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ), ChainSet(WEIGH_CHAIN, CHANNELS,
                                                                      RATE_HZ)
    assert chain.process(np.empty((0, 3))).shape == (0, 3)
    chain.process(DATA[:100])
    plain.process(DATA[:100])
    assert chain.process(np.empty((0, 3))).shape == (0, 3)
    np.testing.assert_array_equal(chain.process(DATA[100:]), plain.process(DATA[100:]))
    assert ChainSet.identity(()).process(np.empty((5, 0))).shape == (5, 0)


def test_identity_passes_a_copy():
    chain = ChainSet.identity(CHANNELS)
    y = chain.process(DATA)
    assert np.array_equal(y, DATA) and y is not DATA and y.dtype == np.float64


def test_numpy_rates_are_accepted():
    assert ChainSet(WEIGH_CHAIN, CHANNELS, np.int64(250)).rate_hz == 250.0
    assert ChainSet(WEIGH_CHAIN, CHANNELS, np.float64(250.0)).rate_hz == 250.0


def test_process_refuses_a_wrong_width():
    with pytest.raises(ValueError, match="shape"):
        ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ).process(np.zeros((4, 2)))


@pytest.mark.parametrize("rate", [0, -250.0, float("nan"), float("inf"), True, "fast", None])
def test_bad_rate_is_refused(rate):
    with pytest.raises(ValueError, match="rate_hz"):
        ChainSet(WEIGH_CHAIN, CHANNELS, rate)


def test_refused_chain_leaves_the_running_one_untouched():
    running, witness = (ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ) for _ in range(2))
    running.process(DATA[:300])
    witness.process(DATA[:300])
    bad = ChainSpec(WEIGH_CHAIN.stages[:1] + (
        StageSpec("butterworth", {"order": 2, "cutoff_hz": 200.0}),))  # above 125 Hz Nyquist
    with pytest.raises(ValueError) as info:
        ChainSet(bad, CHANNELS, RATE_HZ)
    message = str(info.value)
    assert message.startswith("stage 2 (butterworth): ") and "cutoff_hz" in message
    assert "\n" not in message
    np.testing.assert_array_equal(running.process(DATA[300:]), witness.process(DATA[300:]))


def test_unknown_channel_name_is_refused():
    spec = ChainSpec((StageSpec("median", {"window": 3}, channels=("lode",)),))
    with pytest.raises(ValueError, match="stage 1 \\(median\\): .*'lode'.*load"):
        ChainSet(spec, CHANNELS, RATE_HZ)


def test_duplicate_channel_names_are_refused():
    with pytest.raises(ValueError, match="unique"):
        ChainSet.identity(["load", "load"])


# -- retune ---------------------------------------------------------------------------

def lowpass(cutoff_hz: float, kind: str = "butterworth") -> ChainSpec:
    params = {"order": 4, "cutoff_hz": cutoff_hz} if kind == "butterworth" else \
        {"cutoff_hz": cutoff_hz}
    return ChainSpec((StageSpec("median", {"window": 5}), StageSpec(kind, params)))


def retune(old: ChainSet, spec: ChainSpec, channels=CHANNELS) -> ChainSet:
    new = ChainSet(spec, channels, RATE_HZ)
    new.continue_from(old)
    return new


def test_retune_during_a_slow_ramp_has_no_jump():
    # belt load rising slowly: 0.01 kg per sample on every channel
    x = 10.0 + 0.01 * np.arange(2000.0)[:, None] * np.ones(3)
    step = 0.01
    for kind, before, after in [("butterworth", 8.0, 2.0), ("butterworth", 2.0, 20.0),
                                ("rc-lowpass", 8.0, 1.0), ("ema", None, None)]:
        if kind == "ema":
            old_spec = ChainSpec((StageSpec("ema", {"alpha": 0.5}),))
            new_spec = ChainSpec((StageSpec("ema", {"alpha": 0.05}),))
        else:
            old_spec, new_spec = lowpass(before, kind), lowpass(after, kind)
        old = ChainSet(old_spec, CHANNELS, RATE_HZ)
        last = old.process(x[:1000])[-1]
        first = retune(old, new_spec).process(x[1000:1010])[0]
        assert np.all(np.abs(first - last) <= step), (kind, first - last)


def test_retune_to_a_faster_filter_moves_toward_the_input_without_overshoot():
    # a faster new filter catches up with the lag of the old one; its first output lies
    # between the old last output and the input, never beyond
    x = 10.0 + 0.01 * np.arange(2000.0)[:, None] * np.ones(3)
    old = ChainSet(ChainSpec((StageSpec("ema", {"alpha": 0.05}),)), CHANNELS, RATE_HZ)
    last = old.process(x[:1000])[-1]
    y = retune(old, ChainSpec((StageSpec("ema", {"alpha": 0.5}),))).process(x[1000:1010])
    assert np.all((last < y[0]) & (y[0] < x[1000]))
    assert np.all(np.diff(y, axis=0) > 0)


def test_retune_after_a_missing_last_sample_still_continues():
    x = np.full((100, 3), 7.0)
    x[-1, 1] = np.nan  # the old chain's very last sample on "current" was missing
    old = ChainSet(ChainSpec((StageSpec("median", {"window": 3}),)), CHANNELS, RATE_HZ)
    old.process(x)
    y = retune(old, ChainSpec((StageSpec("median", {"window": 5}),))).process(x[:4, :] * 0 + 9)
    np.testing.assert_array_equal(y[:2], 7.0)  # the median of 5 still holds two old 7s


def test_retune_under_a_constant_input_keeps_the_output_exactly():
    x = np.full((400, 3), 12.0)
    old = ChainSet(lowpass(8.0), CHANNELS, RATE_HZ)
    old.process(x)
    y = retune(old, lowpass(3.0)).process(x[:100])
    np.testing.assert_allclose(y, 12.0, rtol=1e-12)


def test_retune_of_a_dc_blocking_stage_is_continuous():
    x = DATA.copy()
    x[:, 2] = 0.2 + 0.05 * np.sin(2 * np.pi * 18 * np.arange(len(x)) / RATE_HZ)  # vib in g
    old = ChainSet(ChainSpec((StageSpec("dc-block", {"cutoff_hz": 0.5}),)), CHANNELS, RATE_HZ)
    y_old = old.process(x[:500])
    new = retune(old, ChainSpec((StageSpec("dc-block", {"cutoff_hz": 3.0}),)))
    y_new = new.process(x[500:])
    per_sample = np.abs(np.diff(y_old[-50:, 2])).max()
    assert abs(y_new[0, 2] - y_old[-1, 2]) <= per_sample


def test_retune_keeps_unchanged_stages_exactly():
    # the median in front is the same before and after: it keeps its window; the gain behind
    # it is changed and, having no state, applies at once
    x = weigh_signal(300, 3, seed=3)
    before = ChainSpec((StageSpec("median", {"window": 5}), StageSpec("gain", {"scale": 1.0})))
    after = ChainSpec((StageSpec("median", {"window": 5}), StageSpec("gain", {"scale": 2.0})))
    old = ChainSet(before, CHANNELS, RATE_HZ)
    old.process(x[:150])
    y = retune(old, after).process(x[150:])
    reference = ChainSet(ChainSpec(before.stages[:1]), CHANNELS, RATE_HZ).process(x)
    np.testing.assert_array_equal(y, 2.0 * reference[150:])


def test_retune_that_only_widens_a_stage_keeps_its_state():
    median = StageSpec("median", {"window": 5}, channels=("load",))
    old = ChainSet(ChainSpec((median,)), CHANNELS, RATE_HZ)
    old.process(DATA[:100])
    wider = StageSpec("median", {"window": 5}, channels=("load", "vib"))
    y = retune(old, ChainSpec((wider,))).process(DATA[100:])
    plain = ChainSet(ChainSpec((median,)), CHANNELS, RATE_HZ).process(DATA)
    np.testing.assert_array_equal(y[:, 0], plain[100:, 0])


def test_retune_inserting_a_stage_is_continuous():
    x = 10.0 + 0.01 * np.arange(1200.0)[:, None] * np.ones(3)
    old = ChainSet(ChainSpec(lowpass(8.0).stages[1:]), CHANNELS, RATE_HZ)
    last = old.process(x[:600])[-1]
    new_spec = ChainSpec((StageSpec("notch", {"freq_hz": 50.0, "q": 30.0}),)
                         + lowpass(8.0).stages[1:])
    first = retune(old, new_spec).process(x[600:610])[0]
    assert np.all(np.abs(first - last) <= 0.01)


def test_retune_from_an_unstarted_chain_or_new_channel_starts_by_policy():
    fresh = ChainSet(lowpass(8.0), CHANNELS, RATE_HZ).process(DATA[:50])
    unstarted = ChainSet(lowpass(3.0), CHANNELS, RATE_HZ)
    np.testing.assert_array_equal(retune(unstarted, lowpass(8.0)).process(DATA[:50]), fresh)
    old = ChainSet(lowpass(3.0), CHANNELS[:2], RATE_HZ)
    old.process(DATA[:100, :2])
    new = retune(old, lowpass(8.0))  # "vib" is new: steady at its own first sample
    np.testing.assert_array_equal(new.process(DATA[:50])[:, 2], fresh[:, 2])


def test_retune_twice_before_any_sample_still_continues():
    x = np.full((300, 3), 5.0)
    old = ChainSet(lowpass(8.0), CHANNELS, RATE_HZ)
    old.process(x)
    middle = retune(old, lowpass(4.0))
    y = retune(middle, lowpass(2.0)).process(x[:20])
    np.testing.assert_allclose(y, 5.0, rtol=1e-12)


def test_reset_restarts_every_stage():
    chain = ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ)
    chain.process(DATA[:200])
    chain.reset()
    np.testing.assert_array_equal(chain.process(DATA[200:]),
                                  ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ).process(DATA[200:]))


# -- missing samples ------------------------------------------------------------------

@pytest.mark.parametrize("name", ["weigh", "linear"])
def test_a_missing_sample_passes_as_nan_and_does_not_poison_the_state(name):
    spec = CHAINS[name]
    x = DATA.copy()
    holes = [(50, 0), (51, 0), (300, 1), (301, 2), (302, 2), (650, 0)]
    held = x.copy()
    for row, col in holes:
        x[row, col] = np.nan
        held[row, col] = held[row - 1, col]  # the policy: the stages see the last finite value
    x[400, 1] = np.inf
    held[400, 1] = held[399, 1]
    chain = ChainSet(spec, CHANNELS, RATE_HZ)
    got = run_blocks(chain, x, [45, 5, 1, 10, 7, 3, 300])
    want = ChainSet(spec, CHANNELS, RATE_HZ).process(held)
    bad = ~np.isfinite(x)
    assert np.array_equal(np.isnan(got), np.isnan(x)) and got[400, 1] == np.inf
    np.testing.assert_allclose(got[~bad], want[~bad], atol=1e-12 * 30)
    assert np.isfinite(got[651:]).all()


def test_a_channel_without_any_finite_sample_yet_starts_at_its_first_one():
    x = DATA[:200].copy()
    x[:30, 1] = np.nan  # "current" is silent for the first two blocks
    chain = ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ)
    got = run_blocks(chain, x, [10, 10, 5])
    assert np.isnan(got[:30, 1]).all()
    later = ChainSet(WEIGH_CHAIN, CHANNELS, RATE_HZ).process(x[30:])
    np.testing.assert_allclose(got[30:, 1], later[:, 1], atol=1e-12 * 30)
    np.testing.assert_allclose(got[:, [0, 2]], REFERENCE["weigh"][:200, [0, 2]],
                               atol=1e-12 * 30)


def test_bench_part_runs_quick_and_the_chain_agrees_with_sosfilt():
    from monitor.bench.filters import run

    metrics = run(quick=True)
    assert metrics["filters_iir_max_abs_diff"] < 1e-9
    for key in ("filters_iir_block_samples_per_s", "filters_iir_reference_samples_per_s",
                "filters_iir_ratio", "filters_iir_ratio_100", "filters_chain_samples_per_s"):
        assert metrics[key] > 0, key
    assert metrics["filters_iir_ratio_ok"] is True


_UNIT_DC = st.one_of(
    st.builds(lambda o, f: StageSpec("butterworth", {"order": o, "cutoff_hz": f}),
              st.integers(1, 8), st.floats(0.5, 100.0)),
    st.builds(lambda o, f: StageSpec("bessel", {"order": o, "cutoff_hz": f}),
              st.integers(1, 8), st.floats(0.5, 100.0)),
    st.builds(lambda f, m: StageSpec("rc-lowpass", {"cutoff_hz": f, "method": m}),
              st.floats(0.5, 60.0), st.sampled_from(["backward-euler", "tustin", "zoh"])),
    # q >= 1: the notch bandwidth freq_hz / q stays below Nyquist (filters.design._notch)
    st.builds(lambda f, q: StageSpec("notch", {"freq_hz": f, "q": q}),
              st.floats(5.0, 100.0), st.floats(1.0, 50.0)),
    st.builds(lambda a: StageSpec("ema", {"alpha": a}), st.floats(0.01, 1.0)),
    st.builds(lambda w: StageSpec("moving-average", {"window": w}), st.integers(1, 60)),
    st.builds(lambda w: StageSpec("median", {"window": 2 * w + 1}), st.integers(0, 10)),
)


@settings(max_examples=30, deadline=None)
@given(old=st.lists(_UNIT_DC, min_size=0, max_size=3),
       new=st.lists(_UNIT_DC, min_size=0, max_size=3),
       level=st.floats(-50.0, 50.0))
def test_any_retune_of_unit_gain_stages_under_a_constant_input_holds_it(old, new, level):
    x = np.full((120, 3), level)
    before = ChainSet(ChainSpec(tuple(old)), CHANNELS, RATE_HZ)
    before.process(x)
    after = retune(before, ChainSpec(tuple(new))).process(x[:60])
    np.testing.assert_allclose(after, level, rtol=1e-9, atol=1e-9)
