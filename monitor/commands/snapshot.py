"""`tunetrace snapshot FILE [--chain CHAIN] [--start S] [--window S] [--size WxH] -o PLOT.png`.

Renders the plot's three panels (time lanes, spectrum, response) of a stretch
of a recording to a PNG, headless through EGL (Mesa's software renderer
works; no display needed). The chain runs from the start of the file so its
state at --start is what a replay would have. The time axis reads seconds from
the recording's first row (so a window from --start 4 is labelled 4 s on), and
the header's start time, when the file has one, is named above the plot.
"""

from __future__ import annotations

import argparse
import os
import re

from monitor.commands.common import positive_float
from monitor.errors import UserError

DEFAULT_WINDOW_S = 10.0
DEFAULT_SIZE = (1280, 800)
MAX_SIDE = 8192
_SIZE_RE = re.compile(r"^\s*(\d+)\s*[xX]\s*(\d+)\s*$")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.epilog = ("The time lanes show how far the filtered trace lags the raw one. A filter "
                     "in front of a control loop or a safety decision adds that lag and can hide "
                     "faults: validate it on the real system and follow the standards that apply.")
    parser.add_argument("file", metavar="FILE",
                        help="a tunetrace recording, or a CSV file with a header row")
    parser.add_argument("--chain", metavar="CHAIN",
                        help="chain file (TOML); default: the chain stored in the recording")
    parser.add_argument("--start", type=float, default=0.0, metavar="S",
                        help="seconds after the first row where the plot starts (default 0)")
    parser.add_argument("--window", type=positive_float, default=DEFAULT_WINDOW_S, metavar="S",
                        help=f"seconds shown (default {DEFAULT_WINDOW_S:g})")
    parser.add_argument("--size", default="x".join(map(str, DEFAULT_SIZE)), metavar="WxH",
                        help="image size in pixels (default 1280x800)")
    parser.add_argument("--channel", metavar="NAME",
                        help="channel of the spectrum and response panels (default: the first)")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="sample rate (else the recording's own, else the chain's rate_hz)")
    parser.add_argument("--time-column", metavar="NAME",
                        help="for a CSV file from another logger: the column of seconds")
    parser.add_argument("-o", "--output", required=True, metavar="PLOT.png", help="PNG to write")
    parser.add_argument("--force", action="store_true", help="overwrite PLOT.png if it exists")


def parse_size(text: str) -> tuple[int, int]:
    """'1280x800' -> (1280, 800); UserError naming the allowed range otherwise."""
    from monitor.canvas.layout import MIN_SIZE

    match = _SIZE_RE.match(text)
    if not match:
        raise UserError(f"--size {text!r} is not WIDTHxHEIGHT in pixels, e.g. 1280x800.")
    width, height = int(match.group(1)), int(match.group(2))
    if not (MIN_SIZE[0] <= width <= MAX_SIDE and MIN_SIZE[1] <= height <= MAX_SIDE):
        raise UserError(f"--size {width}x{height} is out of range; width {MIN_SIZE[0]} to "
                        f"{MAX_SIDE} and height {MIN_SIZE[1]} to {MAX_SIDE} pixels work.")
    return width, height


def _check_output(path: str, force: bool) -> None:
    if os.path.isdir(path):
        raise UserError(f"{path} is a directory; give a file name for the PNG.")
    if os.path.exists(path) and not force:
        raise UserError(f"{path} already exists; choose another file or give --force to "
                        "overwrite it.")
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise UserError(f"the folder of {path} does not exist; create it or choose another path.")


def _load(args: argparse.Namespace):
    """(recording, spec, rate) for the arguments; UserError on any bad input."""
    from monitor.commands.common import declared_rate, load_chain_file, parse_chain_text
    from replay.offline import apply_rate, open_with_fallback
    from replay.reader import RecordingError, read_recording

    spec = load_chain_file(args.chain) if args.chain else None
    declared_rate(args, spec, args.chain)           # refuses --rate against another rate_hz
    chain_hz = spec.rate_hz if spec is not None else None
    try:
        # the rate as apply and replay choose it: --rate, the file's own, the chain's rate_hz
        recording = open_with_fallback(
            lambda hz: read_recording(args.file, time_column=args.time_column, rate_hz=hz),
            args.rate, chain_hz)
        rate_hz, _ = apply_rate(recording, args.rate, chain_hz)
    except RecordingError as exc:
        raise UserError(str(exc).rstrip(".") + ".") from None
    except FileNotFoundError:
        raise UserError(f"recording {args.file} does not exist; check the path.") from None
    except OSError as exc:
        raise UserError(f"cannot read recording {args.file}: {exc.strerror or exc}.") from None
    if spec is None and recording.header.chain_text:
        spec = parse_chain_text(recording.header.chain_text, f"the chain stored in {args.file}")
    return recording, spec, rate_hz


def _window(recording, chain, start_s: float, window_s: float):
    """t_host, raw, filtered of [start, start + window) s after the first row; the chain runs
    over everything before as well."""
    import numpy as np

    t0 = recording.t_first + start_s
    t1 = t0 + window_s
    parts = []
    for block in recording.blocks():
        filtered = chain.process(block.values) if chain is not None else block.values
        keep = (block.t_host >= t0) & (block.t_host < t1)
        if keep.any():
            parts.append((block.t_host[keep], block.values[keep], filtered[keep]))
        if len(block.t_host) and block.t_host[-1] >= t1:
            break
    if not parts:
        return None
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(3))


def run(args: argparse.Namespace) -> int:
    size = parse_size(args.size)
    _check_output(args.output, args.force)
    if args.start < 0:
        raise UserError(f"--start {args.start:g} must be 0 or more seconds.")
    recording, spec, rate_hz = _load(args)
    channels = recording.schema.channels
    units = tuple(recording.schema.unit(i) for i in range(len(channels)))
    selected = 0
    if args.channel is not None:
        if args.channel not in channels:
            raise UserError(f"--channel {args.channel} is not in {args.file}; it has "
                            f"{', '.join(channels)}.")
        selected = channels.index(args.channel)
    from filters.chainset import ChainSet
    from monitor.canvas.response_panel import active_designs

    chain = None
    if spec is not None:
        try:
            chain = ChainSet(spec, channels, rate_hz)
        except ValueError as exc:
            where = args.chain or f"the chain stored in {args.file}"
            raise UserError(f"{where} cannot run on {args.file}: {str(exc).rstrip('.')}.") \
                from None
    data = _window(recording, chain, args.start, args.window)
    if data is None or len(data[0]) < 2:
        raise UserError(f"{args.file} has fewer than 2 samples from --start {args.start:g} s "
                        "on; choose an earlier --start.")
    designs = [active_designs(chain, name) for name in channels]
    from monitor.canvas.time_axis import TimeAxis

    axis = TimeAxis(origin=float(recording.t_first), started=recording.header.started)
    return _render(args, data, channels, units, rate_hz, designs, size, selected, axis)


def _render(args, data, channels, units, rate_hz, designs, size, selected, axis) -> int:
    from vispy.io import write_png

    from monitor.canvas.backend import BackendUnavailable
    from monitor.canvas.snapshot import render_snapshot

    t_host, raw, filtered = data
    title = f"tunetrace snapshot  {os.path.basename(args.file)}  from {args.start:g} s"
    try:
        image = render_snapshot(t_host, raw, filtered, channels, units, rate_hz, designs,
                                size=size, selected=selected, title=title, time_axis=axis)
    except BackendUnavailable as exc:
        raise UserError(str(exc).rstrip(".") + ".", exit_code=1) from None
    try:
        write_png(args.output, image[..., :3])
    except OSError as exc:
        raise UserError(f"writing {args.output} failed: {exc.strerror or exc}; "
                        "choose another place.", exit_code=1) from None
    print(f"wrote {args.output} ({size[0]}x{size[1]}, {len(t_host)} samples of "
          f"{', '.join(channels)})")
    return 0
