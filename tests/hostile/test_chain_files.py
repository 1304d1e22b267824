"""Hostile chain files: any text is a chain or one short sentence, in bounded time.

A chain file comes from a user. Whatever it holds (valid-looking stages with random
kinds, keys and extreme values, random bytes, deep nesting, huge strings, huge numbers,
booleans where numbers go), `parse_chain` and then `ChainSet` at 250 Hz either succeed
or raise ValueError with one line shorter than MESSAGE_LIMIT characters, never another
exception and never a value echoed whole; the CLI verbs that read chain files (`design`,
`apply`, `export`) exit with status 2 and one stderr line, never a traceback.

Each example runs under a time guard (EXAMPLE_LIMIT_S, measured with time.monotonic):
a guard against a runaway (a window of 1e9 samples, 100 000 stages), not a speed
target; speed lives in `tunetrace bench`.
"""

from __future__ import annotations

import contextlib
import io
import math
import os
import subprocess
import sys
import time
import warnings

import numpy as np
import pytest
import scipy.signal  # noqa: F401  (imported here, so the time guard sees no import time)
from hostile_profile import hostile
from hypothesis import example, given
from hypothesis import strategies as st

from filters.chainfile import format_chain, parse_chain
from filters.chainset import ChainSet
from filters.kinds import COMMON_KEYS, KINDS
from filters.limits import MAX_CHAIN_CHARS, MAX_STAGES
from filters.spec import ALL_KINDS, METHODS, ChainSpec, StageSpec

RATE_HZ = 250.0
MESSAGE_LIMIT = 300
EXAMPLE_LIMIT_S = 2.0

# -- generated chain files -----------------------------------------------------------

_KEYS = sorted({key for info in KINDS.values() for key in info.keys} | set(COMMON_KEYS))
_EXTREME_FLOATS = [0.0, -0.0, 1e-300, -1e-300, 5e-324, 1e300, -1e300, 1.7976931348623157e308,
                   math.inf, -math.inf, math.nan, 1e-7, 1e7, 0.5, 1.0, 2.0, 124.999, 125.0]
_EXTREME_INTS = [0, -1, 1, 2, 3, 10, 11, 2**31, 2**63 - 1, -(2**63), 10**20, 10**400,
                 1000000000, 1000001, 10001]


def _toml_string(text: str) -> str:
    return '"' + "".join(c if c.isprintable() and c not in '"\\' else f"\\u{ord(c):04x}"
                         for c in text) + '"'


def _toml_float(value: float) -> str:
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    text = repr(value)
    return text if any(c in text for c in ".en") else text + ".0"


_scalar = st.one_of(
    st.sampled_from(_EXTREME_FLOATS).map(_toml_float),
    st.floats(allow_nan=True, allow_infinity=True).map(_toml_float),
    st.sampled_from(_EXTREME_INTS).map(str),
    st.integers(-10**30, 10**30).map(str),
    st.sampled_from(["true", "false"]),
    st.sampled_from([*ALL_KINDS, *METHODS, "lowpass", "bandpass", "bandstop", "highpass",
                     "mag", "steady", "zero", "x", "load", ""]).map(_toml_string),
    st.text(max_size=30).map(_toml_string),
    st.sampled_from(["1979-05-27T07:32:00Z", "07:32:00", "1979-05-27"]),
)


def _nested(depth: int, inner: str, table: bool) -> str:
    return ("{a = " * depth + inner + "}" * depth) if table else ("[" * depth + inner + "]" * depth)


_value = st.one_of(
    _scalar, _scalar, _scalar,
    st.lists(_scalar, max_size=5).map(lambda items: "[" + ", ".join(items) + "]"),
    st.lists(st.text(min_size=1, max_size=12), max_size=6).map(
        lambda names: "[" + ", ".join(_toml_string(n) for n in names) + "]"),
    st.builds(_nested, st.integers(1, 3000), _scalar, st.booleans()),
    st.integers(1, 300_000).map(lambda n: _toml_string("n" * n)),
)


@st.composite
def _stage(draw: st.DrawFn) -> str:
    kind = draw(st.sampled_from([*ALL_KINDS, *ALL_KINDS, "kalman", ""]))
    info = KINDS.get(kind)
    keys = list(info.keys) if info else _KEYS
    chosen = draw(st.lists(st.sampled_from(keys + _KEYS + ["bogus"]), max_size=8, unique=True))
    lines = ["[[stage]]", f"kind = {_toml_string(kind)}"]
    lines += [f"{key} = {draw(_value)}" for key in chosen if key != "kind"]
    return "\n".join(lines) + "\n"


@st.composite
def chain_texts(draw: st.DrawFn) -> str:
    """A hostile chain file: valid-looking stages with random values, random bytes, deep
    nesting or a huge string, alone or mixed."""
    pieces = []
    if draw(st.booleans()):
        pieces.append(f"rate_hz = {draw(_value)}\n")
    pieces += draw(st.lists(_stage(), max_size=6))
    extra = draw(st.sampled_from(["", "", "bytes", "nest", "repeat"]))
    if extra == "bytes":
        pieces.insert(draw(st.integers(0, len(pieces))),
                      draw(st.binary(max_size=200)).decode("latin-1"))
    elif extra == "nest":
        depth = draw(st.integers(100, 20_000))
        pieces.append(f"deep = {_nested(depth, '1', draw(st.booleans()))}\n")
    elif extra == "repeat" and pieces:
        pieces = pieces * draw(st.integers(2, 60))
    return "".join(pieces)


def _channels_of(spec) -> list[str]:
    return sorted({name for stage in spec.stages for name in stage.channels or ()}) or ["x"]


def _check_one_sentence(message: str) -> None:
    assert "\n" not in message and "\r" not in message, message[:400]
    assert len(message) < MESSAGE_LIMIT, (len(message), message[:400])
    assert "Traceback" not in message


def parse_and_build(text: str, channels: list[str] | None = None) -> str | None:
    """parse_chain + ChainSet at RATE_HZ, then one short block through it: None when the
    chain runs, else the refusal's message; any other exception fails the test."""
    started = time.monotonic()
    message = None
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # a numpy RuntimeWarning is a failure too
        try:
            spec = parse_chain(text)
            names = channels if channels is not None else _channels_of(spec)
            chain = ChainSet(spec, names, spec.rate_hz or RATE_HZ)
            chain.process(np.linspace(-1.0, 1.0, 8 * len(names)).reshape(8, len(names)))
        except ValueError as exc:
            message = str(exc)
    assert time.monotonic() - started < EXAMPLE_LIMIT_S, "runaway: over the time guard"
    if message is not None:
        _check_one_sentence(message)
    return message


@hostile(200)
@given(chain_texts())
@example("r_ohm = 1e200\n")
@example('[[stage]]\nkind = "rc-lowpass"\nr_ohm = 1e200\nc_farad = 1e-6\n')
@example("rate_hz = 1e308\n" + '[[stage]]\nkind = "ema"\nalpha = 0.5\n')
@example("rate_hz = [" * 5000 + "]" * 5000 + "\n")
@example('[[stage]]\nkind = "median"\nwindow = 1000000001\n')
def test_any_chain_text_is_a_chain_or_one_short_sentence(text):
    parse_and_build(text)


# -- the attacks seen, one by one: each refusal names what to fix ------------------------

def _stage_text(kind: str, **keys: str) -> str:
    return "[[stage]]\n" + f'kind = "{kind}"\n' + "".join(f"{k} = {v}\n" for k, v in keys.items())


ATTACKS = [
    # extreme component values: the cutoff they give is out of range
    (_stage_text("rc-lowpass", r_ohm="1e200", c_farad="1e-6"), "lowest allowed"),
    (_stage_text("rc-lowpass", r_ohm="1e-200", c_farad="1e-200"), "Nyquist"),
    (_stage_text("rlc-bandpass", r_ohm="1e-300", l_henry="1e300", c_farad="1e-300"), "q = inf"),
    (_stage_text("rlc-notch", r_ohm="1e300", l_henry="1e-300", c_farad="1e-300"), "Nyquist"),
    # sample rates beyond any link
    ("rate_hz = 1e308\n" + _stage_text("rc-lowpass", cutoff_hz="1.0"), "rate_hz"),
    ("rate_hz = 1e-308\n" + _stage_text("rc-lowpass", cutoff_hz="1.0"), "rate_hz"),
    ("rate_hz = " + "9" * 400 + "\n", "rate_hz"),
    # nesting that tomllib reads recursively
    ("rate_hz = " + "[" * 100_000 + "]" * 100_000 + "\n", "nests"),
    ("x = " + "{a = " * 50_000 + "1" + "}" * 50_000 + "\n", "nests"),
    # numbers where tomllib or float() give up
    (_stage_text("butterworth", order="9" * 5000, cutoff_hz="1.0"), "cannot convert"),
    (_stage_text("gain", scale="9" * 400), "scale"),
    (_stage_text("gain", scale="1e308", offset="-1e308"), "scale"),
    (_stage_text("gain", scale="true"), "scale"),
    # values whose arithmetic overflows or divides by zero inside the design
    (_stage_text("ema", alpha="1e-300"), "alpha"),
    (_stage_text("ema", time_constant_s="1e300"), "time_constant_s"),
    (_stage_text("dc-block", cutoff_hz="1e-300"), "cutoff_hz"),
    (_stage_text("notch", freq_hz="1e-300", q="1"), "freq_hz"),
    (_stage_text("notch", freq_hz="50", q="1e300"), "q = 1e+300"),
    (_stage_text("notch", freq_hz="50", q="1e-300"), "q = 1e-300"),
    (_stage_text("chebyshev1", order="4", cutoff_hz="10", ripple_db="1e300"), "ripple_db"),
    (_stage_text("chebyshev1", order="4", cutoff_hz="10", ripple_db="1e-300"), "ripple_db"),
    (_stage_text("second-order-lowpass", cutoff_hz="10", q="1e-300"), "q = 1e-300"),
    (_stage_text("second-order-lowpass", cutoff_hz="10", q="1e300", method='"zoh"'), "q = 1e+300"),
    (_stage_text("butterworth", order="10", band='"bandpass"', low_hz="1e-300",
                 high_hz="2e-300"), "low_hz"),
    (_stage_text("rc-lowpass", cutoff_hz="1", prewarp_hz="1e-300"), "prewarp_hz"),
    # windows and stage counts that would take gigabytes or minutes
    (_stage_text("moving-average", window="1000000000"), "window = 1000000000"),
    (_stage_text("moving-average", window="1000000"), "window = 1000000"),
    (_stage_text("median", window="1000000001"), "window = 1000000001"),
    (_stage_text("gain") * 100_000, f"{MAX_STAGES} stages"),
    (_stage_text("ema", alpha="0.5") * 10_000, f"{MAX_STAGES} allowed"),
    (_stage_text("gain") * 1_000, f"{MAX_STAGES} allowed"),
    ("# " + "x" * (MAX_CHAIN_CHARS + 1) + "\n", "characters"),
    # huge strings echoed in the message
    (_stage_text("a" * 900_000), "unknown kind"),
    (_stage_text("gain") + "a" * 900_000 + " = 1\n", "unknown key"),
    ("a" * 900_000 + " = 1\n", "unknown top-level key"),
    ('rate_hz = "' + "x" * 100_000 + '"\n', "rate_hz"),
    (_stage_text("gain", channels='["a", "a"]'), "twice"),
]


@pytest.mark.parametrize(("text", "fragment"), ATTACKS,
                         ids=[f"attack{i}" for i in range(len(ATTACKS))])
def test_each_attack_seen_is_refused_in_one_sentence_naming_it(text, fragment):
    message = parse_and_build(text)
    assert message is not None and fragment in message, message


def test_a_50_mb_channel_name_is_not_echoed_whole():
    name = "w" * 50_000_000
    # in a file: refused for its size before it is read
    message = parse_and_build(_stage_text("gain", channels=f'["{name}"]'))
    assert message is not None and "characters" in message
    # in a chain built in memory (the terminal view's edits): refused with the name cut
    with pytest.raises(ValueError) as info:
        ChainSet(ChainSpec((StageSpec("gain", channels=(name,)),)), ["load", "current"],
                 RATE_HZ)
    _check_one_sentence(str(info.value))
    assert "not a channel of this stream (load, current)" in str(info.value)


def test_a_stream_of_many_channels_is_not_listed_whole_in_a_refusal():
    names = [f"ch{i}" for i in range(4000)]
    message = parse_and_build(_stage_text("gain", channels='["nope"]'), channels=names)
    assert message is not None and "3992 more" in message


def test_chains_within_the_budgets_still_run():
    # the largest windows, the most stages and a file near the size limit are accepted
    for text in (_stage_text("moving-average", window="10000"),
                 _stage_text("median", window="1001"),
                 _stage_text("ema", alpha="0.5") * MAX_STAGES,
                 _stage_text("rc-lowpass", cutoff_hz=repr(0.00026), method='"tustin"')):
        assert parse_and_build(text) is None
    assert parse_and_build(format_chain(parse_chain(_stage_text("gain", scale="3e38")))) is None


# -- the CLI on the same files: status 2, one stderr line ------------------------------

CLI_FILES = [text for text, _ in ATTACKS[::3]] + [
    "\x00\x01\x02garbage", "[[stage]]\nkind = 5\n", _stage_text("gain", channels="[[1]]")]


def _run_verb(verb: str, path: str, tmp_path) -> list[str]:
    if verb == "design":
        return ["design", path, "--rate", "250"]
    if verb == "apply":
        recording = tmp_path / "in.csv"
        recording.write_text("t,x\n0,1\n0.004,2\n0.008,3\n")
        return ["apply", str(recording), "--chain", path, "-o", str(tmp_path / "out.csv"),
                "--force"]
    return ["export", path, "--rate", "250", "--target", "c-float", "-o",
            str(tmp_path / "export")]


@pytest.mark.parametrize("verb", ["design", "apply", "export"])
def test_cli_verbs_refuse_hostile_chain_files_with_one_line(verb, tmp_path):
    """In-process through monitor.cli.main (one interpreter for every file): status 2, one
    stderr line, no exception, no warning printed."""
    from monitor.cli import main

    for number, text in enumerate(CLI_FILES):
        path = tmp_path / f"chain{number}.toml"
        path.write_text(text, encoding="utf-8")
        err = io.StringIO()
        started = time.monotonic()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()), \
                warnings.catch_warnings():
            warnings.simplefilter("error")
            code = main(_run_verb(verb, str(path), tmp_path))
        assert time.monotonic() - started < 4 * EXAMPLE_LIMIT_S, (verb, number)
        lines = err.getvalue().splitlines()
        assert code == 2 and len(lines) == 1, (verb, number, code, lines[:3])
        assert lines[0].startswith(f"tunetrace {verb}: ") and len(lines[0]) < 2 * MESSAGE_LIMIT


@pytest.mark.parametrize(("verb", "text"), [
    ("design", "rate_hz = " + "[" * 100_000 + "]" * 100_000 + "\n"),
    ("apply", _stage_text("rc-lowpass", r_ohm="1e-200", c_farad="1e-200")),
    ("export", _stage_text("moving-average", window="1000000000")),
], ids=["design-deep-nesting", "apply-components", "export-window"])
def test_cli_as_a_process_prints_one_line_and_no_traceback(verb, text, tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text(text, encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "monitor.cli", *_run_verb(verb, str(path),
                                                                           tmp_path)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "default"})
    assert done.returncode == 2, done.stderr[-2000:]
    assert "Traceback" not in done.stderr
    assert len(done.stderr.splitlines()) == 1, done.stderr[-2000:]
