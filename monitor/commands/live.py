"""`tunetrace live SOURCE`: a real source through the chain, in the UI or as plain stats lines."""

from __future__ import annotations

import argparse
import signal
import sys
import time
from typing import Any, TextIO

from monitor.commands.common import add_source_options, build_pipeline
from monitor.errors import UserError

STATS_INTERVAL_S = 1.0
STATS_WINDOW_S = 10.0          # a stats line's noise covers this much sample time at most


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from monitor.stats import FIGURES_HELP

    parser.epilog = FIGURES_HELP
    parser.add_argument("source", metavar="SOURCE",
                        help="device path (/dev/ttyACM0, COM3), pyserial URL (socket://host:port, "
                             "rfc2217://..., loop://), - for stdin, or sim://")
    add_source_options(parser)
    parser.add_argument("--force", action="store_true",
                        help="overwrite the --record file if it exists")


def run(args: argparse.Namespace) -> int:
    pipeline = build_pipeline(args, args.source)
    return run_session(pipeline, args)


def run_session(pipeline: Any, args: argparse.Namespace) -> int:
    """Plain stats lines with --plain, else the terminal UI; both stop the pipeline at the end.

    SIGTERM and SIGHUP stop either like Ctrl-C (monitor.stop_signals): the
    pipeline stops, any recording closes with its trailer and fsync, and the status is 0.
    """
    if getattr(args, "plain", False):
        return run_plain(pipeline, getattr(args, "duration", None))
    try:
        from monitor.tui.app import run_app
    except ImportError as exc:
        pipeline.stop()
        raise UserError(f"the terminal UI cannot start ({exc}); use --plain for stats lines.",
                        exit_code=1) from None
    pipeline.start()
    return run_app(pipeline, args)


def run_plain(pipeline: Any, duration: float | None, out: TextIO | None = None,
              err: TextIO | None = None) -> int:
    """Print one stats line per second until `duration` s, Ctrl-C, SIGTERM, SIGHUP or the
    end of the source."""
    from monitor.stop_signals import StopRequest, print_safely

    out, err = out or sys.stdout, err or sys.stderr
    plus_minus = "±" if _can_print(out, "±") else "+/-"
    from monitor.stats import SessionNoise

    pipeline.noise = SessionNoise()
    with StopRequest() as stop:
        stop.watch(signal.SIGINT)       # Ctrl-C sets the flag too: nothing cuts the stop short
        pipeline.start()
        started = time.monotonic()
        next_line, shown_total = started + STATS_INTERVAL_S, 0
        reported: set[str] = set()
        try:
            while not stop.requested:
                now = time.monotonic()
                status = pipeline.status()
                _report_problems(status, reported, err)
                if not status.running or (duration is not None and now - started >= duration):
                    break
                if now >= next_line:
                    total = status.samples_total
                    stats = _newest_stats(pipeline, total - shown_total, status.chain_since)
                    line = stats_line(now - started, status, pipeline, stats, plus_minus)
                    if not print_safely(line, out):
                        break                   # the terminal hung up or the pipe closed
                    shown_total = total
                    next_line += STATS_INTERVAL_S * max(1, int((now - next_line)
                                                               // STATS_INTERVAL_S))
                wake = next_line if duration is None else min(next_line, started + duration)
                time.sleep(max(0.0, min(0.05, wake - time.monotonic())))
        except KeyboardInterrupt:
            pass
        finally:
            pipeline.stop()
        status = pipeline.status()
        _report_problems(status, reported, err)
        print_safely(summary_line(time.monotonic() - started, status, pipeline,
                                  pipeline.noise.figures()), out)
    if status.error:
        raise UserError(f"the stream stopped on an internal error ({status.error}); "
                        f"please report it.", exit_code=1)
    return 0


def _can_print(stream: TextIO, text: str) -> bool:
    try:
        text.encode(getattr(stream, "encoding", None) or "ascii")
    except (UnicodeEncodeError, LookupError):
        return False
    return True


def _report_problems(status: Any, reported: set[str], err: TextIO) -> None:
    """Each new chain, recording, decoding or reader problem once on stderr."""
    for text in (status.chain_error, status.recording_error, status.warning, status.error,
                 status.notice):
        if text and text not in reported:
            reported.add(text)
            from monitor.stop_signals import print_safely

            print_safely(f"tunetrace: {text}", err)     # after a hangup stderr is gone


RATE_MOVE_SHOWN_S = 10.0       # how long a stats line says that the rate moved


def rate_text(status: Any, now: float | None = None) -> str:
    """e.g. '250 Hz declared', '~249.8 Hz estimating', 'rate ?', and for RATE_MOVE_SHOWN_S
    after a redesign at a moved rate '~1010 Hz estimated (moved from 1000 Hz, redesigned)'."""
    if status.rate_hz is None:
        return "rate ?"
    waiting = status.chain_note is not None and status.rate_origin == "estimated"
    prefix = "~" if status.rate_origin == "estimated" else ""
    origin = "estimating" if waiting else status.rate_origin
    jitter = getattr(status, "jitter_s", None)
    if status.rate_origin == "device" and jitter is not None:
        text = f"{status.rate_hz:.5g} Hz device (jitter {jitter * 1e6:.1f} us)"
    else:
        text = f"{prefix}{status.rate_hz:.5g} Hz {origin}"
    return text + rate_move_text(status, now)


def rate_move_text(status: Any, now: float | None = None) -> str:
    """' (moved from 1000 Hz, redesigned)' shortly after a redesign at a moved rate, else ''."""
    moved_at = getattr(status, "rate_moved_at", None)
    if moved_at is None or (now or time.monotonic()) - moved_at > RATE_MOVE_SHOWN_S:
        return ""
    return f" (moved from {status.rate_moved_from:.5g} Hz, redesigned)"


def _channel_labels(pipeline: Any, count: int) -> list[str]:
    schema = pipeline.schema
    labels = []
    for k in range(count):
        name = schema.channels[k] if schema is not None and k < len(schema.channels) else f"ch{k}"
        unit = schema.unit(k) if schema is not None else ""
        labels.append(f"{name}[{unit}]" if unit else name)
    return labels


def _newest_stats(pipeline: Any, new_samples: int, chain_since: int) -> list[Any]:
    """Stats of the last STATS_WINDOW_S of samples (sample time, so any replay speed gives
    the same figures), or [] when no sample arrived since the last line."""
    from monitor.stats import ring_stats

    ring = pipeline.ring
    if ring is None or new_samples <= 0:
        return []
    rate = pipeline.rate()
    window = int(STATS_WINDOW_S * rate[0]) if rate else new_samples
    return ring_stats(ring, max(1, min(window, ring.capacity)), pipeline.chain, chain_since)


def stats_line(elapsed: float, status: Any, pipeline: Any, stats: list[Any],
               plus_minus: str = "±") -> str:
    """One line: time, rate, counts, then per channel raw and filtered mean ± noise."""
    head = (f"{elapsed:6.1f} s  {rate_text(status)}  frames {status.frames}  bad {status.bad}  "
            f"dropped {status.dropped}")
    if status.source_state not in ("connected", "ended"):
        head += f"  [{status.source_state}]"
    if not stats:
        return head + "  (no new samples)"
    parts = [
        f"{label} raw {s.mean_raw:.4g}{plus_minus}{s.noise_raw:.3g} "
        f"filt {s.mean_filtered:.4g}{plus_minus}{s.noise_filtered:.3g} "
        f"nr {_db(s.reduction_db)}"
        for label, s in zip(_channel_labels(pipeline, len(stats)), stats, strict=True)
    ]
    return head + "  | " + "  | ".join(parts)


def _db(value: float) -> str:
    from monitor.stats import format_db

    text = format_db(value)
    return text if text == "-" else f"{text} dB"


def summary_line(elapsed: float, status: Any, pipeline: Any, figures: Any) -> str:
    """The closing line: totals, and each channel's noise reduction over the session.

    figures: monitor.stats.SessionFigures (None when no sample went through the chain):
    the measured reduction pooled over every sample of the current chain, beside the
    chain's exact white-noise reduction.
    """
    per_s = status.frames / elapsed if elapsed > 0 else 0.0
    text = (f"summary: {elapsed:.1f} s  {status.frames} frames ({per_s:.1f}/s)  bad "
            f"{status.bad}  dropped {status.dropped}  gaps {status.gaps}  {rate_text(status)}")
    from monitor.stats import format_db

    if figures is not None and figures.samples:
        labels = _channel_labels(pipeline, len(figures.reduction_db))
        text += "  noise reduction measured/white " + ", ".join(
            f"{label} {format_db(db)}/{white:.1f} dB" for label, db, white
            in zip(labels, figures.reduction_db, figures.white_reduction_db, strict=True))
    if status.last_bad_reason:
        text += f"  (last bad frame: {status.last_bad_reason})"
    return text
