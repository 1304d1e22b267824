"""`tunetrace replay FILE`: a recording through the chain, ring and views, as if it were live."""

from __future__ import annotations

import argparse

from monitor.commands.common import positive_float
from monitor.errors import UserError


def speed_value(text: str) -> float | None:
    """argparse type: a positive factor, or 'max' (None) for as fast as possible."""
    if text.strip().lower() == "max":
        return None
    try:
        return positive_float(text)
    except argparse.ArgumentTypeError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a speed; give a factor such as 0.5, 1 or 4, or max") from None


def seconds_value(text: str) -> float:
    """argparse type: seconds >= 0."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of seconds") from None
    if not value >= 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"{text} must be seconds >= 0")
    return value


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from monitor.stats import FIGURES_HELP

    parser.epilog = FIGURES_HELP
    parser.add_argument("file", metavar="FILE",
                        help="a tunetrace recording, or a CSV file with a header row")
    parser.add_argument("--speed", type=speed_value, default=1.0, metavar="X|max",
                        help="playback speed factor (default 1 = as recorded), or max")
    parser.add_argument("--loop", action="store_true", help="start again after the last row")
    parser.add_argument("--start", type=seconds_value, default=0.0, metavar="S",
                        help="begin S seconds after the first row")
    parser.add_argument("--chain", metavar="FILE", help="chain file (TOML) to run")
    parser.add_argument("--plain", action="store_true",
                        help="no UI: print one stats line per second on stdout")
    parser.add_argument("--duration", type=positive_float, metavar="S",
                        help="stop after S seconds")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="sample rate (overrides the recording's; a CSV file without "
                             "a time column else runs at the chain's rate_hz)")
    parser.add_argument("--time-column", metavar="NAME",
                        help="for a CSV file from another logger: the column of seconds")


def run(args: argparse.Namespace) -> int:
    import sys

    from monitor.commands.common import (
        build_pipeline,
        check_chain_at_rate,
        declared_rate,
        parse_chain_text,
        read_chain_text,
    )
    from monitor.commands.live import run_session
    from replay.offline import apply_rate, open_with_fallback, rate_disagreement
    from replay.player import ReplaySource
    from replay.reader import RecordingError

    chain_text = read_chain_text(args.chain) if args.chain else None
    spec = parse_chain_text(chain_text, args.chain) if chain_text else None
    declared_rate(args, spec, args.chain)           # refuses --rate against another rate_hz
    chain_hz = spec.rate_hz if spec is not None else None
    try:
        source = open_with_fallback(
            lambda hz: ReplaySource(args.file, speed=args.speed, loop=args.loop,
                                    start_s=args.start, time_column=args.time_column,
                                    rate_hz=hz),
            args.rate, chain_hz)
    except RecordingError as exc:
        raise UserError(str(exc)) from None
    try:
        rate = None
        if spec is not None and args.rate is None:
            try:
                rate = apply_rate(source.recording, None, chain_hz)
            except RecordingError:
                rate = None                 # unknown until the pipeline measures it
        if rate is not None:
            check_chain_at_rate(spec, rate[0], args.chain)
            note = rate_disagreement(source.recording, rate, chain_hz)
            if note:                        # the file's own rate wins (as in apply)
                print(f"tunetrace replay: note: {note}", file=sys.stderr)
        pipeline = build_pipeline(args, source, chain_text=chain_text, chain_name=args.chain)
    except BaseException:
        source.close()
        raise
    return run_session(pipeline, args)
