"""Options and set-up shared by the verbs that stream a source (live, demo, record).

Imported by the CLI at startup: heavy modules (numpy, scipy, the pipeline) are
imported inside the functions.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from collections.abc import Callable
from typing import Any

from monitor.binary_options import add_binary_options, binary_framing, text_time_options
from monitor.errors import UserError

DEFAULT_BAUD = 115200
DEFAULT_RING_SECONDS = 600.0
RING_RATE_IF_UNKNOWN_HZ = 1000.0
DEFAULT_RING_MEMORY_MB = 256.0      # monitor.ring.DEFAULT_RING_MEMORY, derived there


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (value > 0 and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"{text} must be a positive number")
    return value


def baud_rate(text: str) -> int:
    """argparse type: a whole number of baud > 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a whole number of baud (e.g. 115200)") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"{text} must be a positive number of baud")
    return value


def parse_baud(value: str | int) -> int:
    """--baud as given: a whole number, else UserError in one sentence (checked > 0 on open)."""
    try:
        return int(value)
    except ValueError:
        raise UserError(f"--baud {value!r} is not a whole number of baud; give e.g. 115200.") \
            from None


def channel_list(text: str) -> tuple[str, ...]:
    """argparse type: comma-separated channel names."""
    names = tuple(name.strip() for name in text.split(","))
    if not all(names):
        raise argparse.ArgumentTypeError(f"{text!r} has an empty name; give e.g. load,current,vib")
    return names


def add_source_options(parser: argparse.ArgumentParser) -> None:
    """The options every streaming verb shares (DESIGN.md, command line)."""
    parser.add_argument("--baud", default=DEFAULT_BAUD, metavar="N",
                        help=f"line speed in baud (default {DEFAULT_BAUD}; ignored by - and sim://)")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="declared sample rate; else the chain file's rate_hz, else the "
                             "device time column, else estimated from arrival times")
    parser.add_argument("--chain", metavar="FILE", help="chain file (TOML) to run on the stream")
    parser.add_argument("--record", metavar="FILE", help="record every raw sample to this CSV file")
    parser.add_argument("--duration", type=positive_float, metavar="S",
                        help="stop after S seconds")
    parser.add_argument("--plain", action="store_true",
                        help="no UI: print one stats line per second on stdout")
    parser.add_argument("--time-column", metavar="NAME",
                        help="column (or binary field) holding the device time, in "
                             "--time-unit (default s)")
    parser.add_argument("--counter-column", metavar="NAME",
                        help="column (or binary field) holding the sample counter; gaps "
                             "count as dropped")
    parser.add_argument("--channels", type=channel_list, metavar="NAMES",
                        help="column names, comma separated; they win over the board's "
                             "header line, whose units are kept (default: the header's "
                             "names, else ch0,ch1,...)")
    add_binary_options(parser)
    parser.add_argument("--ring-seconds", type=positive_float, default=DEFAULT_RING_SECONDS,
                        metavar="S",
                        help=f"history kept, in seconds at the declared rate or at "
                             f"{RING_RATE_IF_UNKNOWN_HZ:g} Hz when it is not declared (default "
                             f"{DEFAULT_RING_SECONDS:g}); memory = (2 * channels + 1) * 8 bytes "
                             f"per sample, e.g. 81.6 MB for 600 s of 8 channels at 1 kHz, "
                             f"at most --ring-memory (a wider stream keeps fewer seconds)")
    parser.add_argument("--ring-memory", type=positive_float, metavar="MB",
                        default=DEFAULT_RING_MEMORY_MB,
                        help=f"most memory the history may take, in MiB (default "
                             f"{DEFAULT_RING_MEMORY_MB:g})")


def load_chain_file(path: str) -> Any:
    """Read and parse a chain file -> ChainSpec; UserError naming the file and the problem."""
    return parse_chain_text(read_chain_text(path), path)


def read_chain_text(path: str) -> str:
    """The text of a chain file; UserError when it cannot be read."""
    try:
        with open(path, encoding="utf-8") as handle:
            return handle.read()
    except FileNotFoundError:
        raise UserError(f"chain file {path} does not exist; check the path.") from None
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or str(exc)
        raise UserError(f"cannot read chain file {path}: {reason}.") from None


def parse_chain_text(text: str, where: str) -> Any:
    """ChainSpec from chain-file text; UserError starting with `where` on a bad file."""
    from filters.chainfile import parse_chain

    try:
        return parse_chain(text)
    except ValueError as exc:
        raise UserError(f"{where}: {str(exc).rstrip('.')}.") from None


def check_chain_at_rate(spec: Any, rate_hz: float, where: str) -> None:
    """Design `spec` at `rate_hz` now, so an impossible chain is refused before streaming."""
    from filters.chainset import ChainSet

    names = sorted({name for stage in spec.stages for name in (stage.channels or ())}) or ["x"]
    try:
        ChainSet(spec, names, rate_hz)
    except ValueError as exc:
        raise UserError(f"{where} cannot run at {rate_hz:g} Hz: {str(exc).rstrip('.')}.") \
            from None


def warm_up_chain(spec: Any) -> None:
    """Design `spec` once at a nominal rate, ignoring refusals, so the imports (scipy takes
    about a second) happen now and not on the reader thread when the rate is found."""
    try:
        check_chain_at_rate(spec, RING_RATE_IF_UNKNOWN_HZ, "the chain")
    except UserError:
        pass


def declared_rate(args: argparse.Namespace, spec: Any, where: str | None) -> float | None:
    """--rate, else the chain file's rate_hz; UserError when the two disagree."""
    rate = getattr(args, "rate", None)
    file_rate = getattr(spec, "rate_hz", None) if spec is not None else None
    if rate is not None and file_rate is not None and abs(rate - file_rate) > 1e-3 * file_rate:
        raise UserError(f"--rate {rate:g} disagrees with rate_hz = {file_rate:g} in "
                        f"{where}; give only one of them.")
    return rate if rate is not None else file_rate


def ring_capacity(ring_seconds: float, rate_hz: float | None) -> int:
    """Samples of history for `ring_seconds` at the rate (or 1 kHz when unknown); the
    pipeline keeps fewer when they do not fit the ring memory (ring_memory)."""
    wanted = ring_seconds * (rate_hz or RING_RATE_IF_UNKNOWN_HZ)
    return max(1, int(math.ceil(min(wanted, 2.0 ** 62))))


def ring_memory(args: argparse.Namespace) -> int:
    """--ring-memory in bytes; UserError beyond this machine's memory or below 1 MiB."""
    from monitor.ring import MIN_RING_MEMORY

    megabytes = getattr(args, "ring_memory", None) or DEFAULT_RING_MEMORY_MB
    wanted = int(min(megabytes, 2.0 ** 40) * 2**20)
    if wanted < MIN_RING_MEMORY:
        raise UserError(f"--ring-memory {megabytes:g} is below the least {MIN_RING_MEMORY >> 20} "
                        f"MiB; give more.")
    try:
        memory = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):      # not every system tells
        return wanted
    if wanted > memory:
        raise UserError(f"--ring-memory {megabytes:g} is more than this machine's "
                        f"{memory / 2**20:.0f} MiB; give less.")
    return wanted


def build_pipeline(args: argparse.Namespace, source: Any, chain_text: str | None = None,
                   chain_name: str | None = None) -> Any:
    """A ready (not started) Pipeline for `source` (a SOURCE string or a block source).

    Reads --chain (unless `chain_text` is given, named `chain_name` in messages),
    --rate, --record, --ring-seconds, --baud, --channels, --time-column and
    --counter-column from `args` (missing ones take defaults). Raises UserError
    for a bad chain file, a conflicting rate, an unusable recording path or a
    source that cannot be opened.
    """
    from monitor.pipeline import Pipeline, text_source

    if chain_text is None and getattr(args, "chain", None):
        chain_name = args.chain
        chain_text = read_chain_text(chain_name)
    spec = parse_chain_text(chain_text, chain_name or "chain") if chain_text else None
    rate = declared_rate(args, spec, chain_name)
    if spec is not None and rate is not None:
        check_chain_at_rate(spec, rate, chain_name or "the chain")
    elif spec is not None:
        warm_up_chain(spec)
    record = getattr(args, "record", None)
    force = getattr(args, "force", False)
    if record:
        check_record_path(record, force=force)
    capacity = ring_capacity(getattr(args, "ring_seconds", DEFAULT_RING_SECONDS), rate)
    memory = ring_memory(args)
    if isinstance(source, str):
        # a live source fits arrival times even at a declared rate (the estimate shown,
        # the recording's trailer): import scipy.stats here, or the reader thread stops
        # for about a second at its first fit while the board's rows wait in the port
        from monitor.arrival_rate import warm_up

        warm_up()
        from monitor.sources import open_byte_source

        binary = binary_framing(args, source)        # checked before the port opens
        baud = parse_baud(getattr(args, "baud", DEFAULT_BAUD))
        byte_source = open_byte_source(source, baud)
        if binary is not None:
            source = binary.source(byte_source, rate)
        else:
            source = text_source(byte_source, channels=getattr(args, "channels", None),
                                 time_column=getattr(args, "time_column", None),
                                 counter_column=getattr(args, "counter_column", None),
                                 declared_rate=rate, **text_time_options(args))
    # the chain's rate_hz is the pipeline's own fallback (a replayed file's rate beats it)
    pipeline = Pipeline(source, chain_spec=spec, rate_hz=getattr(args, "rate", None),
                        ring_capacity=capacity, ring_memory=memory)
    if record:
        pipeline.submit(start_recording(pipeline, record, chain_text, force=force,
                                        announce=note_on_stderr))
    return pipeline


def check_record_path(path: str, force: bool = False) -> None:
    """UserError now, before streaming, if `path` cannot become a new recording."""
    from replay.writer import open_error_sentence

    folder = os.path.dirname(os.path.abspath(path))
    if os.path.isdir(path):
        raise UserError(open_error_sentence(IsADirectoryError(path), path))
    if os.path.exists(path) and not force:
        raise UserError(open_error_sentence(FileExistsError(path), path))
    if not os.path.isdir(folder):
        raise UserError(open_error_sentence(FileNotFoundError(path), path))
    if not os.access(folder, os.W_OK):
        raise UserError(open_error_sentence(PermissionError(path), path))


def start_recording(pipeline: Any, path: str, chain_text: str | None = None,
                    force: bool = False, **writer_options: Any) -> Any:
    """The StartRecording command for a recording of `pipeline`'s stream to `path`.

    writer_options: more RecordingWriter keywords (with_filtered, limit_bytes,
    limit_seconds) and DeferredRecording's `announce`.
    """
    from monitor.pipeline import StartRecording

    return StartRecording(DeferredRecording(pipeline, path, chain_text, force, **writer_options))


def note_on_stderr(sentence: str) -> None:
    """`announce` for DeferredRecording: `tunetrace: <sentence>.` on stderr."""
    from monitor.stop_signals import print_safely

    print_safely(f"tunetrace: {sentence}.", sys.stderr)


MAX_HELD_GAPS = 100                 # gap marks kept while no block has named the columns


class DeferredRecording:
    """A block sink that opens the RecordingWriter at the stream's first block.

    The header of a recording names the channels, which a live stream only reveals
    with its first lines, and the sample rate, which may take seconds more (arrival
    times settle in 1.5 to 3 s). Rows never wait for the rate: the writer opens at
    the first block, so every row reaches the file within the writer's flush
    interval (100 ms) and a killed process keeps them. Opened before the rate is
    known, the header reads `# rate_hz: unknown` with room kept; the rate is filled
    in (RecordingWriter.rate_found) at the first block after the pipeline knows it.
    Gap marks that come before any block are held (at most MAX_HELD_GAPS).

    announce: called with one sentence (no final stop) per stream column that the
              file writes under another name (replay.column_names), when it opens.
    """

    def __init__(self, pipeline: Any, path: str, chain_text: str | None, force: bool,
                 announce: Callable[[str], None] | None = None,
                 **writer_options: Any) -> None:
        self.pipeline = pipeline
        self.writer_options = writer_options
        self.path = path
        self.chain_text = chain_text
        self.force = force
        self.announce = announce
        self._writer: Any = None
        self._rate_pending = False
        self._held_gaps: list[str] = []
        self._gaps_not_held = 0

    def write_block(self, block: Any, filtered: Any = None) -> None:
        if self._writer is None:
            self._open(block.values.shape[1])
        self._fill_rate()
        self._writer.write_block(block, filtered)

    def write_gap(self, reason: str) -> None:
        if self._writer is None and self.pipeline.schema is None:
            if len(self._held_gaps) < MAX_HELD_GAPS:
                self._held_gaps.append(reason)
            else:
                self._gaps_not_held += 1
            return
        if self._writer is None:
            self._open(None)
        self._writer.write_gap(reason)

    def write_rate_change(self, rate_hz: float, origin: str, previous_hz: float) -> None:
        if self._writer is None:        # the pipeline only redesigns after a block
            return
        self._fill_rate()
        self._writer.write_rate_change(rate_hz, origin, previous_hz)

    def close(self) -> None:
        if self._writer is None and self._held_gaps and self.pipeline.schema is not None:
            self._open(None)
        if self._writer is not None:
            self._fill_rate()
            self._writer.close()

    def _fill_rate(self) -> None:
        if not self._rate_pending:
            return
        rate = self.pipeline.rate()
        if rate is not None:
            self._rate_pending = False
            self._writer.rate_found(rate[0], rate[1])

    def _open(self, width: int | None) -> None:
        from monitor.block import Schema
        from replay.writer import RecordingWriter

        schema = self.pipeline.schema
        if schema is None or (width is not None and len(schema.channels) != width):
            # no names yet (or not this block's): the pipeline's own default names
            schema = Schema(tuple(f"ch{i}" for i in range(width or 0)))
        rate = self.pipeline.rate()
        self._writer = RecordingWriter(
            self.path, schema, self.pipeline.source.describe(),
            rate[0] if rate else None, rate[1] if rate else None, self.chain_text,
            force=self.force, rate_to_come=rate is None, **self.writer_options)
        self._rate_pending = rate is None
        if self.announce is not None:
            for rename in self._writer.renames:
                self.announce(rename.sentence())
        held, self._held_gaps = self._held_gaps, []
        for reason in held:
            self._writer.write_gap(reason)
        if self._gaps_not_held:
            self._writer.write_gap(f"{self._gaps_not_held} more gaps before the first row")
            self._gaps_not_held = 0
