"""The one rule every verb uses to decide which column of a text stream or CSV file is time.

A column is time when `--time-column NAME` names it, else when its name (case does
not matter) is one of TIME_NAMES, optionally with a unit suffix `_s`, `_ms`, `_us`
or a unit in brackets (`time [ms]`, `t_dev_us`); `millis` and `micros` carry their
unit in the name. The first such column from the left wins. Files (apply, replay,
snapshot) take it as the time of each row; live streams (live, record) take it as
the device time (t_dev), exactly as `--time-column` does.

Pure: imports nothing from monitor, so monitor, replay and the commands can share it.
"""

from __future__ import annotations

from collections.abc import Sequence

from replay.header import split_unit

# Time column names of boards and other loggers, and the seconds per unit of each
# suffix (common practice, no single source).
TIME_NAMES = ("t", "time", "timestamp", "t_host", "t_dev", "elapsed", "seconds",
              "millis", "micros")
UNIT_SECONDS = {"": 1.0, "s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6}
_NAME_UNITS = {"millis": 1e-3, "micros": 1e-6}


def time_scale_of(name: str) -> float | None:
    """Seconds per unit of the values of column `name` if the rule makes it time, else None.

    'time_s' -> 1.0, 'T_MS' -> 0.001, 'time [us]' -> 1e-6, 'millis' -> 0.001, 'load' -> None.
    """
    base, unit = split_unit(name)
    base = base.lower()
    if unit:
        return UNIT_SECONDS.get(unit.lower()) if base in TIME_NAMES else None
    if base in _NAME_UNITS:
        return _NAME_UNITS[base]
    if base in TIME_NAMES:
        return 1.0
    stem, _, suffix = base.rpartition("_")
    if stem in TIME_NAMES and stem not in _NAME_UNITS and suffix in UNIT_SECONDS:
        return UNIT_SECONDS[suffix]
    return None


def match_override(names: Sequence[str], override: str) -> int | None:
    """Index of the column `--time-column override` names: the exact name, else the one
    name equal to it ignoring case; None when no column (or several) match."""
    if override in names:
        return list(names).index(override)
    folded = [i for i, name in enumerate(names) if name.lower() == override.lower()]
    return folded[0] if len(folded) == 1 else None


def find_time_column(names: Sequence[str], override: str | None = None
                     ) -> tuple[int, float] | None:
    """(index into names, seconds per unit) of the time column, or None when there is none.

    names:    column names as written (a unit in brackets may be part of the name).
    override: the `--time-column` name; when given, only that column can be time
              (None if it is not among names: the caller says so in its own words).
    """
    if override is not None:
        index = match_override(names, override)
        if index is None:
            return None
        return index, time_scale_of(names[index]) or 1.0
    for index, name in enumerate(names):
        scale = time_scale_of(name)
        if scale is not None:
            return index, scale
    return None
