"""Per-channel edits of a flat chain: the edited channel changes as asked, no other does."""

from __future__ import annotations

from dataclasses import replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filters.spec import ChainSpec, StageSpec
from monitor.tui import chain_edit as ce

CHANNELS = ("load", "current", "vib")


def runs(spec: ChainSpec, channel: str) -> list[tuple]:
    """What `channel` runs, stage by stage, without the selection (the observable chain)."""
    return [(s.kind, tuple(sorted(s.params.items())), s.bypass, s.start)
            for _, s in spec.stages_for(channel)]


def demo_spec() -> ChainSpec:
    return ChainSpec(stages=(
        StageSpec("median", {"window": 5}, ("load",)),
        StageSpec("notch", {"freq_hz": 50.0, "q": 30.0}, ("load", "current")),
        StageSpec("butterworth", {"order": 4, "cutoff_hz": 5.0}, ("load",)),
        StageSpec("dc-block", {"cutoff_hz": 0.5}),               # every channel
    ), rate_hz=250.0)


selections = st.one_of(st.none(), st.lists(st.sampled_from(CHANNELS), min_size=1, max_size=3,
                                           unique=True).map(tuple))
stages = st.builds(lambda w, sel, by: StageSpec("median", {"window": w}, sel, by),
                   st.sampled_from([3, 5, 7, 9]), selections, st.booleans())
specs = st.lists(stages, min_size=1, max_size=6).map(lambda s: ChainSpec(tuple(s)))


def test_split_keeps_every_channel_running_the_same():
    spec = demo_spec()
    split, at = ce.split_for(spec, 1, "load", CHANNELS)
    assert split.stages[at].channels == ("load",)
    assert split.stages[at + 1].channels == ("current",)
    for c in CHANNELS:
        assert runs(split, c) == runs(spec, c)


def test_set_params_on_a_shared_stage_splits_it_off():
    spec = demo_spec()
    new, at = ce.set_params(spec, 1, "load", CHANNELS, {"freq_hz": 60.0, "q": 20.0})
    assert runs(new, "load")[1][1] == (("freq_hz", 60.0), ("q", 20.0))
    assert runs(new, "current") == runs(spec, "current")      # current keeps the 50 Hz notch
    assert runs(new, "vib") == runs(spec, "vib")


def test_shared_scope_edits_every_channel_of_the_stage():
    spec = demo_spec()
    new, at = ce.set_params(spec, 1, "load", CHANNELS, {"freq_hz": 60.0, "q": 20.0}, ce.SHARED)
    assert at == 1 and len(new.stages) == len(spec.stages)
    assert runs(new, "current")[0][1] == (("freq_hz", 60.0), ("q", 20.0))


def test_remove_from_an_all_channel_stage_leaves_the_others():
    spec = demo_spec()
    new = ce.remove_stage(spec, 3, "vib", CHANNELS)
    assert runs(new, "vib") == []
    assert new.stages[3].channels == ("load", "current")
    assert runs(new, "load") == runs(spec, "load")


def test_move_within_the_channel_only():
    spec = demo_spec()
    new, at = ce.move_stage(spec, 1, "load", CHANNELS, -1)      # notch before median on load
    assert [k for k, *_ in runs(new, "load")] == ["notch", "median", "butterworth", "dc-block"]
    assert runs(new, "current") == runs(spec, "current")
    assert new.stages[at].kind == "notch" and new.stages[at].channels == ("load",)
    same, at2 = ce.move_stage(spec, 0, "load", CHANNELS, -1)     # already first
    assert same is spec and at2 == 0


def test_copy_chain_makes_targets_run_the_source_chain():
    spec = demo_spec()
    new = ce.copy_chain(spec, "load", ["vib"], CHANNELS)
    assert runs(new, "vib") == runs(spec, "load")
    assert runs(new, "current") == runs(spec, "current")
    assert runs(new, "load") == runs(spec, "load")


def test_add_stage_goes_after_the_given_one_for_this_channel_only():
    spec = demo_spec()
    new, at = ce.add_stage(spec, "current", "ema", {"alpha": 0.2}, after=1)
    assert at == 2 and new.stages[at].channels == ("current",)
    assert [k for k, *_ in runs(new, "current")] == ["notch", "ema", "dc-block"]
    assert runs(new, "load") == runs(spec, "load")
    with pytest.raises(ValueError, match="kind"):
        ce.add_stage(spec, "load", "no-such-kind", {})


def test_edit_of_a_stage_the_channel_does_not_run_is_refused():
    with pytest.raises(ValueError, match="does not run"):
        ce.toggle_bypass(demo_spec(), 0, "vib", CHANNELS)


def test_next_method_cycles_and_starts_from_the_default():
    from filters.spec import METHODS

    stage = StageSpec("rc-lowpass", {"cutoff_hz": 5.0})
    after_default = ce.next_method(stage, METHODS)               # default is tustin-prewarp
    assert after_default == METHODS[(METHODS.index("tustin-prewarp") + 1) % len(METHODS)]
    last = replace(stage, params={"cutoff_hz": 5.0, "method": METHODS[-1]})
    assert ce.next_method(last, METHODS) == METHODS[0]


def test_starting_params_design_for_every_kind():
    from filters.design import design_stage
    from filters.kinds import KINDS

    for kind in KINDS:
        params = ce.starting_params(kind, 250.0)
        design_stage(StageSpec(kind, params), 250.0)             # raises if it does not design


@settings(max_examples=150, deadline=None)
@given(specs, st.sampled_from(CHANNELS), st.data())
def test_channel_scope_edits_never_change_other_channels(spec, channel, data):
    own = [i for i, _ in spec.stages_for(channel)]
    if not own:
        return
    index = data.draw(st.sampled_from(own))
    op = data.draw(st.sampled_from(["bypass", "remove", "up", "down", "params"]))
    if op == "bypass":
        new, _ = ce.toggle_bypass(spec, index, channel, CHANNELS)
    elif op == "remove":
        new = ce.remove_stage(spec, index, channel, CHANNELS)
    elif op in ("up", "down"):
        new, _ = ce.move_stage(spec, index, channel, CHANNELS, -1 if op == "up" else 1)
    else:
        new, _ = ce.set_params(spec, index, channel, CHANNELS, {"window": 11})
    for other in CHANNELS:
        if other != channel:
            assert runs(new, other) == runs(spec, other)
    before, after = runs(spec, channel), runs(new, channel)
    position = own.index(index)
    if op == "remove":
        assert after == before[:position] + before[position + 1:]
    elif op in ("up", "down"):
        assert sorted(after) == sorted(before)
        step = -1 if op == "up" else 1
        if 0 <= position + step < len(before):
            expected = list(before)
            expected[position], expected[position + step] = (expected[position + step],
                                                             expected[position])
            assert after == expected
    else:
        assert len(after) == len(before)


@settings(max_examples=100, deadline=None)
@given(specs, st.sampled_from(CHANNELS),
       st.lists(st.sampled_from(CHANNELS), min_size=1, max_size=3, unique=True))
def test_copy_chain_property(spec, source, targets):
    new = ce.copy_chain(spec, source, targets, CHANNELS)
    for c in CHANNELS:
        expected = runs(spec, source) if c in targets else runs(spec, c)
        assert runs(new, c) == expected
