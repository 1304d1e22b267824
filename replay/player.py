"""ReplaySource: a recording played back as a block source, paced like the original stream.

It joins the same Pipeline as a live port (chain, ring, recorder, views). All
methods are called by the pipeline's reader thread: read_block between
commands, and pause/resume/seek/set_speed when the pipeline applies its
Pause, Resume, Seek and SetSpeed commands, so no locking is needed.
"""

from __future__ import annotations

import math
import os
import time

import numpy as np

from monitor.block import Block
from monitor.counters import BadFrames
from replay.reader import Gap, Recording, RecordingError

MAX_BLOCK_ROWS = 8192


def check_speed(speed: float | None) -> float | None:
    """None (as fast as possible) or a finite factor > 0; ValueError otherwise."""
    if speed is not None and not (math.isfinite(speed) and speed > 0):
        raise ValueError(f"speed = {speed!r} must be a positive factor (1.0 = real time) "
                         "or None for as fast as possible")
    return None if speed is None else float(speed)


class ReplaySource:
    """Block source reading a recording file (ours or plain CSV with a header row).

    path:     the recording.
    speed:    1.0 = real time as given by t_host (or the rate), 2.0 twice as fast,
              None = as fast as the pipeline takes it.
    loop:     start again at start_s after the last row (a gap is reported).
    start_s:  seconds after the first row where playback begins.
    time_column, rate_hz: as for replay.reader.Recording (plain CSV files).
    duration_s: seconds from the first to the last row (None when the file has no time).

    Block.t_host is the recording's time shifted onto this host's monotonic clock
    at the first sample, and it keeps increasing across loops and backward seeks.
    Dead time at a `# gap:` line is not waited out. Raises RecordingError for a
    file that cannot be used.

    After the last row the state is "ended"; seek() plays on from any time of the
    recording (state "connected" again) and set_speed() works in every state.
    """

    def __init__(self, path: str | os.PathLike[str], speed: float | None = 1.0,
                 loop: bool = False, start_s: float = 0.0, *,
                 time_column: str | None = None, rate_hz: float | None = None) -> None:
        if not (math.isfinite(start_s) and start_s >= 0):
            raise ValueError(f"start_s = {start_s!r} must be seconds >= 0")
        self._speed = check_speed(speed)
        self.recording = Recording(path, time_column=time_column, rate_hz=rate_hz,
                                   chunk_rows=MAX_BLOCK_ROWS)
        self.duration_s = self.recording.duration_s()
        if self.duration_s is not None and start_s > self.duration_s:
            raise RecordingError(f"--start {start_s:g} s is past the end of "
                                 f"{self.recording.path}, which lasts "
                                 f"{self.duration_s:.3f} s.")
        self.schema = self.recording.schema
        self.state = "connected"
        self.loop = loop
        self.start_s = float(start_s)
        self.loops = 0
        self._paused = False
        self._gaps: list[str] = []
        rate = self.recording.rate()
        self._step = 1.0 / rate[0] if rate else 1e-3
        self._offset: float | None = None
        self._continue_after: float | None = None   # emitted t to continue from after a jump
        self._last_emitted: float | None = None     # emitted t of the newest row handed out
        self._position_t = self.recording.t_first   # file t of the newest row (or seek target)
        self._end_s: float | None = None            # the last row's position, once reached
        self._events = None
        self._restart(self.start_s)

    # -- block-source contract -------------------------------------------------------

    def read_block(self, timeout: float) -> Block | None:
        """The rows now due (at most MAX_BLOCK_ROWS), or None after waiting up to timeout s."""
        deadline = time.monotonic() + timeout
        if self.state == "ended" or self._paused:
            time.sleep(max(0.0, timeout))
            return None
        while True:
            block = self._current()
            if block is None:
                return None
            if self._speed is None:
                return self._emit(len(block) - self._pos)
            now = time.monotonic()
            if self._clock is None:
                self._clock = (now, float(block.t_host[self._pos]))
            wall_base, t_base = self._clock
            due = t_base + (now - wall_base) * self._speed
            ready = int(np.searchsorted(block.t_host[self._pos:], due, side="right"))
            if ready:
                return self._emit(ready)
            wait = (float(block.t_host[self._pos]) - due) / self._speed
            remaining = deadline - now
            if remaining <= 0:
                return None
            time.sleep(min(wait, remaining))

    def take_gaps(self) -> list[str]:
        gaps, self._gaps = self._gaps, []
        return gaps

    def describe(self) -> str:
        return f"replay of {self.recording.path}"

    def rate_hint(self) -> tuple[float, str] | None:
        return self.recording.rate()

    def close(self) -> None:
        if self._events is not None:
            self._events.close()
        self.state = "ended"

    @property
    def bad(self) -> BadFrames:
        """Rows of the file that were not readings (counted while reading)."""
        rec = self.recording
        last = rec.last_bad_row.encode("utf-8", errors="replace") if rec.last_bad_row else None
        reason = f"not {len(rec.header.columns)} numbers" if last else ""
        return BadFrames(rec.bad_rows, last, reason)

    # -- commands (applied by the pipeline) -----------------------------------------------

    def pause(self) -> None:
        self._paused = True

    def resume(self) -> None:
        self._paused = False
        self._clock = None

    @property
    def paused(self) -> bool:
        return self._paused

    def set_speed(self, speed: float | None) -> None:
        """New playback speed factor, None for as fast as possible."""
        self._speed = check_speed(speed)
        self._clock = None

    @property
    def speed(self) -> float | None:
        return self._speed

    def seek(self, seconds: float) -> None:
        """Continue playback at the first row `seconds` (s) or more after the first row of
        the recording, whether playing, paused or ended (then it plays on; paused stays
        paused). Negative seconds mean 0. A time past the last row raises ValueError with
        a sentence giving the recording's length, and playback stays as it was."""
        seconds = float(seconds)
        if not math.isfinite(seconds):
            raise ValueError(f"cannot seek to {seconds!r}; give seconds from the start of "
                             "the recording")
        seconds = max(0.0, seconds)
        events, first_t = self._events_from(seconds)
        if events is None:
            raise ValueError(self._past_end(seconds))
        self._gaps.append(f"replay jumped to {seconds:g} s")
        self._jump()
        self._restart(seconds, events)
        self._position_t = first_t
        self.state = "connected"

    @property
    def position_s(self) -> float:
        """Seconds after the first row of the newest row handed out; after a seek, of the
        row playback goes on from; at the end, the recording's duration."""
        return self._position_t - self.recording.t_first

    # -- internals --------------------------------------------------------------------

    def _restart(self, start_s: float, events=None) -> None:
        """Play on from start_s s: from `events` when seek() already opened them there."""
        if self._events is not None:
            self._events.close()
        self._events = events if events is not None else self.recording.events(start_s)
        self._block: Block | None = None
        self._pos = 0
        self._clock: tuple[float, float] | None = None
        self._rows_since_restart = 0

    def _jump(self) -> None:
        """The next row continues the emitted time one sample after the last one."""
        if self._last_emitted is not None:
            self._continue_after = self._last_emitted

    def _events_from(self, start_s: float):
        """(events from start_s s, file t of their first row), or (None, None) when no row
        lies there. The file is read up to that row, as the next read_block would."""
        events = self.recording.events(start_s)
        held = []
        for item in events:
            held.append(item)
            if isinstance(item, Block):
                return _closing_chain(held, events), float(item.t_host[0])
        events.close()
        return None, None

    def _past_end(self, seconds: float) -> str:
        end = self.duration_s if self.duration_s is not None else self._end_s
        name = self.recording.path
        if end is None:
            return (f"{seconds:g} s is past the last row of {name}; give an earlier time "
                    "(playback stays where it was).")
        return (f"{seconds:g} s is past the end of {name}, which lasts {end:.3f} s; give a "
                f"time from 0 to {end:.3f} s (playback stays where it was).")

    def _current(self) -> Block | None:
        """The block holding the next row, reading on through gaps and loops; None at the end."""
        while self._block is None or self._pos >= len(self._block):
            item = next(self._events, None)
            if item is None:
                if self.loop and self._rows_since_restart:
                    self.loops += 1
                    self._gaps.append("replay started again from the beginning (loop)")
                    self._jump()
                    self._restart(self.start_s)
                    continue
                self.state = "ended"
                self._end_s = self.position_s
                return None
            if isinstance(item, Gap):
                self._gaps.append(item.reason)
                self._clock = None
                continue
            self._block, self._pos = item, 0
        return self._block

    def _emit(self, rows: int) -> Block:
        rows = min(rows, MAX_BLOCK_ROWS)
        b, start = self._block, self._pos
        end = start + rows
        self._pos = end
        self._rows_since_restart += rows
        t_file = b.t_host[start:end]
        if self._offset is None:
            self._offset = time.monotonic() - float(t_file[0])
        elif self._continue_after is not None:
            self._offset = self._continue_after + self._step - float(t_file[0])
        self._continue_after = None
        self._position_t = float(t_file[-1])
        self._last_emitted = float(t_file[-1]) + self._offset
        return Block(t_file + self._offset, b.values[start:end],
                     None if b.t_dev is None else b.t_dev[start:end],
                     None if b.counter is None else b.counter[start:end])


def _closing_chain(held: list, events):
    """The held items, then the rest of `events`; closing it closes `events`."""
    try:
        yield from held
        yield from events
    finally:
        events.close()
