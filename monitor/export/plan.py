"""What gets exported: the channels, their stage plans, C names and fixed-point full scales."""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

from filters.fixedpoint import StagePlan
from filters.spec import ChainSpec

TARGETS: tuple[str, ...] = ("c-float", "c-q15", "c-q31")
GENERIC_CHANNEL = "signal"
_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
# NAME_<x>_step is a helper of the generated C for these x: a channel so named gets "_ch".
_HELPER_NAMES = frozenset(("tdf2", "delta", "df1", "cascade", "mavg", "median"))
_C_RESERVED = frozenset(
    "auto break case char const continue default do double else enum extern float for goto "
    "if inline int long register restrict return short signed sizeof static struct switch "
    "typedef union unsigned void volatile while main".split())


@dataclass(frozen=True)
class ExportChannel:
    """One exported channel chain.

    name:       the channel name in the stream (CSV column).
    ident:      its C identifier part (NAME_<ident>_step).
    plans:      the stages that run on it, in order (bypassed stages left out).
    bypassed:   labels of bypassed stages (documented, not exported).
    full_scale: units that map to +-1.0 in Q15/Q31 (and the vectors' amplitude).
    designs:    the StageDesigns behind `plans` (for lag figures).
    structure:  float targets: the biquad structure, "tdf2" or "delta" (the quantization
                report chooses it; see filters.float32model).
    """

    name: str
    ident: str
    plans: tuple[StagePlan, ...]
    bypassed: tuple[str, ...]
    full_scale: float
    designs: tuple[Any, ...] = ()
    structure: str = "tdf2"


@dataclass(frozen=True)
class ExportPlan:
    """Everything the writers need: target, C prefix, rate and the channels in column order."""

    target: str
    prefix: str
    rate_hz: float
    channels: tuple[ExportChannel, ...]
    double: bool = False

    @property
    def fixed(self) -> bool:
        return self.target in ("c-q15", "c-q31")

    @property
    def report_target(self) -> str:
        return "c-double" if self.double else self.target

    def with_structures(self, structures: dict[str, str]) -> ExportPlan:
        """The plan with each float channel's biquad structure (channel name -> structure)."""
        if self.fixed:
            return self
        channels = tuple(replace(ch, structure=structures.get(ch.name, ch.structure))
                         for ch in self.channels)
        return replace(self, channels=channels)


def c_identifier(text: str) -> str:
    """`text` made a C identifier: other characters become '_', a leading digit gets '_'."""
    ident = re.sub(r"[^A-Za-z0-9_]", "_", text.strip())
    if not ident or ident[0].isdigit():
        ident = "_" + ident
    return ident


def check_prefix(name: str) -> str:
    """The --name value if it is a usable C prefix, else ValueError naming the fix."""
    if not _IDENT.match(name) or name in _C_RESERVED:
        raise ValueError(f"--name {name!r} must be a C identifier (letters, digits, _; "
                         "not starting with a digit, not a C keyword)")
    return name


def default_channels(spec: ChainSpec) -> list[str]:
    """Channel names the chain's stages mention, in first-mention order, then the generic
    channel `signal` (the chain of any other channel: the stages that select every channel)
    when some stage selects every channel or none names one."""
    names: list[str] = []
    for stage in spec.stages:
        for name in stage.channels or ():
            if name not in names:
                names.append(name)
    if (not names or any(s.channels is None for s in spec.stages)) \
            and GENERIC_CHANNEL not in names:
        names.append(GENERIC_CHANNEL)
    return names


def build_plan(spec: ChainSpec, channels: Sequence[str], rate_hz: float, target: str,
               prefix: str, full_scales: dict[str, float], double: bool = False
               ) -> ExportPlan:
    """Design every channel's chain (ChainSet validates) into an ExportPlan; ValueError on
    a chain that cannot run or cannot be exported, with one sentence."""
    from filters.chainset import ChainSet
    from filters.fixedpoint import plan_stage

    if target not in TARGETS:
        raise ValueError(f"--target {target!r} is not one of {', '.join(TARGETS)}")
    chain = ChainSet(spec, channels, rate_hz)
    idents = [c_identifier(c) for c in channels]
    idents = [i + "_ch" if i in _HELPER_NAMES else i for i in idents]
    if len(set(idents)) != len(idents):
        raise ValueError(f"channel names {list(channels)} give clashing C names {idents}; "
                         "rename them with --channels")
    out = []
    for name, ident in zip(channels, idents, strict=True):
        plans, bypassed, designs = [], [], []
        for index, design in chain.designs_for(name):
            stage = spec.stages[index]
            label = f"stage {index + 1}: {design.kind}"
            if stage.bypass:
                bypassed.append(label)
                continue
            try:
                plans.append(plan_stage(design, stage.start, label))
            except ValueError as exc:
                raise ValueError(f"{label}: {exc}") from None
            designs.append(design)
        out.append(ExportChannel(name, ident, tuple(plans), tuple(bypassed),
                                 float(full_scales.get(name, 1.0)), tuple(designs)))
    return ExportPlan(target, prefix, float(rate_hz), tuple(out), double)
