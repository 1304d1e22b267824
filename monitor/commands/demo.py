"""`tunetrace demo`: the simulated weigh-station board (sim://) with a per-channel demo chain."""

from __future__ import annotations

import argparse

from monitor.commands.common import positive_float
from monitor.crc import CRC_NAMES
from monitor.errors import UserError
from monitor.framing_binary import FRAMINGS

DEMO_RATE_HZ = 250.0

# The demo's starting chain (demo numbers, a sensible first guess to tune from):
# every channel carries 50 Hz mains, 18 Hz belt vibration, white noise and rare
# spikes, and each wants a different filter.
DEMO_CHAIN = """\
# Conveyor weigh station, 250 Hz: one sensible starting chain per channel.
rate_hz = 250.0

# load [kg]: knock out single-sample spikes, then mains, then smooth hard;
# a parcel step still settles in well under half a second.
[[stage]]
kind = "median"
window = 5
channels = ["load"]

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
channels = ["load", "current"]

[[stage]]
kind = "butterworth"
band = "lowpass"
order = 4
cutoff_hz = 5.0
channels = ["load"]

# current [A]: mains removed above; a light RC low-pass keeps the motor's
# response to load changes visible.
[[stage]]
kind = "rc-lowpass"
cutoff_hz = 20.0
method = "tustin-prewarp"
channels = ["current"]

# vib [g]: keep the band around the 18 Hz belt line, drop drift and mains.
[[stage]]
kind = "butterworth"
band = "bandpass"
order = 2
low_hz = 12.0
high_hz = 25.0
channels = ["vib"]
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from monitor.stats import FIGURES_HELP

    parser.epilog = FIGURES_HELP
    parser.add_argument("--plain", action="store_true",
                        help="no UI: print one stats line per second on stdout")
    parser.add_argument("--duration", type=positive_float, metavar="S",
                        help="stop after S seconds")
    parser.add_argument("--chain", metavar="FILE",
                        help="start from this chain file instead of the demo chain")
    parser.add_argument("--seed", type=int, default=1, metavar="N",
                        help="random seed of the simulated board (default 1)")
    parser.add_argument("--record", metavar="FILE",
                        help="record every raw sample to this CSV file")
    parser.add_argument("--framing", choices=FRAMINGS, default="text",
                        help="what the simulated board sends: text lines (default) or binary "
                             "frames (cobs, slip, sync) with counter, microsecond time and CRC")
    parser.add_argument("--crc", choices=CRC_NAMES, default=None,
                        help="checksum of the binary frames (default crc16-ccitt)")


def run(args: argparse.Namespace) -> int:
    from monitor.commands.common import build_pipeline, parse_chain_text, read_chain_text
    from monitor.commands.live import run_session

    if args.seed < 0:
        raise UserError(f"--seed {args.seed} must be 0 or a positive whole number.")
    name = args.chain or "the demo chain"
    text = read_chain_text(args.chain) if args.chain else DEMO_CHAIN
    spec = parse_chain_text(text, name)
    rate = spec.rate_hz or DEMO_RATE_HZ           # the board runs at the chain's rate
    args.rate = None if spec.rate_hz else rate
    url = f"sim://?rate={rate:g}&seed={args.seed}"
    if args.framing != "text":
        url += f"&format={args.framing}" + (f"&crc={args.crc}" if args.crc else "")
    pipeline = build_pipeline(args, url,
                              chain_text=text, chain_name=name)
    return run_session(pipeline, args)
