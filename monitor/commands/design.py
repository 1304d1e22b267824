"""`tunetrace design CHAIN --rate HZ`: coefficients, response, lag and warnings of a chain.

Per stage: kind, derived values, coefficients, a response table at standard
points, the lag at the analysis frequency and the warnings; then the same
analysis for each channel's whole chain. Plain text for an 80-column terminal,
or one JSON object with --json. numpy, scipy and filters are imported in run().
"""

from __future__ import annotations

import argparse
import json
import math
import textwrap
from typing import Any

from monitor.commands.common import channel_list, positive_float
from monitor.errors import UserError

OTHER_CHANNELS = "other channels"
CAUTION = ("Caution: a filter adds lag and can hide faults; where the filtered signal feeds "
           "a control loop or a safety decision, validate on the real system and follow the "
           "applicable standards and local practice.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("chain", metavar="CHAIN", help="chain file (TOML)")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="sample rate to design for (default: the chain file's rate_hz)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--at", type=float, metavar="HZ",
                        help="frequency for the lag figures (default: each stage's or chain's "
                             "first cutoff, else the centre of its first band-pass, else 1 Hz)")
    parser.add_argument("--channels", type=channel_list, metavar="NAMES",
                        help="channels to analyse, comma separated (default: those the chain "
                             "names, plus 'other channels' when a stage selects every channel)")
    parser.add_argument("--target", choices=("c-float", "c-q15", "c-q31"),
                        help="also report what exporting to this C target costs: quantized "
                             "poles, response error, headroom; for c-float the biquad "
                             "structure, the error over the export's test vectors and the DC "
                             "gain (see tunetrace export)")


def channels_of(spec: Any) -> list[str]:
    """Channel names the chain names in file order, plus OTHER_CHANNELS for unselective stages."""
    names: list[str] = []
    for stage in spec.stages:
        for name in stage.channels or ():
            if name not in names:
                names.append(name)
    if not names or any(stage.channels is None for stage in spec.stages):
        names.append(OTHER_CHANNELS)
    return names


def _stages_for(spec: Any, channel: str) -> list[int]:
    if channel == OTHER_CHANNELS:
        return [i for i, s in enumerate(spec.stages) if s.channels is None]
    return [i for i, _ in spec.stages_for(channel)]


def run(args: argparse.Namespace) -> int:
    from filters.analysis import default_analysis_hz
    from filters.design import design_stage
    from filters.reports import chain_report, stage_report
    from monitor.commands.common import load_chain_file

    spec = load_chain_file(args.chain)
    if args.rate is not None:
        rate, origin = float(args.rate), "--rate"
    elif spec.rate_hz is not None:
        rate, origin = float(spec.rate_hz), "the chain file's rate_hz"
    else:
        raise UserError(f"{args.chain} has no rate_hz and no --rate was given; give --rate HZ "
                        f"or add rate_hz to the chain file.")
    designs = []
    for number, stage in enumerate(spec.stages, start=1):
        try:
            designs.append(design_stage(stage, rate))
        except ValueError as exc:
            raise UserError(f"{args.chain}: stage {number} ({stage.kind}): "
                            f"{str(exc).rstrip('.')}.") from None
    at = _analysis_frequency(args.at, rate)
    stage_reports = [stage_report(d, at if at is not None else default_analysis_hz([d], rate),
                                  index=i) for i, d in enumerate(designs)]
    channels = list(args.channels) if args.channels else channels_of(spec)
    chains = []
    for channel in channels:
        stages = [(i, designs[i]) for i in _stages_for(spec, channel) if not spec.stages[i].bypass]
        chain_at = at if at is not None else default_analysis_hz([d for _, d in stages], rate)
        chains.append(chain_report(channel, stages, rate, chain_at))
    quantization = _quantization(args.target, spec, designs, channels, rate)
    if args.json:
        out = _json(args.chain, rate, origin, at, spec, stage_reports, chains)
        if quantization is not None:
            out["quantization"] = quantization.to_dict()
        print(json.dumps(out, allow_nan=False))
    else:
        print(_text(args.chain, rate, origin, at, spec, stage_reports, chains))
        if quantization is not None:
            print("\n" + quantization.format_text())
    return 0


def _quantization(target: str | None, spec: Any, designs: list, channels: list[str],
                  rate: float) -> Any:
    """The export quantization report (filters.fixedreport) for --target, else None."""
    if target is None:
        return None
    from filters.fixedreport import quantization_report

    per_channel = {c: [(i, designs[i]) for i in _stages_for(spec, c) if not spec.stages[i].bypass]
                   for c in channels}
    return quantization_report(per_channel, rate, target)


def _analysis_frequency(given: float | None, rate: float) -> float | None:
    """--at checked against the Nyquist frequency; None means each report's own default."""
    nyquist = rate / 2
    if given is not None and not (math.isfinite(given) and 0 <= given < nyquist):
        raise UserError(f"--at {given:g} is outside the allowed range 0 <= HZ < {nyquist:g} "
                        f"(the Nyquist frequency at {rate:g} Hz).")
    return given


def _json(path: str, rate: float, origin: str, at: float | None, spec: Any, stages: list,
          chains: list) -> dict[str, object]:
    out_stages = []
    for report in stages:
        entry = report.to_dict()
        stage = spec.stages[report.index]
        entry.update(number=report.index + 1, bypass=stage.bypass, start=stage.start,
                     channels=None if stage.channels is None else list(stage.channels))
        out_stages.append(entry)
    return {"chain": path, "rate_hz": rate, "rate_origin": origin, "at_hz": at,
            "stages": out_stages, "channels": [c.to_dict() for c in chains], "caution": CAUTION}


def _g(value: float | None, digits: int = 4) -> str:
    if value is None:
        return "-"
    if math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return f"{value:.{digits}g}"


def _clean(value: float) -> float:
    """No "-0" in the output: values within rounding of zero print as 0."""
    return 0.0 if abs(value) < 5e-13 else value


def _db(value: float | None) -> str:
    if value is None or math.isinf(value):
        return _g(value)
    return f"{round(value, 2) + 0.0:.2f}"


def _wrapped(prefix: str, text: str) -> list[str]:
    return textwrap.wrap(text, width=80, initial_indent=prefix,
                         subsequent_indent=" " * len(prefix))


def _derived_line(derived: dict[str, float]) -> str:
    return ", ".join(f"{k} {_g(v, 6)}" for k, v in derived.items())


def _coefficient_lines(report) -> list[str]:
    d = report.design
    if d.sos is not None:
        lines = []
        for n, row in enumerate(d.sos, start=1):
            prefix = f"  section {n}  "
            lines.append(f"{prefix}b = [{', '.join(f'{v:.12g}' for v in row[:3])}]")
            lines.append(f"{' ' * len(prefix)}a = [{', '.join(f'{v:.12g}' for v in row[3:])}]")
        return lines
    if d.fir is not None:
        if len(set(d.fir.tolist())) == 1:
            return [f"  fir: {len(d.fir)} taps, each {d.fir[0]:.12g} (ones(N)/N)"]
        return ["  fir: " + ", ".join(f"{v:.12g}" for v in d.fir)]
    if d.kind == "median":
        return ["  no coefficients: a running median (not linear)"]
    return [f"  y = {d.params['scale']:g} * x + {d.params['offset']:g}"]


def _table_lines(costs, with_analog: bool) -> list[str]:
    head = f"  {'Hz':>10}  {'gain dB':>9}  {'phase deg':>10}"
    lines = [head + (f"  {'analog dB':>9}" if with_analog else "")]
    for row in costs.table:
        line = f"  {row.freq_hz:>10.4g}  {_db(row.mag_db):>9}  {row.phase_deg:>10.1f}"
        if with_analog:
            line += f"  {_db(row.analog_db):>9}"
        lines.append(line)
    return lines


def _cost_lines(costs) -> list[str]:
    edges = ", ".join(f"{f:.4g}" for f in costs.minus3db_hz)
    edges = f"-3 dB at {edges} Hz" if edges else "-3 dB: none (flat)"
    noise = ("not linear" if costs.noise_gain is None
             else f"{costs.noise_gain:.4g} ({_g(costs.noise_gain_db, 3)} dB)")
    settle = (f"settles to 2 % in {costs.settling_s:.3g} s" if math.isfinite(costs.settling_s)
              else "does not settle to 2 % within the simulated response")
    lag = _clean(round(costs.phase_lag_deg, 1))
    return [
        f"  at {costs.at_hz:.4g} Hz: group delay {_clean(costs.group_delay_ms):.3g} ms, phase "
        f"lag {lag:.1f} deg ({_clean(costs.phase_delay_ms):.3g} ms)",
        f"  {edges}; DC gain {_g(_clean(costs.dc_gain), 6)}; {settle}",
        f"  noise gain {noise}; stability margin {costs.stability_margin:.4g}",
    ]


def _text(path: str, rate: float, origin: str, at: float | None, spec: Any, stages: list,
          chains: list) -> str:
    where = f"at {at:g} Hz (--at)" if at is not None else "at each first cutoff, else 1 Hz"
    out = [f"chain {path}", f"rate {rate:g} Hz (from {origin})", f"lag figures {where}", ""]
    for report in stages:
        stage = spec.stages[report.index]
        d = report.design
        flags = [f"channels {', '.join(stage.channels)}" if stage.channels else "all channels"]
        if stage.bypass:
            flags.append("BYPASSED")
        if "method" in d.params:
            flags.append(f"method {d.params['method']}")
        out.append(f"stage {report.index + 1}: {d.kind} ({'; '.join(flags)})")
        out += _wrapped("  ", _derived_line(d.derived))
        out += _coefficient_lines(report)
        if d.analog is not None and len(d.analog[1]) <= 3:  # first and second order: H(s)
            b, a = (", ".join(f"{v:.6g}" for v in poly) for poly in d.analog)
            out += _wrapped("  analog H(s): ", f"b = [{b}], a = [{a}] (descending powers of s)")
        out += _table_lines(report.costs, d.analog_zpk is not None)
        out += _cost_lines(report.costs)
        for warning in d.warnings:
            out += _wrapped("  warning: ", warning)
        out.append("")
    for chain in chains:
        stages_text = (", ".join(f"{i + 1} {k}" for i, k in zip(chain.stage_indices, chain.kinds,
                                                               strict=True)) or "no stages")
        out.append(f"channel {chain.channel}: {stages_text}")
        out += _table_lines(chain.costs, False)
        out += _cost_lines(chain.costs)
        for note in chain.notes:
            out += _wrapped("  note: ", note)
        out.append("")
    out += _wrapped("", CAUTION)
    return "\n".join(out)
