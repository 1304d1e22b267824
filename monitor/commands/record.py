"""`tunetrace record SOURCE -o FILE`: headless recording with a closing summary line."""

from __future__ import annotations

import argparse
import os
import signal
import sys
import time
from typing import Any

from monitor.binary_options import add_binary_options
from monitor.commands.common import (
    DEFAULT_BAUD,
    baud_rate,
    channel_list,
    positive_float,
)
from monitor.errors import UserError

POLL_S = 0.1


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("source", metavar="SOURCE",
                        help="device path, pyserial URL, - for stdin, or sim://")
    parser.add_argument("-o", "--output", required=True, metavar="FILE",
                        help="the recording to create (CSV with a metadata header)")
    parser.add_argument("--duration", type=positive_float, metavar="S",
                        help="stop after S seconds (default: until Ctrl-C or the source ends)")
    parser.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    parser.add_argument("--with-filtered", action="store_true",
                        help="also write <channel>_filtered columns from --chain (give "
                             "--rate too: until the rate is known, filtered equals raw)")
    parser.add_argument("--max-bytes", type=positive_float, metavar="N",
                        help="stop cleanly before the file grows beyond N bytes")
    parser.add_argument("--max-seconds", type=positive_float, metavar="S",
                        help="stop cleanly once the recording spans S seconds")
    parser.add_argument("--chain", metavar="FILE",
                        help="chain file (TOML): kept in the header, and run for --with-filtered")
    parser.add_argument("--baud", type=baud_rate, default=DEFAULT_BAUD, metavar="N",
                        help=f"line speed in baud (default {DEFAULT_BAUD})")
    parser.add_argument("--rate", type=positive_float, metavar="HZ",
                        help="declared sample rate (else the chain's rate_hz, device time "
                             "or estimated)")
    parser.add_argument("--time-column", metavar="NAME",
                        help="column holding the device time in seconds")
    parser.add_argument("--counter-column", metavar="NAME",
                        help="column holding the sample counter; gaps count as dropped")
    parser.add_argument("--channels", type=channel_list, metavar="NAMES",
                        help="column names (a,b,c); they win over the board's header "
                             "line, whose units are kept")
    add_binary_options(parser)


class _WatchedSink:
    """Passes everything to the recording and keeps the exception that stopped it."""

    def __init__(self, inner: Any) -> None:
        self.inner = inner
        self.path = inner.path
        self.error: BaseException | None = None

    def write_block(self, block: Any, filtered: Any = None) -> None:
        self._call(self.inner.write_block, block, filtered)

    def write_gap(self, reason: str) -> None:
        self._call(self.inner.write_gap, reason)

    def write_rate_change(self, rate_hz: float, origin: str, previous_hz: float) -> None:
        self._call(self.inner.write_rate_change, rate_hz, origin, previous_hz)

    def close(self) -> None:
        self._call(self.inner.close)

    def _call(self, fn: Any, *args: Any) -> None:
        try:
            fn(*args)
        except Exception as exc:
            self.error = self.error or exc
            raise


def run(args: argparse.Namespace) -> int:
    from monitor.stop_signals import StopRequest

    # SIGTERM and SIGHUP (terminal closed, SSH dropped) stop like Ctrl-C from the start,
    # so even one that comes while the port opens ends with a closed file and a summary
    with StopRequest() as stop:
        return _record(args, stop)


def _record(args: argparse.Namespace, stop: Any) -> int:
    from monitor.commands.common import DeferredRecording, build_pipeline, check_record_path
    from monitor.pipeline import StartRecording
    from monitor.stop_signals import print_safely
    from replay.writer import RecordingFull, open_error_sentence

    path = args.output
    check_record_path(path, force=args.force)
    chain_text = None
    if args.chain:
        from monitor.commands.common import read_chain_text

        chain_text = read_chain_text(args.chain)
    elif args.with_filtered:
        raise UserError("--with-filtered needs --chain FILE, the chain whose output to record.")
    args.record = None          # build_pipeline must not start a second recording
    args.ring_seconds = 10.0    # headless: only a little history is kept
    pipeline = build_pipeline(args, args.source, chain_text=chain_text, chain_name=args.chain)
    sink = _WatchedSink(DeferredRecording(
        pipeline, path, chain_text, args.force, announce=_note_rename,
        with_filtered=args.with_filtered,
        limit_bytes=int(args.max_bytes) if args.max_bytes else None,
        limit_seconds=args.max_seconds))
    pipeline.submit(StartRecording(sink))
    print_safely(f"tunetrace record: {pipeline.status().source_description} -> {path} "
                 "(Ctrl-C stops)", sys.stderr)
    started = time.monotonic()
    stop.watch(signal.SIGINT)       # Ctrl-C too sets the flag now: no exception mid-stop
    pipeline.start()
    try:
        while not stop.requested:
            time.sleep(POLL_S)
            status = pipeline.status()
            if not status.running or (status.recording is None and status.recording_error):
                break
            if args.duration is not None and time.monotonic() - started >= args.duration:
                break
    except KeyboardInterrupt:
        pass
    finally:
        pipeline.stop()
    status = pipeline.status()
    print_safely(summary(path, status, time.monotonic() - started), sys.stdout)
    if isinstance(sink.error, RecordingFull):
        print_safely(f"tunetrace record: recording stopped: {sink.error}", sys.stderr)
        return 0
    if isinstance(sink.error, OSError):
        raise UserError(open_error_sentence(sink.error, path), exit_code=1)
    if sink.error is not None or status.recording_error:
        raise UserError(f"{status.recording_error or sink.error}; {path} may be incomplete.",
                        exit_code=1)
    if status.error:
        raise UserError(f"the stream stopped on an internal error ({status.error}); "
                        "please report it.", exit_code=1)
    return 0


def _note_rename(sentence: str) -> None:
    from monitor.stop_signals import print_safely

    print_safely(f"tunetrace record: {sentence}.", sys.stderr)


def summary(path: str, status: Any, seconds: float) -> str:
    """The closing line: frames, bad, dropped, seconds, file size."""
    try:
        size = f"{os.path.getsize(path)} bytes"
    except OSError:
        size = "not written"
    return (f"recorded {path}: {status.frames} frames, {status.bad} bad, {status.dropped} "
            f"dropped, {status.gaps} gaps, {seconds:.1f} s, {size}")
