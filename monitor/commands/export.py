"""`tunetrace export`: write a chain as firmware C (float, Q15, Q31) with test vectors.

Channels: --channels names them in the order of the self-test's CSV columns; without it
the channels the chain file names are exported, plus, when some stage selects every
channel, the generic chain `signal` for every other channel (one state struct per channel
on the board).
Fixed point needs each channel's full scale (--full-scale): the units that map to +-1.0.
A chain the target cannot hold is refused with the suggested fix unless
--accept-quantization; a chain whose quantized poles are unstable is always refused.
Existing files in DIR are replaced only with --force. Files are written only inside DIR
and never through a link: each is written whole to a temporary file created exclusively
in DIR, then renamed over its name; a symbolic link at an output's name is refused
without --force and replaced itself (its target left untouched) with --force.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

from monitor.commands.common import channel_list, positive_float
from monitor.errors import UserError

TARGET_CHOICES = ("c-float", "c-q15", "c-q31")
MAX_VECTOR_ROWS = 1_000_000


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("chain", metavar="CHAIN", help="chain file (TOML)")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="sample rate the firmware runs at (default: the chain's rate_hz)")
    parser.add_argument("--target", required=True, choices=TARGET_CHOICES,
                        help="c-float (single precision; transposed DF2, or the delta form "
                             "where poles crowd z = 1), c-q15 or c-q31 (direct form I, "
                             "fixed point)")
    parser.add_argument("-o", "--output", required=True, metavar="DIR",
                        help="directory for NAME.h, NAME.c, NAME_selftest.c, "
                             "NAME_vectors.csv and README.md")
    parser.add_argument("--name", metavar="NAME",
                        help="C prefix and file name (default: the chain file's name)")
    parser.add_argument("--double", action="store_true",
                        help="c-float only: double precision instead of single")
    parser.add_argument("--channels", type=channel_list, metavar="NAMES",
                        help="comma-separated channel names, in the board's column order "
                             "(default: those the chain names, plus 'signal' for any other "
                             "channel when a stage selects every channel)")
    parser.add_argument("--full-scale", metavar="UNITS",
                        help="fixed point: units that map to +-1.0, one value (e.g. 50) or "
                             "per channel (load=50,current=10); for float it sets the "
                             "vectors' amplitude")
    parser.add_argument("--vectors-seconds", type=float, default=4.0, metavar="S",
                        help="length of the test vectors in seconds (default 4)")
    parser.add_argument("--accept-quantization", action="store_true",
                        help="export even when the target cannot hold the chain "
                             "(the README then says so)")
    parser.add_argument("--force", action="store_true",
                        help="replace existing files in DIR (a symbolic link at an output's "
                             "name is replaced itself; its target is never written)")


def parse_full_scale(text: str | None, channels: list[str], fixed: bool) -> dict[str, float]:
    """--full-scale text -> channel -> units; UserError naming what to fix."""
    if text is None:
        if fixed:
            raise UserError("fixed-point export needs --full-scale UNITS (the reading that "
                            "maps to +-1.0, e.g. --full-scale 50 for +-50 kg) or "
                            "--full-scale name=UNITS,... per channel.")
        return {}
    out: dict[str, float] = {}
    for part in (p.strip() for p in text.split(",")):
        name, _, value = part.rpartition("=")
        try:
            number = float(value)
        except ValueError:
            number = math.nan
        if not (math.isfinite(number) and number > 0):
            raise UserError(f"--full-scale {part!r} must be a positive number of units "
                            "(or name=number).")
        if not name and len(text.split(",")) == 1:
            return {ch: number for ch in channels}
        if name not in channels:
            raise UserError(f"--full-scale names {name or part!r}, which is not an exported "
                            f"channel ({', '.join(channels)}).")
        out[name] = number
    missing = [c for c in channels if c not in out]
    if missing and fixed:
        raise UserError(f"--full-scale gives no value for channel {missing[0]}; "
                        "add name=UNITS for every channel.")
    return out


def run(args: argparse.Namespace) -> int:
    from filters.fixedreport import report_for_plans
    from monitor.commands.common import load_chain_file
    from monitor.export import existing_files, export_texts, write_files
    from monitor.export.plan import build_plan, c_identifier, check_prefix, default_channels

    spec = load_chain_file(args.chain)
    rate = args.rate if args.rate is not None else spec.rate_hz
    if rate is None:
        raise UserError(f"{args.chain} has no rate_hz; give the firmware's sample rate "
                        "with --rate HZ.")
    if args.double and args.target != "c-float":
        raise UserError("--double applies to --target c-float only.")
    if not (math.isfinite(args.vectors_seconds) and args.vectors_seconds > 0
            and args.vectors_seconds * rate <= MAX_VECTOR_ROWS):
        raise UserError(f"--vectors-seconds {args.vectors_seconds:g} must be above 0 and give "
                        f"at most {MAX_VECTOR_ROWS:,} rows at {rate:g} Hz.")
    fixed = args.target != "c-float"
    channels = list(args.channels) if args.channels else default_channels(spec)
    full_scales = parse_full_scale(args.full_scale, channels, fixed)
    try:
        prefix = check_prefix(args.name or c_identifier(Path(args.chain).stem).lower())
        plan = build_plan(spec, channels, rate, args.target, prefix, full_scales, args.double)
        report = report_for_plans({ch.name: ch.plans for ch in plan.channels}, rate,
                                  plan.report_target,
                                  {ch.name: ch.full_scale for ch in plan.channels},
                                  args.vectors_seconds)
    except ValueError as exc:
        raise UserError(f"{args.chain}: {str(exc).rstrip('.')}.") from None
    print(report.format_text())
    if report.fatal:
        raise UserError(f"not exported: {report.fatal[0]}; {report.suggestion}.")
    if report.problems and not args.accept_quantization:
        raise UserError(f"not exported: {report.problems[0]}; {report.suggestion} "
                        "(or --accept-quantization to export anyway).")
    if report.problems:
        print("WARNING: exporting although the target cannot hold this chain; "
              "the README says so.", file=sys.stderr)
    texts = export_texts(spec, plan, report, args.chain, args.vectors_seconds,
                         forced=bool(report.problems))
    directory = Path(args.output)
    if directory.exists() and not directory.is_dir():
        raise UserError(f"-o {directory} is a file; give a directory.")
    clash = existing_files(directory, list(texts))
    if clash and not args.force:
        if clash[0].is_symlink():
            raise UserError(f"{clash[0]} is a symbolic link; export never writes through a "
                            "link: remove it, choose another -o DIR, or add --force to "
                            "replace the link itself.")
        raise UserError(f"{clash[0]} already exists; choose another -o DIR or add --force.")
    try:
        written = write_files(directory, texts, replace=args.force)
    except FileExistsError as exc:
        raise UserError(f"{exc.filename or directory} appeared while exporting; choose "
                        "another -o DIR or add --force.", exit_code=1) from None
    except OSError as exc:
        raise UserError(f"cannot write into {directory}: {exc.strerror or exc}.",
                        exit_code=1) from None
    print(f"wrote {', '.join(str(p) for p in written)}")
    print("Caution: validate the exported filter on the real system before it feeds a "
          "control loop or a safety function; its lag changes loop stability.")
    return 0
