"""The reader thread: source -> framer -> decoder -> chain -> ring -> recorder.

One thread per source owns the framer, decoder, chain, ring writes and the
sink; it never waits on a reader. Other threads talk to it only through a
bounded command queue, applied between blocks (so a chain is never half
replaced), and read its results through `ring.latest(n)` and `status()`.

Pause on a live source keeps reading, filtering and recording (the device
must be drained and the filter state stay continuous) but stops writing the
ring, so the view holds still. A source with pause()/resume() (replay) is
paused itself instead. Seek and SetSpeed go to sources that offer seek(s) and
set_speed(x).

End of a replay: when a source that can seek ends, the reader thread stops (status
running = False, as for any ended source, so headless callers finish) but leaves the
source and the sink open: it is "at rest". A command submitted at rest starts a new
reader thread that applies it, so a Seek plays on from there (the recording, if any,
goes on with the rows after the jump) and SetSpeed, chain edits or recording
commands still take effect; stop() closes what rest left open.

Rate moves: when the source's (measured, not declared) rate later moves by more
than RATE_MOVE_TOLERANCE from the rate the chain was designed at, the chain is
redesigned at the new rate and continues bumplessly (ChainSet.continue_from);
the status says so (notice, rate_moved_from) and a recording gets a
`# rate_hz_changed:` line between the rows before and after the swap.

Gap order: a source's take_gaps() after read_block() are the gaps that came
before that block's rows (FramedSource holds back a gap that followed them).
"""

from __future__ import annotations

import dataclasses
import queue
import threading
import time
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from filters.chainset import ChainSet
from filters.spec import ChainSpec
from monitor.block import Block, Schema
from monitor.counters import BadFrames
from monitor.framed_source import FramedSource as FramedSource  # re-exported: the live source
from monitor.framed_source import text_source as text_source
from monitor.ring import (
    DEFAULT_RING_CAPACITY,
    DEFAULT_RING_MEMORY,
    MAX_CHANNELS,
    Ring,
    capacity_within,
    ring_bytes,
)

READ_TIMEOUT_S = 0.05          # bounds how long stop() and commands wait
COMMAND_QUEUE_SIZE = 64
RATE_MOVE_TOLERANCE = 5e-3    # 0.5 %: a smaller move is measurement noise, not a new rate
RATE_WAIT_NOTE = ("filtered = raw until the sample rate is known: estimating it from "
                  "arrival times (give --rate HZ to skip)")


class BlockSource(Protocol):
    """What the pipeline consumes (DEVELOPERS.md, block source)."""

    schema: Schema | None
    state: str

    def read_block(self, timeout: float) -> Block | None: ...
    def take_gaps(self) -> list[str]: ...
    def describe(self) -> str: ...
    def rate_hint(self) -> tuple[float, str] | None: ...
    def close(self) -> None: ...


class BlockSink(Protocol):
    """A recorder (DEVELOPERS.md, block sink)."""

    def write_block(self, block: Block, filtered: np.ndarray) -> None: ...
    def write_gap(self, reason: str) -> None: ...
    def close(self) -> None: ...


# -- commands ------------------------------------------------------------------

@dataclass(frozen=True)
class ReplaceChain:
    """Swap in a chain built and validated by the caller; it continues bumplessly."""
    chain: ChainSet


@dataclass(frozen=True)
class Pause:
    """Hold the view still (live) or pause the player (replay)."""


@dataclass(frozen=True)
class Resume:
    """Undo Pause."""


@dataclass(frozen=True)
class ResetChain:
    """Forget every stage's state; the next sample restarts it by its start policy."""


@dataclass(frozen=True)
class StartRecording:
    """Record every raw sample to `sink` from the next block on (closes any previous one)."""
    sink: Any


@dataclass(frozen=True)
class StopRecording:
    """Close the current sink."""


@dataclass(frozen=True)
class Seek:
    """Jump to `seconds` from the start (replay sources)."""
    seconds: float


@dataclass(frozen=True)
class SetSpeed:
    """Playback speed factor, None for as fast as possible (replay sources)."""
    speed: float | None


# -- status --------------------------------------------------------------------

@dataclass
class PipelineStatus:
    """A consistent copy of what the reader thread knows; counts are since start.

    frames: good frames decoded; bad: rejected frames (framer and decoder), with the
    newest in last_bad/last_bad_reason; dropped: samples lost (counter gaps); ring_overflow:
    samples overwritten in the ring (old history, not loss); gaps: source gaps (reconnects).
    chain_note says why filtered equals raw while waiting for a rate; chain_error why a
    chain was refused or failed. error: the reader thread stopped on this unexpected error.
    jitter_s: spread of the device clock's sample intervals (s), when the stream has one.
    rate_moved_from / rate_moved_at: the rate (Hz) the chain was designed at before the
    newest redesign for a moved rate, and when (monotonic s); rate_redesigns counts them.
    chain_since: ring sample index (see RingSnapshot.total) from which the running chain
    filtered, fresh or reset: figures of the filtered signal start there.
    """

    source_state: str = "connecting"
    source_description: str = ""
    rate_hz: float | None = None
    rate_origin: str | None = None
    frames: int = 0
    bad: int = 0
    last_bad: bytes | None = None
    last_bad_reason: str = ""
    dropped: int = 0
    ring_overflow: int = 0
    gaps: int = 0
    last_gap: str | None = None
    recording: str | None = None
    recording_error: str | None = None
    paused: bool = False
    chain_error: str | None = None
    chain_note: str | None = None
    samples_total: int = 0
    started_monotonic: float = 0.0
    running: bool = False
    error: str | None = None
    notice: str | None = None
    warning: str | None = None
    jitter_s: float | None = None
    commands_dropped: int = 0
    rate_moved_from: float | None = None
    rate_moved_at: float | None = None
    rate_redesigns: int = 0
    chain_since: int = 0


# -- the pipeline ----------------------------------------------------------------

class Pipeline:
    """Runs one source through the chain into the ring on its own thread.

    source:        a block source (FramedSource for live streams, ReplaySource).
    chain_spec:    the chain to build once channels and rate are known; None = identity.
    rate_hz:       declared sample rate (Hz); else the chain file's rate_hz; else the source's.
    ring_capacity: samples of history wanted (see monitor.ring for the memory formula).
    sink:          a recorder receiving every block, or None.
    ring_memory:   bytes the ring may take: a stream too wide for ring_capacity samples
                   within it keeps fewer samples, and `notice` says so.
    `ring` is None until the stream's channels are known (its first block), and stays
    None for a stream wider than monitor.ring.MAX_CHANNELS: the view is refused (notice
    says so) while the chain and the sink still get every block, so a recording keeps
    every row.
    """

    def __init__(self, source: Any, chain_spec: ChainSpec | None = None,
                 rate_hz: float | None = None, ring_capacity: int = DEFAULT_RING_CAPACITY,
                 sink: Any = None, ring_memory: int = DEFAULT_RING_MEMORY) -> None:
        if rate_hz is not None and not rate_hz > 0:
            raise ValueError(f"rate_hz = {rate_hz!r} must be a positive number of Hz")
        if not isinstance(ring_capacity, int) or ring_capacity < 1:
            raise ValueError(f"ring_capacity = {ring_capacity!r} must be a whole number >= 1")
        if not isinstance(ring_memory, int) or ring_memory < ring_bytes(1, 1):
            raise ValueError(f"ring_memory = {ring_memory!r} must be a whole number of bytes "
                             f">= {ring_bytes(1, 1)}")
        self.source = source
        self.chain_spec = chain_spec
        self.ring_capacity = ring_capacity
        self.ring_memory = ring_memory
        self.ring: Ring | None = None
        self._ring_refused = False
        chain_hz = chain_spec.rate_hz if chain_spec is not None else None
        if rate_hz is None and chain_hz is not None and _file_rate(source) is not None:
            chain_hz = None         # a recording's own rate beats the chain's rate_hz (as apply)
        self._declared = rate_hz if rate_hz is not None else chain_hz
        self._chain: ChainSet | None = None
        self._chain_seen: ChainSet | None = None  # the chain chain_since was taken for
        self._chain_ready = False           # built for a known rate (or replaced by the user)
        self._design_rate: float | None = None   # the rate the running chain was built for
        self._refused_rate: float | None = None  # a moved rate the chain could not run at
        self._sink = sink
        self.noise: Any = None              # a monitor.stats.SessionNoise, set before start()
        self._commands: queue.Queue = queue.Queue(maxsize=COMMAND_QUEUE_SIZE)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._lock = threading.Lock()
        self._commands_dropped = 0
        self._at_rest = False               # a seekable source ended; see the module docstring
        self._work = PipelineStatus(source_description=self._describe_source(),
                                    recording=_sink_name(sink))
        self._published = dataclasses.replace(self._work)

    # -- control (any thread) ----------------------------------------------------

    def start(self) -> None:
        """Start the reader thread (a second call does nothing)."""
        if self._thread is not None:
            return
        self._work.started_monotonic = time.monotonic()
        self._work.running = True
        self._publish()
        self._thread = threading.Thread(target=self._run, name="tunetrace-reader", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 2.0) -> None:
        """Stop the reader thread and wait up to `timeout` s for it; closes source and sink."""
        self._stop.set()
        with self._lock:                    # submit() may have just started a new thread
            thread = self._thread
        if thread is None:
            _quietly(self.source.close)
            if self._sink is not None:
                _quietly(self._sink.close)
            return
        thread.join(timeout)
        if thread.is_alive():              # stuck in a read: closing the source frees it
            _quietly(self.source.close)
            thread.join(READ_TIMEOUT_S * 10)
        with self._lock:
            at_rest, self._at_rest = self._at_rest, False
        if at_rest:                        # the thread ended at rest: nothing else touches these
            _quietly(self.source.close)
            self._close_sink()
            self._publish()

    def submit(self, command: Any) -> bool:
        """Queue a command for the reader thread; False (and counted) if the queue is full."""
        try:
            self._commands.put_nowait(command)
        except queue.Full:
            with self._lock:
                self._commands_dropped += 1
                self._published.commands_dropped = self._commands_dropped
            return False
        with self._lock:
            if self._at_rest and not self._stop.is_set():
                self._at_rest = False      # wake: a new reader thread applies the command
                rested = self._thread
                self._thread = threading.Thread(target=self._wake, args=(rested,),
                                                name="tunetrace-reader", daemon=True)
                self._thread.start()
        return True

    def status(self) -> PipelineStatus:
        """A consistent copy of the current status."""
        with self._lock:
            return dataclasses.replace(self._published)

    @property
    def schema(self) -> Schema | None:
        return self.source.schema

    @property
    def chain(self) -> ChainSet | None:
        """The running chain (read it; only the reader thread calls process)."""
        return self._chain

    def is_alive(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def rate(self) -> tuple[float, str] | None:
        """(Hz, origin) of the sample rate, or None while it is not known."""
        if self._declared is not None:
            return (float(self._declared), "declared")
        return self.source.rate_hint()

    # -- the reader thread ---------------------------------------------------------

    def _wake(self, rested: threading.Thread) -> None:
        """The reader thread again after rest, once the one that rested has finished."""
        rested.join()
        self._work.running = True
        self._run()

    def _rest_at_end(self) -> bool:
        """True when no command waits: the thread then stops at rest, and submit() starts
        a new one for the next command. A command queued before this check is applied
        by this thread first (the lock orders the two)."""
        with self._lock:
            if not self._commands.empty():
                return False
            self._at_rest = True
            return True

    def _run(self) -> None:
        at_rest = False
        try:
            while not self._stop.is_set():
                self._apply_commands()
                block = self.source.read_block(READ_TIMEOUT_S)
                for reason in self.source.take_gaps():
                    self._work.gaps += 1
                    self._work.last_gap = reason
                    self._to_sink("write_gap", reason)
                    if self.noise is not None:
                        self.noise.gap()
                if block is not None and len(block):
                    self._handle(block)
                self._publish()
                if self.source.state == "ended":
                    if not callable(getattr(self.source, "seek", None)):
                        break              # a live source that ended: closed below
                    at_rest = self._rest_at_end()
                    if at_rest:
                        break              # else a command waits: apply it and go on
        except Exception as exc:  # shown in status; the process keeps running
            self._work.error = f"reader stopped: {type(exc).__name__}: {exc}"
        finally:
            if not at_rest:                # at rest a seek may continue: stop() closes them
                _quietly(self.source.close)
                self._close_sink()
            self._work.running = False
            self._publish()

    def _handle(self, block: Block) -> None:
        values = block.values
        if self.ring is None and not self._ring_refused:
            self._open_ring(values.shape[1])
        self._ensure_chain(values.shape[1])
        self._follow_rate()
        try:
            filtered = self._chain.process(values)
        except Exception as exc:
            self._work.chain_error = f"the chain failed ({exc}); showing raw until it is replaced"
            self._chain = ChainSet.identity(self._channels(values.shape[1]))
            filtered = self._chain.process(values)
        ring = self.ring
        if self._chain is not self._chain_seen:
            self._chain_seen, self._work.chain_since = self._chain, ring.total if ring else 0
        if ring is not None and (not self._work.paused or self._source_pauses()):
            ring.write(block.t_host, values, filtered)
        self._to_sink("write_block", block, filtered)
        if self.noise is not None and self._work.chain_note is None:
            self.noise.feed(self._chain, values, filtered)
        self._work.frames += len(block)

    def _open_ring(self, width: int) -> None:
        """The ring for a stream `width` channels wide, within ring_memory bytes."""
        if width > MAX_CHANNELS:
            self._ring_refused = True
            self._work.notice = (
                f"the stream has {width} channels, more than the {MAX_CHANNELS} a view can "
                f"hold, so nothing is shown; a recording still keeps every row")
            return
        capacity = capacity_within(width, self.ring_capacity, self.ring_memory)
        self.ring = Ring(width, capacity)
        if capacity < self.ring_capacity:
            rate = self.rate()
            kept = (f"{capacity / rate[0]:.3g} s ({capacity} samples)" if rate
                    else f"{capacity} samples")
            self._work.notice = (
                f"{width} channels keep {kept} of history, fewer than the "
                f"{self.ring_capacity:.3g} samples asked, within the "
                f"{self.ring_memory / 2**20:.0f} MiB ring budget; give --ring-memory MB for "
                f"more")

    def _channels(self, width: int) -> tuple[str, ...]:
        schema = self.source.schema
        if schema is not None and len(schema.channels) == width:
            return tuple(schema.channels)
        return tuple(f"ch{i}" for i in range(width))

    def _ensure_chain(self, width: int) -> None:
        if self._chain_ready:
            return
        channels = self._channels(width)
        rate = self.rate()
        if rate is None:
            if self._chain is None:
                self._chain = ChainSet.identity(channels)
            self._work.chain_note = RATE_WAIT_NOTE
            return
        self._chain_ready = True
        self._design_rate = rate[0]
        self._work.chain_note = None
        if self.chain_spec is None:
            self._chain = ChainSet.identity(channels, rate[0])
            return
        try:
            self._chain = ChainSet(self.chain_spec, channels, rate[0])
        except ValueError as exc:
            self._work.chain_error = f"chain refused at {rate[0]:.6g} Hz: {exc}"
            self._chain = ChainSet.identity(channels, rate[0])

    def _follow_rate(self) -> None:
        """Redesign the chain when the measured rate moved more than RATE_MOVE_TOLERANCE."""
        if not self._chain_ready or self._design_rate is None or self._declared is not None:
            return
        hint = self.source.rate_hint()
        if hint is None or hint[1] in ("declared", "recording"):
            return
        new_rate, origin = float(hint[0]), hint[1]
        old_rate = self._design_rate
        if abs(new_rate - old_rate) <= RATE_MOVE_TOLERANCE * old_rate:
            return
        refused = self._refused_rate
        if refused is not None and abs(new_rate - refused) <= RATE_MOVE_TOLERANCE * refused:
            return
        work, chain = self._work, self._chain
        try:
            new_chain = ChainSet(chain.spec, chain.channels, new_rate)
        except ValueError as exc:
            self._refused_rate = new_rate
            work.chain_error = (f"the rate moved to {new_rate:.6g} Hz and the chain cannot "
                                f"run there ({exc}); it stays designed at {old_rate:.6g} Hz")
            return
        new_chain.continue_from(chain)
        self._chain, self._design_rate, self._refused_rate = new_chain, new_rate, None
        redesigned = "chain redesigned" if chain.spec.stages else "no chain to redesign"
        work.notice = (f"sample rate moved from {old_rate:.6g} to {new_rate:.6g} Hz "
                       f"({origin}): {redesigned}")
        work.rate_moved_from, work.rate_moved_at = old_rate, time.monotonic()
        work.rate_redesigns += 1
        self._to_sink("write_rate_change", new_rate, origin, old_rate)

    def _apply_commands(self) -> None:
        while True:
            try:
                command = self._commands.get_nowait()
            except queue.Empty:
                return
            try:
                self._apply(command)
            except Exception as exc:
                self._work.notice = f"{type(command).__name__} failed: {exc}"

    def _apply(self, command: Any) -> None:
        work = self._work
        if isinstance(command, ReplaceChain):
            if self._chain is not None:
                command.chain.continue_from(self._chain)
            self._chain, self._chain_ready = command.chain, True
            self._design_rate = command.chain.rate_hz
            work.chain_error = work.chain_note = None
        elif isinstance(command, ResetChain):
            if self._chain is not None:
                self._chain.reset()
                self._chain_seen = None     # restarted from rest: figures start again
        elif isinstance(command, Pause | Resume):
            paused = isinstance(command, Pause)
            if self._source_pauses():
                getattr(self.source, "pause" if paused else "resume")()
            work.paused = paused
        elif isinstance(command, StartRecording):
            self._close_sink()
            self._sink = command.sink
            work.recording, work.recording_error = _sink_name(command.sink), None
        elif isinstance(command, StopRecording):
            self._close_sink()
        elif isinstance(command, Seek | SetSpeed):
            name, arg = (("seek", command.seconds) if isinstance(command, Seek)
                         else ("set_speed", command.speed))
            method = getattr(self.source, name, None)
            if method is None:
                action = name.replace("_", " ")
                work.notice = f"{self.source.describe()} is live: it cannot {action}"
            else:
                try:
                    method(arg)
                except ValueError as exc:  # e.g. a seek past the end: the source's sentence
                    work.notice = str(exc)
        else:
            work.notice = f"unknown command {command!r} ignored"

    def _source_pauses(self) -> bool:
        return hasattr(self.source, "pause") and hasattr(self.source, "resume")

    def _to_sink(self, method: str, *args: Any) -> None:
        if self._sink is None:
            return
        target = getattr(self._sink, method, None)
        if target is None:                  # an optional sink method (write_rate_change)
            return
        try:
            target(*args)
        except Exception as exc:  # OSError above all: a full disk must not stop the stream
            self._close_sink()
            self._work.recording_error = f"recording stopped: {exc}"

    def _close_sink(self) -> None:
        sink, self._sink = self._sink, None
        self._work.recording = None
        if sink is not None:
            try:
                sink.close()
            except Exception as exc:
                self._work.recording_error = f"recording may be incomplete: {exc}"

    def _describe_source(self) -> str:
        try:
            return str(self.source.describe())
        except Exception:
            return type(self.source).__name__

    def _publish(self) -> None:
        work, source = self._work, self.source
        work.source_state = str(source.state)
        rate = self.rate()
        if rate is not None:
            work.rate_hz, work.rate_origin = rate
        else:
            estimate = getattr(source, "rate_estimate", lambda: None)()
            work.rate_hz, work.rate_origin = estimate, ("estimated" if estimate else None)
        bad = getattr(source, "bad", None)
        if isinstance(bad, BadFrames):
            work.bad, work.last_bad, work.last_bad_reason = bad.count, bad.last, bad.last_reason
        work.dropped = int(getattr(source, "dropped", 0))
        work.warning = getattr(source, "warning", None)
        work.jitter_s = getattr(source, "device_jitter", lambda: None)()
        if self.ring is not None:
            work.samples_total = self.ring.total
            work.ring_overflow = max(0, self.ring.total - self.ring.capacity)
        with self._lock:
            work.commands_dropped = self._commands_dropped
            self._published = dataclasses.replace(work)


def _file_rate(source: Any) -> float | None:
    """The rate a replayed recording gives of itself (its header, trailer or time column),
    known before the first block; None for live sources."""
    hint = source.rate_hint() if hasattr(source, "rate_hint") else None
    return float(hint[0]) if hint is not None and hint[1] in ("recording", "estimated") else None


def _sink_name(sink: Any) -> str | None:
    if sink is None:
        return None
    path = getattr(sink, "path", None)
    return str(path) if path is not None else type(sink).__name__


def _quietly(fn: Any) -> None:
    try:
        fn()
    except Exception:
        pass
