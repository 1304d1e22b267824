"""`tunetrace apply FILE --chain CHAIN -o OUT.csv`: filter a recording offline."""

from __future__ import annotations

import argparse
import os
import sys
import time

from monitor.commands.common import positive_float
from monitor.errors import UserError

CAUTION = ("Filtering adds lag and can hide faults: before filtered values feed a control "
           "loop or a safety decision, validate the chain on the real system and follow the "
           "standards that apply.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from monitor.stats import FIGURES_HELP

    parser.epilog = f"{FIGURES_HELP} {CAUTION}"
    parser.add_argument("file", metavar="FILE",
                        help="a tunetrace recording, or a CSV file with a header row")
    parser.add_argument("--chain", required=True, metavar="CHAIN", help="chain file (TOML)")
    parser.add_argument("-o", "--output", required=True, metavar="OUT.csv",
                        help="the CSV to write: every input column, then <channel>_filtered")
    parser.add_argument("--force", action="store_true", help="overwrite OUT.csv if it exists")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="sample rate (else the recording's own: its header or its time "
                             "column; else the chain's rate_hz)")
    parser.add_argument("--time-column", metavar="NAME",
                        help="for a CSV file from another logger: the column of seconds")


class _ProgressBar:
    """A one-line bar on stderr, redrawn at most 5 times a second."""

    WIDTH = 30

    def __init__(self, stream) -> None:
        self.stream = stream
        self.started = time.monotonic()
        self.drawn = False

    def __call__(self, fraction: float) -> None:
        if time.monotonic() - self.started < 0.5 and fraction < 1.0 and not self.drawn:
            return                      # short files finish before a bar is worth drawing
        filled = int(round(fraction * self.WIDTH))
        self.stream.write(f"\rapply [{'#' * filled}{'.' * (self.WIDTH - filled)}] "
                          f"{fraction * 100:5.1f}%")
        self.stream.flush()
        self.drawn = True

    def finish(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()


def _check_output(path: str, force: bool) -> None:
    """UserError (exit 2) now if `path` cannot become the output file."""
    from replay.writer import open_error_sentence

    problem: OSError | None = None
    if os.path.isdir(path):
        problem = IsADirectoryError(path)
    elif os.path.exists(path) and not force:
        problem = FileExistsError(path)
    elif not os.path.isdir(os.path.dirname(os.path.abspath(path))):
        problem = FileNotFoundError(path)
    if problem is not None:
        raise UserError(open_error_sentence(problem, path, what="output"))


def run(args: argparse.Namespace) -> int:
    from monitor.commands.common import declared_rate, parse_chain_text, read_chain_text
    from replay.offline import apply_chain, apply_rate, open_with_fallback, rate_disagreement
    from replay.reader import RecordingError, read_recording
    from replay.writer import open_error_sentence

    _check_output(args.output, args.force)
    chain_text = read_chain_text(args.chain)
    spec = parse_chain_text(chain_text, args.chain)
    declared_rate(args, spec, args.chain)           # refuses --rate against another rate_hz
    try:
        recording = open_with_fallback(
            lambda hz: read_recording(args.file, time_column=args.time_column, rate_hz=hz),
            args.rate, spec.rate_hz)
        rate = apply_rate(recording, args.rate, spec.rate_hz)
    except RecordingError as exc:
        raise UserError(str(exc)) from None
    note = rate_disagreement(recording, rate, spec.rate_hz)
    if note:
        print(f"tunetrace apply: note: {note}", file=sys.stderr)
    bar = _ProgressBar(sys.stderr) if sys.stderr.isatty() else None
    try:
        result = apply_chain(recording, spec, args.output, chain_text=chain_text,
                             rate_hz=args.rate, force=args.force, progress=bar)
    except RecordingError as exc:
        raise UserError(str(exc)) from None
    except OSError as exc:
        raise UserError(open_error_sentence(exc, args.output, what="output"),
                        exit_code=1) from None
    except ValueError as exc:
        raise UserError(f"{args.chain} cannot run on {args.file}: {str(exc).rstrip('.')}.") \
            from None
    finally:
        if bar is not None:
            bar.finish()
    notes = []
    if result.bad_rows:
        notes.append(f"{result.bad_rows} bad rows skipped")
    if result.torn_last_line:
        notes.append("a torn last line ignored")
    print(f"wrote {result.out_path}: {result.rows} rows at {result.rate_hz:g} Hz "
          f"({result.rate_origin}), {result.gaps} gaps, {result.bytes_written} bytes, "
          f"{result.seconds:.1f} s" + (f"; {', '.join(notes)}" if notes else ""))
    if result.reduction_db:
        from monitor.stats import format_db

        units = recording.schema.units
        labels = [f"{n}[{units[k]}]" if k < len(units) and units[k] else n
                  for k, n in enumerate(result.channels)]
        print("noise reduction, measured on this recording / of white noise: " + ", ".join(
            f"{label} {format_db(db)}/{white:.1f} dB" for label, db, white in
            zip(labels, result.reduction_db, result.white_reduction_db, strict=True)))
    return 0

