"""Offline apply: run a chain over a whole recording and write every input column plus
`<channel>_filtered` per channel.

The chain is the same ChainSet the live pipeline runs, fed block by block with
its state carried, so the numbers equal what the pipeline computes on the same
samples (ChainSet's result does not depend on how the stream is cut into
blocks). Input rows are copied as text, so every input column, numeric or not,
comes out exactly as it went in; only the filtered values are formatted.

The output is written through replay.outputfile: a temporary file created exclusively
beside it, renamed over it at the end, so a failed or interrupted apply leaves no half
file and an old output intact, and a symbolic link at the output's name is replaced
itself (with --force), never written through.
"""

from __future__ import annotations

import csv
import io
import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TypeVar

from filters.chainset import ChainSet
from filters.noise import NoiseMeter, chain_noise_models
from filters.spec import ChainSpec
from monitor import __version__
from replay.csvtext import format_full_precision
from replay.outputfile import NotAFileError, write_whole
from replay.reader import TEXT_ERRORS, Gap, NoTimeColumnError, Recording, RecordingError
from replay.writer import MAGIC

_T = TypeVar("_T")
NOISE_CHUNK_S = 10.0          # the measured noise is pooled over chunks of this much sample time


@dataclass
class ApplySummary:
    """What one offline apply did: rows written, rows skipped, the rate used, output size."""

    rows: int
    bad_rows: int
    torn_last_line: bool
    gaps: int
    rate_hz: float
    rate_origin: str
    out_path: str
    bytes_written: int
    seconds: float
    channels: tuple[str, ...] = ()
    reduction_db: tuple[float, ...] = ()         # measured per channel (filters.noise)
    white_reduction_db: tuple[float, ...] = ()   # the chain's exact white-noise reduction


def apply_rate(recording: Recording, declared_hz: float | None,
               chain_hz: float | None = None) -> tuple[float, str]:
    """(Hz, origin) the chain runs at over a file: `declared_hz` (--rate), else the
    recording's own rate (its header, --rate given to the reader, or estimated from its
    time column), else `chain_hz` (the chain's rate_hz, "declared"), else RecordingError."""
    if declared_hz is not None:
        return float(declared_hz), "declared"
    rate = recording.rate()
    if rate is not None:
        return rate
    if chain_hz is not None:
        return float(chain_hz), "declared"
    raise RecordingError(f"the sample rate of {recording.path} is unknown; "
                         "give it with --rate HZ.")


def rate_disagreement(recording: Recording, rate: tuple[float, str],
                      chain_hz: float | None) -> str | None:
    """A note when the file's own rate won over a different rate_hz of the chain, else None."""
    if chain_hz is None or abs(rate[0] - chain_hz) <= 1e-3 * chain_hz:
        return None
    return (f"the chain's rate_hz = {chain_hz:g} differs from the {rate[0]:g} Hz "
            f"({rate[1]}) of {recording.path}; the chain runs at {rate[0]:g} Hz "
            "(give --rate to choose).")


def open_with_fallback(open_file: Callable[[float | None], _T], rate_hz: float | None,
                       chain_hz: float | None) -> _T:
    """`open_file(rate_hz)`; for a file without a time column and no --rate, again with the
    chain's rate_hz (the file then gets t = row / rate_hz). Raises RecordingError."""
    try:
        return open_file(rate_hz)
    except NoTimeColumnError:
        if rate_hz is not None or chain_hz is None:
            raise
    return open_file(chain_hz)


def apply_chain(
    recording: Recording,
    spec: ChainSpec,
    out_path: str | os.PathLike[str],
    *,
    chain_text: str | None = None,
    rate_hz: float | None = None,
    force: bool = False,
    progress: Callable[[float], None] | None = None,
) -> ApplySummary:
    """Filter `recording` with `spec` and write the result to `out_path` (CSV).

    rate_hz:    declared rate (Hz); else the recording's (header, --rate, or estimated),
                else spec.rate_hz (see apply_rate).
    chain_text: the chain file text, written as `# chain:` lines of a tunetrace output.
    force:      replace an existing output, atomically (never the input itself); a
                symbolic link at out_path is replaced, its target is left alone; a
                terminal, /dev/null or a named pipe at out_path is written into.
    progress:   called now and then with the fraction of the input read (0..1).
    Raises ValueError (the chain cannot run at that rate), RecordingError, OSError.
    """
    began = time.monotonic()
    rate, origin = apply_rate(recording, rate_hz, spec.rate_hz)
    channels = recording.schema.channels
    chain = ChainSet(spec, channels, rate)
    models = chain_noise_models(chain, len(channels))
    meter = NoiseMeter(models, max(int(NOISE_CHUNK_S * rate), 64))
    out_path = os.fspath(out_path)
    if os.path.exists(out_path) and os.path.samefile(out_path, recording.path):
        raise RecordingError(f"{out_path} is the input recording; write the output to "
                             "another file.")
    header = recording.header
    drop = len(header.filtered_columns)
    kept = list(header.columns[: len(header.columns) - drop])
    added = [f"{name}_filtered" for name in channels]
    clash = sorted(set(added) & set(kept))
    if clash:
        raise RecordingError(f"{recording.path} already has a column {clash[0]}; rename it "
                             "before applying a chain.")
    ours = header.format_version is not None
    try:
        size, rows, gaps = _write_output(recording, chain, meter, out_path, force, progress,
                                         _output_header(recording, kept + added, rate,
                                                        origin, chain_text, ours))
    except NotAFileError as exc:
        raise RecordingError(str(exc)) from None
    if progress is not None:
        progress(1.0)
    sums = meter.total()
    return ApplySummary(rows, recording.bad_rows, recording.torn_last_line, gaps, rate,
                        origin, out_path, size, time.monotonic() - began, tuple(channels),
                        tuple(float(v) for v in sums.reduction_db()),
                        tuple(m.white_reduction_db for m in models))


def _write_output(recording: Recording, chain: ChainSet, meter: NoiseMeter, out_path: str,
                  force: bool, progress: Callable[[float], None] | None, head: str
                  ) -> tuple[int, int, int]:
    """Filter every segment and write the output whole; (bytes, rows, gaps) written."""
    header = recording.header
    drop = len(header.filtered_columns)
    ours = header.format_version is not None
    resplit = header.delimiter != ","
    rows = gaps = size = 0
    shown = 0.0
    with write_whole(out_path, replace=force) as raw:
        def write(text: str) -> None:
            nonlocal size            # counted here: a pipe or a terminal cannot tell()
            # text columns of another logger keep their exact bytes (reader.TEXT_ERRORS)
            size += raw.write(text.encode("utf-8", errors=TEXT_ERRORS))

        write(head)
        for item in recording.segments(keep_text=True):
            if isinstance(item, Gap):
                gaps += 1
                meter.break_here()
                if ours:
                    write(f"# gap: {item.reason}\n")
                continue
            lines = item.lines
            if drop:
                lines = [line.rsplit(",", drop)[0] for line in lines]
            elif resplit:
                lines = _to_commas(lines, header.delimiter)
            values = item.block.values
            result = chain.process(values)
            meter.update(values, result)
            filtered = format_full_precision(result)
            write("\n".join([f"{a},{b}" for a, b in zip(lines, filtered, strict=True)])
                  + "\n")
            rows += len(lines)
            now = time.monotonic()
            if progress is not None and now - shown > 0.2:
                shown = now
                progress(recording.progress())
    return size, rows, gaps


def _output_header(recording: Recording, columns: list[str], rate: float, origin: str,
                   chain_text: str | None, ours: bool) -> str:
    """Our header lines (for a tunetrace input) and the CSV header row."""
    row = io.StringIO()
    csv.writer(row, lineterminator="\n").writerow(columns)
    if not ours:
        return row.getvalue()
    h = recording.header
    now = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    channels = ", ".join(f"{n} [{u}]" if u else n
                         for n, u in zip(recording.schema.channels, recording.schema.units,
                                         strict=False))
    lines = [MAGIC, f"# tool: tunetrace {__version__}",
             f"# applied: {now} to {os.path.basename(recording.path)}"]
    lines += [f"# {key}: {value}" for key, value in
              (("started", h.started), ("source", h.source)) if value]
    lines += [f"# rate_hz: {rate!r} ({origin})", f"# channels: {channels}"]
    if h.device_time_column:
        lines.append(f"# time_column: {h.device_time_column}")
    if h.counter_column:
        lines.append(f"# counter_column: {h.counter_column}")
    lines += [f"# chain: {line}".rstrip() for line in (chain_text or "").splitlines()]
    return "\n".join(lines) + "\n" + row.getvalue()


def _to_commas(lines: list[str], delimiter: str) -> list[str]:
    """Rewrite rows split at `delimiter` as comma-separated CSV (quoting as RFC 4180 needs)."""
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows(csv.reader(lines, delimiter=delimiter))
    return buffer.getvalue().split("\n")[:-1]
