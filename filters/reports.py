"""StageReport and ChainReport: the analysis numbers in one shape for the CLI, TUI and export.

Build them with stage_report(design, at_hz) and chain_report(designs, rate_hz, at_hz);
to_dict() gives plain JSON-ready values (complex numbers as [re, im]).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from filters import analysis
from filters.design import StageDesign


@dataclass(frozen=True)
class ResponseRow:
    """One row of a response table: frequency (Hz), digital magnitude (dB) and phase
    (degrees, unwrapped from DC), and the analog prototype's magnitude (dB) or None."""

    freq_hz: float
    mag_db: float
    phase_deg: float
    analog_db: float | None


@dataclass(frozen=True)
class Costs:
    """What a stage or chain costs, at the analysis frequency at_hz (Hz).

    dc_gain:          H(0).
    minus3db_hz:      every -3 dB crossing (relative to the passband gain), ascending.
    group_delay_ms:   group delay at at_hz.
    phase_lag_deg:    phase lag at at_hz (positive = output behind input).
    phase_delay_ms:   how far a sine at at_hz lags: phase lag / (360 at_hz).
    settling_s:       step settling time to 2 % (common practice); inf if beyond the simulation.
    noise_gain:       white-noise power gain sum(h[n]^2); noise_gain_db = 10 log10 of it.
    stability_margin: 1 - max |pole|.
    """

    at_hz: float
    dc_gain: float
    minus3db_hz: tuple[float, ...]
    group_delay_ms: float
    phase_lag_deg: float
    phase_delay_ms: float
    settling_s: float
    noise_gain: float | None
    noise_gain_db: float | None
    stability_margin: float
    table: tuple[ResponseRow, ...]


@dataclass(frozen=True)
class StageReport:
    """One designed stage: its design, poles and zeros, and its costs."""

    index: int | None
    design: StageDesign
    zeros: np.ndarray
    poles: np.ndarray
    costs: Costs

    def coefficients(self) -> dict[str, list]:
        """{"sos": rows} for IIR kinds, {"b": taps, "a": [1.0]} for FIR, {} otherwise."""
        if self.design.sos is not None:
            return {"sos": self.design.sos.tolist()}
        if self.design.fir is not None:
            return {"b": self.design.fir.tolist(), "a": [1.0]}
        return {}

    def to_dict(self) -> dict[str, object]:
        """Plain values for JSON."""
        d = self.design
        return {
            "index": self.index, "kind": d.kind, "rate_hz": d.rate_hz,
            "params": dict(d.params), "derived": dict(d.derived),
            "coefficients": self.coefficients(),
            "analog": None if d.analog is None else {"b": d.analog[0].tolist(),
                                                      "a": d.analog[1].tolist()},
            "zeros": _complex_list(self.zeros), "poles": _complex_list(self.poles),
            "warnings": list(d.warnings), **_costs_dict(self.costs),
        }


@dataclass(frozen=True)
class ChainReport:
    """A whole per-channel chain: which stages (file indices) and what they cost together."""

    channel: str
    stage_indices: tuple[int, ...]
    kinds: tuple[str, ...]
    costs: Costs
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, object]:
        """Plain values for JSON."""
        return {"channel": self.channel, "stages": list(self.stage_indices),
                "kinds": list(self.kinds), "notes": list(self.notes), **_costs_dict(self.costs)}


def _complex_list(values: np.ndarray) -> list[list[float]]:
    return [[float(v.real), float(v.imag)] for v in np.asarray(values, dtype=complex)]


def _finite(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else value


def _costs_dict(c: Costs) -> dict[str, object]:
    return {
        "at_hz": c.at_hz, "dc_gain": c.dc_gain, "minus3db_hz": list(c.minus3db_hz),
        "group_delay_ms": c.group_delay_ms, "phase_lag_deg": c.phase_lag_deg,
        "phase_delay_ms": c.phase_delay_ms, "settling_s": _finite(c.settling_s),
        "noise_gain": c.noise_gain, "noise_gain_db": _finite(c.noise_gain_db),
        "stability_margin": c.stability_margin,
        "table": [{"freq_hz": r.freq_hz, "mag_db": _finite(r.mag_db), "phase_deg": r.phase_deg,
                   "analog_db": _finite(r.analog_db)} for r in c.table],
    }


def _db(h: complex) -> float:
    return 20 * math.log10(abs(h)) if abs(h) > 0 else -math.inf


def _table(chain: list[StageDesign], rate_hz: float) -> tuple[ResponseRow, ...]:
    points = analysis.table_points_hz(chain, rate_hz)
    h = analysis.chain_response(chain, np.array(points), rate_hz)
    analog = None
    if len(chain) == 1:
        analog = analysis.analog_response(chain[0], np.array(points))
    return tuple(
        ResponseRow(f, _db(h[i]), analysis.phase_deg(chain, f, rate_hz),
                    None if analog is None else _db(analog[i]))
        for i, f in enumerate(points))


def _costs(chain: list[StageDesign], rate_hz: float, at_hz: float) -> Costs:
    linear = any(d.linear for d in chain)
    only_median = bool(chain) and all(d.kind == "median" for d in chain)
    gain = None if only_median else analysis.noise_gain(chain)
    gain_db = None if gain is None else (10 * math.log10(gain) if gain > 0 else -math.inf)
    lag = -analysis.phase_deg(chain, at_hz, rate_hz)
    return Costs(
        at_hz=at_hz,
        dc_gain=analysis.dc_gain(chain, rate_hz),
        minus3db_hz=analysis.minus3db_edges_hz(chain, rate_hz) if linear else (),
        group_delay_ms=1e3 * analysis.group_delay_s(chain, at_hz),
        phase_lag_deg=lag,
        phase_delay_ms=1e3 * analysis.phase_delay_s(chain, at_hz, rate_hz),
        settling_s=analysis.settling_time_s(chain),
        noise_gain=gain, noise_gain_db=gain_db,
        stability_margin=analysis.stability_margin(chain),
        table=_table(chain, rate_hz),
    )


def stage_report(design: StageDesign, at_hz: float, index: int | None = None) -> StageReport:
    """Poles, zeros and costs of one stage at the analysis frequency at_hz (Hz)."""
    zeros, poles = analysis.poles_zeros(design)
    return StageReport(index, design, zeros, poles, _costs([design], design.rate_hz, at_hz))


def chain_report(channel: str, stages: Sequence[tuple[int, StageDesign]], rate_hz: float,
                 at_hz: float) -> ChainReport:
    """Costs of the stages (file index, design) that run on `channel`, in order.

    Bypassed stages should be left out by the caller. Median counts as a pure delay
    of (window - 1)/2 samples and gain as a flat |scale|; the notes say so.
    """
    chain = [d for _, d in stages]
    notes = []
    if any(d.kind == "median" for d in chain):
        notes.append("median counted as a pure delay of (window - 1)/2 samples; its noise "
                     "reduction is not linear and is left out of the noise gain")
    if any(d.kind == "gain" for d in chain):
        notes.append("gain counted as a flat |scale|; the offset is left out")
    return ChainReport(channel, tuple(i for i, _ in stages), tuple(d.kind for d in chain),
                       _costs(chain, rate_hz, at_hz), tuple(notes))
