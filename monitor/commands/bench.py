"""`tunetrace bench`: throughput, latency and cost, always as ratios to a same-run reference."""

from __future__ import annotations

import argparse
import importlib
import json
import sys

from monitor.errors import UserError


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from monitor.bench import PARTS

    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--render", action="store_true",
                        help="also measure the plot renderer (headless, software OpenGL)")
    parser.add_argument("--only", action="append", choices=PARTS, metavar="PART",
                        help=f"run only this part (repeatable): {', '.join(PARTS)}")
    parser.add_argument("--quick", action="store_true",
                        help="small data sizes (a smoke test; targets are judged on full runs)")


def run(args: argparse.Namespace) -> int:
    from monitor.bench import DEFAULT_PARTS

    parts = list(args.only or DEFAULT_PARTS)
    if args.render and "render" not in parts:
        parts.append("render")
    results: dict[str, object] = {}
    for name in parts:
        module = importlib.import_module(f"monitor.bench.{name}")
        if not args.json:
            print(f"[{name}] measuring...", file=sys.stderr, flush=True)
        try:
            metrics = module.run(quick=args.quick)
        except (ImportError, OSError) as exc:
            raise UserError(f"bench part '{name}' cannot run here: {exc}", exit_code=1) from exc
        results.update(metrics)
        if not args.json:
            for key, value in metrics.items():
                shown = f"{value:.4g}" if isinstance(value, float) else str(value)
                print(f"  {key:36s} {shown}")
    if args.json:
        print(json.dumps(results, indent=2, sort_keys=True))
    return 0
