"""The `tunetrace` command line: one verb per job, heavy imports only inside verbs.

Each verb lives in `monitor.commands.<verb>` with `add_arguments(parser)` and
`run(args) -> int`. Command modules import numpy, scipy, vispy and textual only
inside `run`, so `tunetrace --help` stays fast.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from monitor import __version__
from monitor.errors import UserError

VERBS: dict[str, str] = {
    "demo": "simulated weigh-station board, live view",
    "live": "live view of a real source (device path, pyserial URL, - or sim://)",
    "record": "headless recording of a source to a CSV file",
    "replay": "play a recording through the chain as if it were live",
    "apply": "filter a recording offline and write a CSV with filtered columns",
    "design": "coefficients, response, lag and warnings of a chain",
    "export": "write the chain as C code (float, Q15, Q31) with test vectors",
    "snapshot": "render raw, spectrum and response panels of a recording to a PNG",
    "ports": "serial ports on this machine",
    "bench": "throughput and latency on this machine, as ratios to a reference",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tunetrace",
        description="Choose a filter on a board's real, noisy serial stream.",
    )
    parser.add_argument("--version", action="version", version=f"tunetrace {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB")
    for verb, summary in VERBS.items():
        module = importlib.import_module(f"monitor.commands.{verb}")
        p = sub.add_parser(verb, help=summary, description=summary)
        module.add_arguments(p)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.verb:
        parser.print_help()
        return 2
    module = importlib.import_module(f"monitor.commands.{args.verb}")
    try:
        return int(module.run(args) or 0)
    except UserError as exc:
        print(f"tunetrace {args.verb}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        # stdout closed early (e.g. piped into `head`): not an error of the user's
        sys.stderr.close()
        return 0


if __name__ == "__main__":
    sys.exit(main())
