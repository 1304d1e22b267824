"""Fixtures of the replay tests (helpers live in replay_helpers.py)."""

from __future__ import annotations

import pytest
from replay_helpers import PtySender


@pytest.fixture
def pty_sender():
    sender = PtySender()
    yield sender
    sender.close()
