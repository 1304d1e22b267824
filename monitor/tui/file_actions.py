"""File and prompt actions of the app: record, save and load the chain, lag frequency, replay.

A mixin for TunetraceApp. Every failure (unwritable path, malformed chain
file, a value out of range) becomes one sentence in the status line; the
stream and the running chain go on.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from textual.validation import Function, Number

from monitor.tui.dialogs import AskValue


def proposed_recording_name(prefix: str, now: float | None = None) -> str:
    """'weigh-20261201-214012.csv': the prefix and the local time of the proposal."""
    return f"{prefix}-{time.strftime('%Y%m%d-%H%M%S', time.localtime(now))}.csv"


def _speed_ok(text: str) -> bool:
    text = text.strip().lower()
    if text == "max":
        return True
    try:
        return float(text) > 0
    except ValueError:
        return False


class FileActions:
    """Mixed into TunetraceApp; uses its `pipeline`, `session`, `ui`, `say`, `apply_spec`."""

    pipeline: Any
    session: Any
    ui: Any
    args: Any

    # -- recording ---------------------------------------------------------------------------

    def action_toggle_recording(self) -> None:
        from monitor.pipeline import StopRecording

        status = self.pipeline.status()
        if status.recording:
            self.pipeline.submit(StopRecording())
            self.say(f"recording stopped: {status.recording}")
            self.ui.recording_started = None
            return
        if self.pipeline.schema is None:
            self.say("nothing to record yet: no frames have arrived")
            return
        self.push_screen(AskValue(
            "Record every raw sample to this CSV file:", proposed_recording_name(self._prefix()),
            hint="an existing file is never overwritten; esc cancels"), self.start_recording)

    def start_recording(self, path: str | None) -> bool:
        """Open a RecordingWriter on `path` and hand it to the pipeline; False (and said) if not."""
        if not path:
            return False
        from monitor.pipeline import StartRecording
        from replay.writer import RecordingWriter, open_error_sentence

        status = self.pipeline.status()
        try:
            writer = RecordingWriter(path, self.pipeline.schema, status.source_description,
                                     status.rate_hz, status.rate_origin, self._chain_text())
        except FileExistsError:
            self.say(f"{path} already exists; choose another name")
            return False
        except OSError as exc:
            self.say(open_error_sentence(exc, path))
            return False
        except ValueError as exc:
            self.say(f"cannot record: {exc}")
            return False
        self.pipeline.submit(StartRecording(writer))
        self.ui.recording_started = time.monotonic()
        self.say(f"recording to {path}")
        return True

    def _prefix(self) -> str:
        """Proposed file names start with the demo's scenario, else with the tool's name."""
        return "weigh" if getattr(self.args, "verb", None) == "demo" else "tunetrace"

    def _chain_text(self) -> str:
        from filters.chainfile import format_chain

        return format_chain(self.session.spec)

    # -- chain files -------------------------------------------------------------------------

    def action_save_chain(self) -> None:
        default = getattr(self.args, "chain", None) or f"{self._prefix()}-chain.toml"
        self.push_screen(AskValue(
            "Save the whole chain to this file:", str(default),
            hint="an existing file is replaced only if you confirm its name twice"),
            self.save_chain)

    def save_chain(self, path: str | None) -> bool:
        """Write the chain file; an existing file needs the same name given twice."""
        if not path:
            return False
        target = Path(path).expanduser()
        confirmed = getattr(self, "_overwrite_ok", None) == str(target)
        if target.exists() and not confirmed and str(target) != str(
                getattr(self.args, "chain", None)):
            self._overwrite_ok = str(target)
            self.say(f"{target} exists; save again with the same name to replace it")
            return False
        try:
            target.write_text(self._chain_text(), encoding="utf-8")
        except OSError as exc:
            from replay.writer import open_error_sentence

            self.say(open_error_sentence(exc, str(target), "chain file"))
            return False
        self._overwrite_ok = None
        self.say(f"chain saved to {target}")
        return True

    def action_load_chain(self) -> None:
        default = getattr(self.args, "chain", None) or ""
        self.push_screen(AskValue(
            "Load the chain from this file:", str(default),
            hint="a malformed file is refused and the running chain goes on"), self.load_chain)

    def load_chain(self, path: str | None) -> bool:
        """Parse the chain file and run it; any problem is said and the chain stays."""
        if not path:
            return False
        from filters.chainfile import parse_chain

        try:
            text = Path(path).expanduser().read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            reason = getattr(exc, "strerror", None) or str(exc)
            self.say(f"cannot read {path}: {reason}; the running chain goes on")
            return False
        try:
            spec = parse_chain(text)
        except ValueError as exc:
            self.say(f"{path}: {exc}; the running chain goes on")
            return False
        return self.apply_spec(spec, what=f"loaded the chain from {path}")

    # -- values asked for --------------------------------------------------------------------

    def action_ask_analysis_freq(self) -> None:
        rate = self.pipeline.rate()
        nyquist = rate[0] / 2 if rate else None
        validators = [Number(minimum=1e-6, maximum=nyquist,
                             failure_description="give a frequency in Hz above 0"
                             + (f" and below Nyquist ({nyquist:g} Hz)" if nyquist else ""))]
        self.push_screen(AskValue(
            "Frequency (Hz) at which lag is computed:", f"{self.ui.analysis_hz:g}",
            validators=validators), self._set_analysis_freq)

    def _set_analysis_freq(self, text: str | None) -> None:
        if not text:
            return
        self.ui.analysis_hz = float(text)
        self.table.set_lag_hz(self.ui.analysis_hz)
        self.show_chain()
        self.say(f"lag now computed at {self.ui.analysis_hz:g} Hz")

    def _replay_only(self) -> bool:
        if not self.is_replay:
            self.say("seek and speed work when replaying a recording (tunetrace replay FILE)")
            return False
        return True

    def action_ask_seek(self) -> None:
        if self._replay_only():
            self.push_screen(AskValue(
                "Jump to this time (s from the start of the recording):", "0",
                validators=[Number(minimum=0, failure_description="give seconds >= 0")]),
                self._seek)

    def _seek(self, text: str | None) -> None:
        from monitor.pipeline import Seek

        if text:
            self.pipeline.submit(Seek(float(text)))
            self.say(f"seeking to {float(text):g} s")

    def action_ask_speed(self) -> None:
        if self._replay_only():
            self.push_screen(AskValue(
                "Playback speed (a factor such as 0.5, 1, 4, or max):", "1",
                validators=[Function(_speed_ok, "give a factor above 0, or max")]),
                self._speed)

    def _speed(self, text: str | None) -> None:
        from monitor.pipeline import SetSpeed

        if not text:
            return
        speed = None if text.strip().lower() == "max" else float(text)
        self.pipeline.submit(SetSpeed(speed))
        self.say(f"playback speed {'max' if speed is None else f'{speed:g}x'}")

