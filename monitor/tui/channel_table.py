"""The channel table: one row per channel with its live statistics.

Columns fold by priority when the table is narrower than all of them. The order of
importance, most important first (FOLD_ORDER):

    channel, last, NR dB, lag, RMS filt, rate, unit, RMS raw, mean, white dB

`channel` always shows (it names the row). The others show as a prefix of that order: a
column appears only when every more important one fits too, so a narrower terminal always
drops the least important figure first and a column never jumps ahead of a more useful one.
Shown columns keep their normal left-to-right order (COLUMNS). The fit is redone on every
resize; the border subtitle says how many columns are hidden. The rows, and so the cursor
(the selected channel), are never touched by a refit.

The lag heading names the frequency its group delay is read at (`set_lag_hz`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from textual import events
from textual.widgets import DataTable

from monitor.stats import format_db

COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("channel", "channel", 12), ("unit", "unit", 5), ("last", "last", 11), ("mean", "mean", 11),
    ("rms_raw", "RMS raw", 10), ("rms_filtered", "RMS filt", 10), ("reduction_db", "NR dB", 7),
    ("white_db", "white dB", 8), ("lag_ms", "lag ms", 8), ("rate_hz", "rate Hz", 8),
)
FOLD_ORDER: tuple[str, ...] = (
    "channel", "last", "reduction_db", "lag_ms", "rms_filtered", "rate_hz", "unit", "rms_raw",
    "mean", "white_db",
)
DEFAULT_LAG_HZ = 1.0
CELL_PADDING = 1            # textual's DataTable default: one blank cell each side of a column


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


def check_lag_hz(lag_hz: float) -> float:
    """`lag_hz` as a float; ValueError unless it is a finite frequency above 0 Hz."""
    value = float(lag_hz)
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"lag_hz is {lag_hz!r}; give a frequency above 0 Hz")
    return value


def heading(key: str, lag_hz: float = DEFAULT_LAG_HZ) -> str:
    """The heading of column `key`; the lag one names its frequency ("lag@1Hz ms")."""
    if key == "lag_ms":
        return f"lag@{check_lag_hz(lag_hz):.3g}Hz ms"
    return next(label for k, label, _ in COLUMNS if k == key)


def column_width(key: str, lag_hz: float = DEFAULT_LAG_HZ) -> int:
    """Content width (cells) of column `key`: its table width, widened to its heading."""
    width = next(w for k, _, w in COLUMNS if k == key)
    return max(width, len(heading(key, lag_hz)))


def fitting_columns(width: int, lag_hz: float = DEFAULT_LAG_HZ,
                    padding: int = CELL_PADDING) -> tuple[str, ...]:
    """Keys of the columns that fit in `width` cells, in COLUMNS order (see FOLD_ORDER).

    Each column takes its content width plus `padding` cells on both sides. `channel`
    is always included, even when it alone is wider than `width`.
    """
    shown = {FOLD_ORDER[0]}
    used = column_width(FOLD_ORDER[0], lag_hz) + 2 * padding
    for key in FOLD_ORDER[1:]:
        used += column_width(key, lag_hz) + 2 * padding
        if used > width:
            break
        shown.add(key)
    return tuple(k for k, _, _ in COLUMNS if k in shown)


def hidden_note(hidden: int, width: int) -> str:
    """Border subtitle for `hidden` folded columns, as long as `width` allows ("" if none)."""
    if hidden <= 0:
        return ""
    plural = "s" if hidden > 1 else ""
    for text in (f"{hidden} column{plural} hidden: a wider terminal shows them",
                 f"{hidden} column{plural} hidden", f"+{hidden}"):
        if len(text) + 6 <= width:          # the border's corners and the title's padding
            return text
    return ""


class ChannelTable(DataTable):
    """Channels as rows; the highlighted row is the selected channel.

    Call `show(rows)` with fresh figures and `set_lag_hz(hz)` when the lag frequency
    changes; the columns that fit the width are chosen on every resize.
    """

    DEFAULT_CSS = """
    ChannelTable { height: auto; max-height: 12; border: round #3a4a5c; }
    """

    def __init__(self, *, id: str | None = None, lag_hz: float = DEFAULT_LAG_HZ) -> None:
        super().__init__(id=id, cursor_type="row", zebra_stripes=True,
                         cell_padding=CELL_PADDING)
        self._names: tuple[str, ...] = ()
        self._rows: dict[str, ChannelRow] = {}
        self._lag_hz = check_lag_hz(lag_hz)
        self._shown: tuple[tuple[str, str], ...] = ()     # (key, heading) of drawn columns

    def on_mount(self) -> None:
        self.add_column(heading("channel"), key="channel", width=column_width("channel"))
        self.border_title = "channels"
        self._refit()

    def on_resize(self, event: events.Resize) -> None:
        self._refit()

    @property
    def channel_names(self) -> tuple[str, ...]:
        return self._names

    @property
    def lag_hz(self) -> float:
        """Frequency (Hz) the lag column's group delay is read at, as its heading says."""
        return self._lag_hz

    @property
    def shown_columns(self) -> tuple[str, ...]:
        """Keys of the columns drawn now, left to right."""
        return tuple(key for key, _ in self._shown)

    def set_lag_hz(self, hz: float) -> None:
        """Name `hz` (> 0) in the lag heading at once; the cells come with the next `show`."""
        self._lag_hz = check_lag_hz(hz)
        self._refit()

    def show(self, rows: Sequence[ChannelRow]) -> None:
        """Add rows for new channels and update every shown cell of the known ones."""
        names = tuple(r.name for r in rows)
        self._rows = {r.name: r for r in rows}
        keys = self.shown_columns
        if names != self._names:
            self.clear()
            for r in rows:
                cells = dict(zip((k for k, _, _ in COLUMNS), row_cells(r), strict=True))
                self.add_row(*(cells[k] for k in keys), key=r.name)
            self._names = names
            self.call_after_refresh(self._refit)    # a vertical scrollbar may have come
            return
        self._fill(keys)

    def _fill(self, keys: Sequence[str]) -> None:
        for r in self._rows.values():
            cells = dict(zip((k for k, _, _ in COLUMNS), row_cells(r), strict=True))
            for key in keys:
                self.update_cell(r.name, key, cells[key])

    def _refit(self) -> None:
        """Draw the columns that fit the width now; rows and cursor stay as they are."""
        if not self.is_mounted or "channel" not in self.columns:
            return
        width = self.scrollable_content_region.width
        keys = fitting_columns(width, self._lag_hz, self.cell_padding)
        wanted = tuple((key, heading(key, self._lag_hz)) for key in keys)
        self.border_subtitle = hidden_note(len(COLUMNS) - len(keys), self.outer_size.width)
        if wanted == self._shown:
            return
        # "channel" stays put (so the cursor keeps a column); the rest are rebuilt in order,
        # since textual's DataTable only appends columns
        for key in list(self.columns):
            if key != "channel":
                self.remove_column(key)
        for key, label in wanted[1:]:
            self.add_column(label, key=key, width=column_width(key, self._lag_hz))
        self._shown = wanted
        self._fill(keys[1:])
