"""Edits of a flat ChainSpec seen from one channel, without touching the others.

A chain file is a flat list of stages, each selecting some channels (or all).
The UI edits "the selected channel's chain", i.e. the stages that select it.

Scope rule: by default an edit is made for the selected channel only. When
the stage it touches also runs on other channels, the stage is first *split*:
a copy selecting only this channel takes the edit, and the original keeps
running, unchanged, on the other channels. With scope SHARED the edit goes to
the stage itself and so reaches every channel that stage selects; the UI
shows which channels those are (stage list and form) and the scope in the
status line (key e toggles it).

Every function is pure: it takes a ChainSpec and returns a new one.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import Any

from filters.kinds import KINDS
from filters.spec import ChainSpec, StageSpec

CHANNEL = "channel"
SHARED = "shared"
SCOPES = (CHANNEL, SHARED)


def selected_channels(stage: StageSpec, channels: Sequence[str]) -> tuple[str, ...]:
    """The channels of `channels` (stream order) that `stage` runs on."""
    return tuple(c for c in channels if stage.selects(c))


def sharers(spec: ChainSpec, index: int, channel: str, channels: Sequence[str]) -> tuple[str, ...]:
    """The other channels that stage `index` also runs on (empty: it is this channel's own)."""
    return tuple(c for c in selected_channels(spec.stages[index], channels) if c != channel)


def _selection(names: Sequence[str], channels: Sequence[str]) -> tuple[str, ...] | None:
    """A stage's `channels` value for the set `names`: None when it is every channel."""
    chosen = set(names)
    if chosen >= set(channels):
        return None
    return tuple(c for c in channels if c in chosen)


def _with_stages(spec: ChainSpec, stages: Sequence[StageSpec]) -> ChainSpec:
    return replace(spec, stages=tuple(stages))


def _check(spec: ChainSpec, index: int, channel: str) -> None:
    if not 0 <= index < len(spec.stages):
        raise IndexError(f"stage index {index} is outside 0..{len(spec.stages) - 1}")
    if not spec.stages[index].selects(channel):
        raise ValueError(f"stage {index + 1} does not run on channel '{channel}'")


def split_for(spec: ChainSpec, index: int, channel: str,
              channels: Sequence[str]) -> tuple[ChainSpec, int]:
    """Make stage `index` this channel's own; returns (spec, index of that stage).

    If the stage is shared, a copy selecting only `channel` is put at `index`
    and the original, no longer selecting `channel`, follows it. Every channel
    keeps running exactly what it ran before.
    """
    _check(spec, index, channel)
    stage = spec.stages[index]
    others = sharers(spec, index, channel, channels)
    if not others:
        return spec, index
    own = replace(stage, channels=(channel,))
    rest = replace(stage, channels=_selection(others, channels))
    stages = list(spec.stages)
    stages[index:index + 1] = [own, rest]
    return _with_stages(spec, stages), index


def _target(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
            scope: str) -> tuple[ChainSpec, int]:
    if scope not in SCOPES:
        raise ValueError(f"scope = {scope!r} must be one of {', '.join(SCOPES)}")
    if scope == SHARED:
        _check(spec, index, channel)
        return spec, index
    return split_for(spec, index, channel, channels)


def replace_stage(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
                  new_stage: StageSpec, scope: str = CHANNEL) -> tuple[ChainSpec, int]:
    """Put `new_stage`'s kind, params, bypass and start in place of stage `index`.

    The selection of the edited stage is kept (its own copy's, with scope CHANNEL).
    Returns (spec, index of the edited stage).
    """
    spec, at = _target(spec, index, channel, channels, scope)
    old = spec.stages[at]
    stages = list(spec.stages)
    stages[at] = replace(new_stage, channels=old.channels)
    return _with_stages(spec, stages), at


def set_params(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
               params: dict[str, Any], scope: str = CHANNEL) -> tuple[ChainSpec, int]:
    """Stage `index` with its kind-specific parameters replaced by `params`."""
    stage = replace(spec.stages[index], params=dict(params))
    return replace_stage(spec, index, channel, channels, stage, scope)


def toggle_bypass(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
                  scope: str = CHANNEL) -> tuple[ChainSpec, int]:
    """Stage `index` with `bypass` flipped."""
    stage = spec.stages[index]
    return replace_stage(spec, index, channel, channels, replace(stage, bypass=not stage.bypass),
                         scope)


def next_method(stage: StageSpec, methods: Sequence[str]) -> str:
    """The discretization method after the stage's current one (its default if absent)."""
    current = stage.params.get("method", KINDS[stage.kind].defaults.get("method", methods[0]))
    position = methods.index(current) if current in methods else -1
    return methods[(position + 1) % len(methods)]


def remove_stage(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
                 scope: str = CHANNEL) -> ChainSpec:
    """The chain without stage `index` for this channel (for all its channels with SHARED)."""
    _check(spec, index, channel)
    stages = list(spec.stages)
    others = sharers(spec, index, channel, channels)
    if scope == SHARED or not others:
        del stages[index]
    else:
        stages[index] = replace(stages[index], channels=_selection(others, channels))
    return _with_stages(spec, stages)


def add_stage(spec: ChainSpec, channel: str, kind: str, params: dict[str, Any],
              after: int | None = None) -> tuple[ChainSpec, int]:
    """Insert a new stage of `kind` running on `channel` only.

    after: file index of the stage it follows (None: at the end of the file).
    Returns (spec, index of the new stage).
    """
    if kind not in KINDS:
        raise ValueError(f"kind = {kind!r} is not a stage kind; choose one of {', '.join(KINDS)}")
    stage = StageSpec(kind=kind, params=dict(params), channels=(channel,))
    at = len(spec.stages) if after is None else after + 1
    stages = list(spec.stages)
    stages.insert(at, stage)
    return _with_stages(spec, stages), at


def move_stage(spec: ChainSpec, index: int, channel: str, channels: Sequence[str],
               step: int, scope: str = CHANNEL) -> tuple[ChainSpec, int]:
    """Move stage `index` one place earlier (step=-1) or later (step=+1) in this channel's chain.

    With scope CHANNEL the moved stage is split off first; moving a stage that
    runs only on this channel past stages of other channels changes nothing
    for them, so only this channel's order changes. With SHARED the stage
    itself moves, which reorders it for every channel that selects it.
    Returns (spec, new index); at either end the spec is returned unchanged.
    """
    if step not in (-1, 1):
        raise ValueError(f"step = {step!r} must be -1 or +1")
    _check(spec, index, channel)
    own = [i for i, _ in spec.stages_for(channel)]
    position = own.index(index)
    if not 0 <= position + step < len(own):
        return spec, index
    spec, at = _target(spec, index, channel, channels, scope)
    # After a split the original follows the copy at at + 1; neighbours behind it shift by one.
    own = [i for i, _ in spec.stages_for(channel)]
    neighbour = own[own.index(at) + step]
    stages = list(spec.stages)
    stage = stages.pop(at)
    if step < 0:
        stages.insert(neighbour, stage)
        new_index = neighbour
    else:
        new_index = neighbour  # the pop shifted the neighbour down by one
        stages.insert(new_index, stage)
    return _with_stages(spec, stages), new_index


def copy_chain(spec: ChainSpec, source: str, targets: Sequence[str],
               channels: Sequence[str]) -> ChainSpec:
    """Make every channel of `targets` run exactly the stages `source` runs.

    Each stage keeps its place; a target joins the stages that select `source`
    and leaves every other stage. Stages left selecting nothing are dropped.
    """
    unknown = [t for t in (source, *targets) if t not in channels]
    if unknown:
        raise ValueError(f"channel '{unknown[0]}' is not one of {', '.join(channels)}")
    moved = set(targets) - {source}
    stages = []
    for stage in spec.stages:
        names = set(selected_channels(stage, channels)) - moved
        if stage.selects(source):
            names |= moved
        if not names:
            continue
        if stage.channels is None and names >= set(channels):
            stages.append(stage)
        else:
            stages.append(replace(stage, channels=_selection(names, channels)))
    return _with_stages(spec, stages)


def starting_params(kind: str, rate_hz: float) -> dict[str, Any]:
    """Parameters a newly added stage starts from, so that it designs at `rate_hz`.

    These are only a starting point for the user to edit: cutoffs at a tenth of
    Nyquist, Q of a Butterworth pair (1/sqrt 2), order 2, a 5-sample window.
    """
    def two_digits(x: float) -> float:   # 25.006 Hz is shown as 25 Hz
        return float(f"{x:.2g}")

    cutoff = two_digits(rate_hz / 20)
    by_key: dict[str, Any] = {
        "cutoff_hz": cutoff, "centre_hz": cutoff, "freq_hz": cutoff, "q": 0.7071,
        "order": 2, "low_hz": two_digits(cutoff / 2), "high_hz": two_digits(cutoff * 2),
        "ripple_db": 1.0, "window": 5, "alpha": 0.1, "time_constant_s": two_digits(10 / rate_hz),
    }
    info = KINDS[kind]
    if not info.alternatives:
        return {}
    return {key: by_key[key] for key in info.alternatives[0]}
