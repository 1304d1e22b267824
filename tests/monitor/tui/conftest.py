"""A live pipeline reading the weigh-station board through a real pseudo-terminal.

The board is the shared `pty_board` fixture (tests/monitor/conftest.py) playing
the simulated weigh station's header and CSV rows at 250 Hz; the pipeline opens
the pty's slave with pyserial as it would /dev/ttyACM0.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from monitor.sim.weighstation import WeighStation, channel_names

BOARD_RATE_HZ = 250.0


def weigh_lines(rate_hz: float = BOARD_RATE_HZ, channels: int = 3,
                seed: int = 7) -> Iterator[bytes]:
    """The board's output: a blank line, the header, then one CSV row per sample, forever."""
    board = WeighStation(rate_hz, channels, seed)
    yield b"\r\n"
    yield (",".join(f"{n}[{u}]" for n, u in channel_names(channels)) + "\r\n").encode()
    while True:
        for row in board.generate(50).tolist():
            yield (",".join(f"{v:.5f}" for v in row) + "\r\n").encode()


@pytest.fixture
def start_pipeline(pty_board, wait_for):
    """start_pipeline(chain_spec=None) -> a started Pipeline on the pty board.

    The rate is declared (250 Hz) so chains design at once; stopped at teardown.
    """
    from monitor.pipeline import Pipeline, text_source
    from monitor.sources import open_byte_source

    started = []

    def start(chain_spec=None):
        source = open_byte_source(pty_board.path, 115200)
        pty_board.play(weigh_lines(), BOARD_RATE_HZ)   # after the open: the header is read
        p = Pipeline(text_source(source, declared_rate=BOARD_RATE_HZ), chain_spec=chain_spec,
                     rate_hz=BOARD_RATE_HZ, ring_capacity=int(BOARD_RATE_HZ * 60))
        p.start()
        started.append(p)
        assert wait_for(lambda: p.ring is not None and p.ring.total >= 50
                        and p.schema is not None and p.chain is not None)
        return p

    yield start
    for p in started:
        p.stop()
