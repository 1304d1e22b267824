"""The status lines' text: sizes, durations, recording state, rate origin."""

from __future__ import annotations

import time

from monitor.pipeline import PipelineStatus
from monitor.tui.status_bar import NOTICE_S, UiState, format_duration, human_size, status_lines


def test_sizes_and_durations_read_as_people_write_them():
    assert human_size(999) == "999 B"
    assert human_size(1536) == "1.5 kB"
    assert human_size(2_500_000) == "2.5 MB"
    assert format_duration(75.2) == "1:15"
    assert format_duration(3725) == "1:02:05"


def test_status_lines_name_source_state_rate_counts_and_recording(tmp_path):
    path = tmp_path / "weigh-20261201-214012.csv"
    path.write_bytes(b"x" * 2048)
    status = PipelineStatus(source_state="reconnecting", source_description="/dev/ttyACM0 @ 115200",
                            rate_hz=250.0, rate_origin="declared", frames=1000, bad=3, dropped=2,
                            recording=str(path), paused=True)
    ui = UiState(notice="stage 2 of load applied", notice_at=time.monotonic(),
                 recording_started=0.0, focus="field cutoff_hz (enter applies, esc back)")
    line1, line2 = status_lines(status, ui)
    for part in ("/dev/ttyACM0 @ 115200", "reconnecting", "250 Hz (declared)", "bad 3",
                 "dropped 2"):
        assert part in line1
    assert line2.startswith("stage 2 of load applied")           # the latest message first
    assert "REC weigh-20261201-214012.csv" in line2 and "2.0 kB" in line2
    assert "VIEW HELD" in line2 and "edits: this channel" in line2
    assert "keys to: field cutoff_hz" in line2                    # where the keys go


def test_a_message_answers_for_a_while_then_clears():
    status = PipelineStatus(source_description="sim://", rate_hz=250.0)
    fresh = UiState(notice="removed stage 2 (notch) of load (u undoes)",
                    notice_at=time.monotonic())
    stale = UiState(notice=fresh.notice, notice_at=time.monotonic() - NOTICE_S - 0.5)
    assert status_lines(status, fresh)[1].startswith("removed stage 2")
    assert "removed" not in status_lines(status, stale)[1]


def test_a_stopped_recording_says_why():
    status = PipelineStatus(recording_error="recording stopped: [Errno 28] No space left")
    _, line2 = status_lines(status, UiState())
    assert "No space left" in line2 and "REC" not in line2
