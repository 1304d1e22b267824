"""Chain files: TOML text <-> ChainSpec, with errors that name the stage and the key.

The schema (which keys each kind takes, their types, the ways to give the
required parameters) comes from `filters.kinds`; this module checks structure,
names and types only. Parameter VALUE ranges (cutoff below Nyquist, q > 0 ...)
depend on the sample rate and are checked by `filters.design.design_stage`.
"""

from __future__ import annotations

import math
import tomllib
from typing import Any

from filters.checks import sample_rate
from filters.kinds import BANDS, BESSEL_NORMS, COMMON_KEYS, KINDS, NUMBER, KindInfo
from filters.limits import MAX_CHAIN_CHARS, MAX_CHANNELS, MAX_STAGES, shown
from filters.spec import ALL_KINDS, METHODS, START_POLICIES, ChainSpec, StageSpec

TOP_LEVEL_KEYS: tuple[str, ...] = ("rate_hz", "stage")
_CHOICES: dict[str, tuple[str, ...]] = {
    "method": METHODS, "band": BANDS, "norm": BESSEL_NORMS, "start": START_POLICIES,
}
_TWO_EDGE_BANDS = ("bandpass", "bandstop")


class ChainFileError(ValueError):
    """A chain file that cannot be used; the message is one sentence naming what to fix.

    Stage errors start with "stage N (kind): ", N counted from 1 in file order.
    """


def parse_chain(text: str) -> ChainSpec:
    """Parse and validate chain-file TOML text into a ChainSpec (numbers as float, ints kept).

    Any text gives a ChainSpec or a ChainFileError with one short sentence, in a time
    bounded by filters.limits (MAX_CHAIN_CHARS, MAX_STAGES, MAX_CHANNELS).
    """
    if not isinstance(text, str):
        raise ChainFileError(f"a chain file is text, not {type(text).__name__}")
    if len(text) > MAX_CHAIN_CHARS:
        raise ChainFileError(
            f"the chain file has {len(text)} characters, more than the {MAX_CHAIN_CHARS} a "
            f"chain of at most {MAX_STAGES} stages needs; is it the right file?")
    data = _load_toml(text)
    unknown = [key for key in data if key not in TOP_LEVEL_KEYS]
    if unknown:
        raise ChainFileError(
            f"unknown top-level key {_key(unknown[0])}; a chain file has only "
            f"rate_hz and [[stage]] tables")
    rate = data.get("rate_hz")
    if rate is not None:
        try:
            rate = sample_rate(rate)
        except ValueError as exc:
            raise ChainFileError(str(exc).replace("'", '"')) from None
    stages = data.get("stage", [])
    if not isinstance(stages, list) or not all(isinstance(s, dict) for s in stages):
        raise ChainFileError(
            "'stage' must be an array of tables: write each stage under its own [[stage]] line")
    if len(stages) > MAX_STAGES:
        raise ChainFileError(
            f"the chain file has {len(stages)} stages, more than the {MAX_STAGES} allowed")
    spec = ChainSpec(tuple(_parse_stage(i + 1, table) for i, table in enumerate(stages)), rate)
    names = {name for stage in spec.stages for name in stage.channels or ()}
    if len(names) > MAX_CHANNELS:
        raise ChainFileError(
            f"the stages name {len(names)} different channels, more than the {MAX_CHANNELS} "
            f"a stream may have")
    return spec


def _load_toml(text: str) -> dict[str, Any]:
    """tomllib.loads, every failure as one ChainFileError sentence."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ChainFileError(f"the chain file is not valid TOML: {_short(exc)}") from None
    except RecursionError:
        # tomllib reads nested arrays and inline tables recursively; a chain file nests
        # two deep at most (a channels list inside a stage)
        raise ChainFileError("the chain file nests arrays or inline tables too deeply to "
                             "read; a chain file needs only a channels list") from None
    except ValueError as exc:   # an integer of more than sys.get_int_max_str_digits()
        raise ChainFileError(f"the chain file holds a value tomllib cannot convert "
                             f"({_short(exc)})") from None


def _key(key: str) -> str:
    """A key for a message: 'name', cut to filters.limits.ECHO_CHARS."""
    return shown(key, quote="'")


def _short(exc: Exception, limit: int = 120) -> str:
    """An exception's message on one line, cut to `limit` characters."""
    text = " ".join(str(exc).split())
    return text if len(text) <= limit else text[:limit - 1] + "\u2026"


def _parse_stage(number: int, table: dict[str, Any]) -> StageSpec:
    kind = table.get("kind")
    if kind is None:
        raise ChainFileError(
            f"stage {number} (no kind): missing key 'kind'; give one of {_list(ALL_KINDS)}")
    if not isinstance(kind, str) or kind not in KINDS:
        raise ChainFileError(
            f"stage {number} ({shown(kind, 24, quote='')}): unknown kind in key 'kind'; "
            f"the kinds are {_list(ALL_KINDS)}")
    where = f"stage {number} ({kind})"
    info = KINDS[kind]
    allowed = {**COMMON_KEYS, **info.keys}
    for key, value in table.items():
        if key not in allowed:
            if key in ("method", "prewarp_hz"):
                raise ChainFileError(
                    f"{where}: '{key}' applies only to analog prototypes; "
                    f"{kind} is a digital stage, remove it")
            raise ChainFileError(
                f"{where}: unknown key {_key(key)}; {kind} takes {_list(list(allowed))}")
        _check_type(where, key, value, allowed[key])
    params = {key: _normalize(value, info.keys[key])
              for key, value in table.items() if key in info.keys}
    _check_alternatives(where, info, params)
    _check_consistency(where, params)

    channels = table.get("channels")
    if channels is not None:
        if not channels or not all(isinstance(c, str) and c for c in channels):
            raise ChainFileError(
                f"{where}: 'channels' must be a non-empty list of channel names, "
                f'e.g. channels = ["load"]')
        seen: set[str] = set()
        for name in channels:
            if name in seen:
                raise ChainFileError(f"{where}: 'channels' names {shown(name)} twice; "
                                     f"name each channel once")
            seen.add(name)
        channels = tuple(channels)
    return StageSpec(kind=kind, params=params, channels=channels,
                     bypass=table.get("bypass", False), start=table.get("start", "steady"))


def _check_type(where: str, key: str, value: Any, wanted: type | tuple[type, ...]) -> None:
    if wanted == NUMBER:
        ok = _is_number(value) and _fits_float(value)
        expected = "a number" if not _is_number(value) else "a number within +-1.8e308"
    elif wanted is int:
        ok = isinstance(value, int) and not isinstance(value, bool)
        expected = "an integer"
    elif wanted is bool:
        ok = isinstance(value, bool)
        expected = "true or false"
    elif wanted is list:
        ok = isinstance(value, list)
        expected = 'a list of channel names such as ["load"]'
    else:
        ok = isinstance(value, wanted)
        expected = "a quoted string"
    if not ok:
        raise ChainFileError(f"{where}: '{key}' = {shown(value)} must be {expected}")
    choices = _CHOICES.get(key)
    if choices is not None and value not in choices:
        raise ChainFileError(
            f"{where}: '{key}' = {shown(value)} is not allowed; choose {_list(choices)}")


def _check_alternatives(where: str, info: KindInfo, params: dict[str, Any]) -> None:
    if not info.alternatives:
        return
    ways = ", or ".join(_list(group, "and") for group in info.alternatives)
    complete = [group for group in info.alternatives if all(k in params for k in group)]
    if not complete:
        nearest = max(info.alternatives, key=lambda g: sum(k in params for k in g) / len(g))
        missing = [k for k in nearest if k not in params]
        raise ChainFileError(f"{where}: missing '{missing[0]}'; give {ways}")
    chosen = max(complete, key=len)
    shared = set.intersection(*(set(group) for group in info.alternatives))
    for group in info.alternatives:
        extra = [k for k in group if k in params and k not in chosen]
        if extra:
            rivals = _list([k for k in chosen if k not in shared], "and")
            raise ChainFileError(
                f"{where}: '{extra[0]}' conflicts with {rivals}; give {ways}, not both")


def _check_consistency(where: str, params: dict[str, Any]) -> None:
    band = params.get("band", "lowpass")
    if "band" in params or "low_hz" in params or "high_hz" in params:
        two_edges = band in _TWO_EDGE_BANDS
        if two_edges and "cutoff_hz" in params:
            raise ChainFileError(
                f"{where}: 'cutoff_hz' does not fit band = \"{band}\"; give low_hz and high_hz")
        if not two_edges and "low_hz" in params:
            raise ChainFileError(
                f"{where}: 'low_hz' does not fit band = \"{band}\"; give cutoff_hz, "
                f"or set band to bandpass or bandstop")
    if "prewarp_hz" in params and params.get("method", "tustin-prewarp") != "tustin-prewarp":
        raise ChainFileError(
            f"{where}: 'prewarp_hz' needs method = \"tustin-prewarp\", "
            f"not \"{params['method']}\"")


def _normalize(value: Any, wanted: type | tuple[type, ...]) -> Any:
    return float(value) if wanted == NUMBER else value


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _fits_float(value: int | float) -> bool:
    """False for an integer beyond the float range (float() would raise OverflowError)."""
    try:
        float(value)
    except OverflowError:
        return False
    return True


def _list(items: Any, word: str = "or") -> str:
    items = list(items)
    return ", ".join(items[:-1]) + f" {word} " + items[-1] if len(items) > 1 else items[0]


# -- writing ----------------------------------------------------------------
# tomllib reads TOML but has no writer, and the chain file is a flat schema of
# numbers, strings, booleans and string lists; a twenty-line serializer is
# simpler than a new dependency.

def format_chain(spec: ChainSpec) -> str:
    """Write `spec` as chain-file TOML; parse_chain(format_chain(spec)) == spec."""
    lines = ["# tunetrace chain file"]
    if spec.rate_hz is not None:
        lines.append(f"rate_hz = {_toml_repr(float(spec.rate_hz))}")
    for stage in spec.stages:
        lines += ["", "[[stage]]", f"kind = {_toml_repr(stage.kind)}"]
        lines += [f"{key} = {_toml_repr(value)}" for key, value in stage.params.items()]
        if stage.channels is not None:
            lines.append(f"channels = {_toml_repr(list(stage.channels))}")
        if stage.bypass:
            lines.append("bypass = true")
        if stage.start != "steady":
            lines.append(f"start = {_toml_repr(stage.start)}")
    return "\n".join(lines) + "\n"


def _toml_repr(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        text = repr(value)  # shortest text that reads back to the same float
        return text if any(c in text for c in ".en") else text + ".0"
    if isinstance(value, str):
        return '"' + "".join(_escape(c) for c in value) + '"'
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_repr(v) for v in value) + "]"
    return repr(value)


def _escape(char: str) -> str:
    if char in '"\\':
        return "\\" + char
    if ord(char) < 0x20 or ord(char) == 0x7F:
        return f"\\u{ord(char):04x}"
    return char
