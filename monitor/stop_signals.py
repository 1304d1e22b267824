"""Stop signals: SIGTERM and SIGHUP end a streaming session the way Ctrl-C does.

SIGTERM comes from `kill`, `timeout` or a service manager; SIGHUP from a closed
terminal window or a dropped SSH session. Left to their default action they end the
process at once, so a recording loses its closing rate line and its final fsync and
no summary is printed. Here a stop signal only sets a flag: the session's own loop
sees it within its poll interval, stops the pipeline (which closes the recording)
and prints its summary, exactly as after Ctrl-C. Setting a flag, rather than raising
KeyboardInterrupt from the handler, means a signal can never cut the shutdown itself
short, however late it comes.

After a hangup the terminal is gone: `print_safely` drops what can no longer be
shown instead of raising. The terminal UI gets `run_ui`. What textual (8.x) does,
seen here: it leaves SIGHUP and SIGTERM at their defaults (the process dies with the
recording open); on a hung-up terminal its input thread reads end-of-file in a loop
while the app runs on, so it must be told to quit; and its driver keeps a SIGCONT
handler that restarts application mode, input thread included, even after the app
has stopped. The kernel sends SIGCONT right behind the SIGHUP of a hangup, so that
handler would start a new input thread on the dead terminal which, not being a
daemon, keeps the process from ever exiting: run_ui takes SIGCONT back.
"""

from __future__ import annotations

import os
import signal
import threading
from collections.abc import Callable
from types import FrameType, TracebackType
from typing import Any, TextIO

STOP_SIGNALS = (signal.SIGTERM, signal.SIGHUP)
# After a stop signal the UI has this long to quit on its own once the recording is
# closed; a UI stuck on a terminal that is gone is then left (the data is safe).
UI_EXIT_GRACE_S = 3.0


class StopRequest:
    """Catches stop signals while it is active (a context manager) and remembers the first.

    on_request: called once, from the signal handler (the main thread, between two
                bytecodes of whatever it was doing), with the first signal's number;
                it must only hand work on (set an event, start a thread, schedule a
                callback), never wait for a lock.
    A repeated SIGINT while a stop is already under way raises KeyboardInterrupt
    (the user insists); repeated SIGTERM and SIGHUP are ignored.
    """

    def __init__(self, on_request: Callable[[int], None] | None = None) -> None:
        self.signum: int | None = None
        self.on_request = on_request
        self._previous: dict[int, Any] = {}

    @property
    def requested(self) -> bool:
        """True once a stop signal came."""
        return self.signum is not None

    @property
    def name(self) -> str | None:
        """The first stop signal's name (e.g. "SIGHUP"), or None."""
        return signal.Signals(self.signum).name if self.signum is not None else None

    def watch(self, *signums: int) -> StopRequest:
        """Catch these signals (default SIGTERM and SIGHUP) from now on; does nothing off
        the main thread, where Python cannot install handlers."""
        for signum in signums or STOP_SIGNALS:
            if signum in self._previous:
                continue
            try:
                self._previous[signum] = signal.signal(signum, self._handle)
            except ValueError:              # not the main thread
                return self
        return self

    def restore(self) -> None:
        """Put back the handlers that were there before `watch`."""
        previous, self._previous = self._previous, {}
        for signum, handler in previous.items():
            try:
                signal.signal(signum, handler if handler is not None else signal.SIG_DFL)
            except ValueError:
                pass

    def keep_ignoring(self, signum: int) -> None:
        """Ignore `signum` from now on, past the end of the `with` block (a process that
        is stopping has nothing left to do on a second hangup)."""
        self._previous[signum] = signal.SIG_IGN

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        if self.signum is not None:
            if signum == signal.SIGINT:
                raise KeyboardInterrupt
            return
        self.signum = signum
        if self.on_request is not None:
            self.on_request(signum)

    def __enter__(self) -> StopRequest:
        if not self._previous:
            self.watch()
        return self

    def __exit__(self, kind: type[BaseException] | None, value: BaseException | None,
                 traceback: TracebackType | None) -> None:
        self.restore()


def print_safely(text: str, stream: TextIO) -> bool:
    """Print a line and flush; False when the stream is gone (a hung-up terminal gives
    EIO, a closed pipe EPIPE): its descriptor then points at os.devnull, so nothing
    written later (nor the interpreter's flush at exit) fails again."""
    try:
        print(text, file=stream, flush=True)
        return True
    except (OSError, ValueError):       # ValueError: the stream was closed
        try:
            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, stream.fileno())
            os.close(null)
        except (OSError, ValueError, AttributeError):
            pass
        return False


def run_ui(app: Any, pipeline: Any) -> Any:
    """`app.run()` (a textual App) with SIGTERM and SIGHUP as stops; returns its result
    (0 after a stop signal that made it fail on a terminal that is gone).

    On the first stop signal the pipeline is stopped from a helper thread at once, so
    any recording closes with its trailer and fsync within a read timeout; the app is
    asked to quit through its event loop (`action_quit_session` if it has one, else
    `exit`). If it has not returned UI_EXIT_GRACE_S later (it may wait forever on a
    terminal that hung up), the process ends with status 0: nothing is left to save.
    SIGCONT gets its handler from before the app back as soon as a stop is asked for,
    and in any case when the app returns; after a stop, a further SIGHUP is ignored.
    """
    returned = threading.Event()
    sigcont = signal.getsignal(signal.SIGCONT)

    def take_back_sigcont() -> None:
        try:
            signal.signal(signal.SIGCONT, sigcont if sigcont is not None else signal.SIG_DFL)
        except ValueError:                          # not the main thread
            pass

    def close_then_leave() -> None:
        pipeline.stop()
        if not returned.wait(UI_EXIT_GRACE_S):
            os._exit(0)

    def on_request(signum: int) -> None:
        import asyncio

        take_back_sigcont()     # the hangup's SIGCONT must not restart the quitting UI
        try:
            loop = asyncio.get_running_loop()       # the UI's loop, in this (main) thread
        except RuntimeError:
            loop = None
        if loop is not None:
            quit_app = getattr(app, "action_quit_session", None) or app.exit
            loop.call_soon_threadsafe(quit_app)
        threading.Thread(target=close_then_leave, name="stop-signal", daemon=True).start()

    with StopRequest(on_request) as stop:
        try:
            return app.run()
        except Exception:
            if stop.requested:                      # the terminal went away under it
                return 0
            raise
        finally:
            take_back_sigcont()
            returned.set()
            if stop.requested:                      # on the way out: the terminal is gone
                stop.keep_ignoring(signal.SIGHUP)
