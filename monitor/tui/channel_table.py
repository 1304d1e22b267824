"""The channel table: one row per channel with its live statistics."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from textual.widgets import DataTable

from monitor.stats import format_db

COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("channel", "channel", 12), ("unit", "unit", 5), ("last", "last", 11), ("mean", "mean", 11),
    ("rms_raw", "RMS raw", 10), ("rms_filtered", "RMS filt", 10), ("reduction_db", "NR dB", 7),
    ("white_db", "white dB", 8), ("lag_ms", "lag ms", 8), ("rate_hz", "rate Hz", 8),
)


@dataclass(frozen=True)
class ChannelRow:
    """What the table shows for one channel (NaN: not known yet).

    rms_raw / rms_filtered: RMS noise in the unit: what is left once the signal's steps
    and ramps are taken out, and for the filtered signal once the chain settled after a step
    (monitor.stats, filters.noise).
    reduction_db: measured, 20 log10(rms_raw / rms_filtered).
    white_db: the chain's exact reduction of white noise, -10 log10(sum h^2).
    lag_ms: group delay of the channel's chain at the analysis frequency.
    """

    name: str
    unit: str
    last: float = math.nan
    mean: float = math.nan
    rms_raw: float = math.nan
    rms_filtered: float = math.nan
    reduction_db: float = math.nan
    white_db: float = math.nan
    lag_ms: float = math.nan
    rate_hz: float = math.nan


def _number(value: float, digits: int = 5) -> str:
    """At most about 10 characters: plain digits where they fit, else scientific."""
    if value is None or not math.isfinite(value):
        return "-"
    text = f"{value:.{digits}g}"
    return text if len(text) <= 10 else f"{value:.{max(digits - 2, 1)}e}"


def row_cells(row: ChannelRow) -> tuple[str, ...]:
    """The cell strings of one row, in COLUMNS order."""
    return (
        row.name, row.unit or "-", _number(row.last), _number(row.mean),
        _number(row.rms_raw, 4), _number(row.rms_filtered, 4),
        format_db(row.reduction_db), format_db(row.white_db),
        "-" if not math.isfinite(row.lag_ms) else f"{row.lag_ms:.1f}",
        _number(row.rate_hz, 4),
    )


class ChannelTable(DataTable):
    """Channels as rows; the highlighted row is the selected channel."""

    DEFAULT_CSS = """
    ChannelTable { height: auto; max-height: 12; border: round #3a4a5c; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id, cursor_type="row", zebra_stripes=True)
        self._names: tuple[str, ...] = ()

    def on_mount(self) -> None:
        for key, label, width in COLUMNS:
            self.add_column(label, key=key, width=width)
        self.border_title = "channels"

    @property
    def channel_names(self) -> tuple[str, ...]:
        return self._names

    def show(self, rows: Sequence[ChannelRow]) -> None:
        """Add rows for new channels and update every cell of the known ones."""
        names = tuple(r.name for r in rows)
        if names != self._names:
            self.clear()
            for r in rows:
                self.add_row(*row_cells(r), key=r.name)
            self._names = names
            return
        for r in rows:
            for (key, _, _), cell in zip(COLUMNS, row_cells(r), strict=True):
                self.update_cell(r.name, key, cell)
