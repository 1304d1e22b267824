"""How hard the hostile suite tries: one knob for CI and for long local runs.

TUNETRACE_HOSTILE=ci (the default, what CI runs) keeps the whole suite inside its
10-minute budget; TUNETRACE_HOSTILE=long tries LONG_FACTOR times as many generated
inputs and random moments, for a local run before a release (DEVELOPERS.md).
"""

from __future__ import annotations

import os

from hypothesis import HealthCheck, settings

LONG_FACTOR = 20
PROFILE = os.environ.get("TUNETRACE_HOSTILE", "ci").strip().lower() or "ci"
if PROFILE not in ("ci", "long"):
    raise RuntimeError(f"TUNETRACE_HOSTILE = {PROFILE!r}; allowed: ci, long")


def scaled(n: int) -> int:
    """n examples (or random moments) under the ci profile, LONG_FACTOR * n under long."""
    return n * LONG_FACTOR if PROFILE == "long" else n


def hostile(examples: int) -> settings:
    """hypothesis settings for a hostile test: `examples` scaled by the profile, no deadline
    (a loaded CI machine must not fail a correct test), derandomized under ci so a CI run
    is repeatable, random under long so each long run tries new inputs."""
    return settings(max_examples=scaled(examples), deadline=None,
                    derandomize=PROFILE == "ci",
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
