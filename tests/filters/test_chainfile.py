"""Chain file parsing, validation messages and the TOML round trip."""

from __future__ import annotations

import tomllib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filters.chainfile import ChainFileError, format_chain, parse_chain
from filters.kinds import BANDS, KINDS, NUMBER
from filters.spec import METHODS, ChainSpec, StageSpec

EXAMPLE = """
rate_hz = 250.0            # optional; else --rate, else measured

[[stage]]
kind = "median"
window = 5

[[stage]]
kind = "notch"
freq_hz = 50.0
q = 30.0
channels = ["load"]

[[stage]]
kind = "rc-lowpass"
cutoff_hz = 8              # an int is fine where a float is wanted
method = "tustin-prewarp"
bypass = true
start = "zero"
"""


def test_design_note_example_parses():
    spec = parse_chain(EXAMPLE)
    assert spec.rate_hz == 250.0
    assert [s.kind for s in spec.stages] == ["median", "notch", "rc-lowpass"]
    assert spec.stages[0].params == {"window": 5}
    assert isinstance(spec.stages[0].params["window"], int)
    assert spec.stages[1].channels == ("load",)
    assert spec.stages[1].selects("load") and not spec.stages[1].selects("vib")
    lowpass = spec.stages[2]
    assert lowpass.params == {"cutoff_hz": 8.0, "method": "tustin-prewarp"}
    assert isinstance(lowpass.params["cutoff_hz"], float)
    assert lowpass.bypass and lowpass.start == "zero"
    assert spec.stages[0].channels is None and not spec.stages[0].bypass
    assert spec.stages[0].start == "steady"


def test_empty_file_is_an_empty_chain():
    assert parse_chain("") == ChainSpec()
    assert parse_chain("rate_hz = 1000\n") == ChainSpec((), 1000.0)


def test_format_of_example_round_trips_and_is_toml():
    spec = parse_chain(EXAMPLE)
    text = format_chain(spec)
    tomllib.loads(text)  # the writer emits valid TOML (checked by the standard library reader)
    assert parse_chain(text) == spec


def _stage(kind: str, **params) -> str:
    lines = ["[[stage]]", f'kind = "{kind}"'] + [f"{k} = {v}" for k, v in params.items()]
    return "\n".join(lines) + "\n"


FIRST = 'rate_hz = 250\n[[stage]]\nkind = "median"\nwindow = 3\n'


@pytest.mark.parametrize(("text", "fragments"), [
    # unknown kind: lists the allowed ones
    (_stage("kalman"), ["stage 2 (kalman)", "'kind'", "butterworth", "median"]),
    (_stage("median", window=5, cutoff_hz=3), ["stage 2 (median)", "'cutoff_hz'", "window"]),
    # a bool is not a number; an int where an int is wanted; order and window are integers
    (_stage("notch", freq_hz="true", q=30), ["stage 2 (notch)", "'freq_hz'", "number"]),
    (_stage("median", window=5.0), ["stage 2 (median)", "'window'", "integer"]),
    (_stage("butterworth", order=4.0, cutoff_hz=8), ["stage 2 (butterworth)", "'order'",
                                                     "integer"]),
    (_stage("notch", freq_hz='"50"', q=30), ["stage 2 (notch)", "'freq_hz'", "number"]),
    (_stage("rc-lowpass", cutoff_hz=8, method=3), ["'method'", "string"]),
    # missing parameters: the ways to give them
    (_stage("rc-lowpass"), ["stage 2 (rc-lowpass)", "'cutoff_hz'",
                            "cutoff_hz, or r_ohm and c_farad"]),
    (_stage("rc-lowpass", r_ohm=1000), ["stage 2 (rc-lowpass)", "'c_farad'"]),
    (_stage("notch", freq_hz=50), ["stage 2 (notch)", "'q'"]),
    (_stage("butterworth", cutoff_hz=8), ["stage 2 (butterworth)", "'order'"]),
    (_stage("chebyshev1", order=2, cutoff_hz=8), ["'ripple_db'"]),
    # conflicting alternatives
    (_stage("rc-lowpass", cutoff_hz=8, r_ohm=1000, c_farad=1e-6),
     ["stage 2 (rc-lowpass)", "'cutoff_hz'", "conflicts", "r_ohm"]),
    (_stage("ema", alpha=0.1, time_constant_s=0.5), ["stage 2 (ema)", "'time_constant_s'",
                                                     "conflicts"]),
    (_stage("butterworth", order=2, cutoff_hz=8, low_hz=1, high_hz=3),
     ["stage 2 (butterworth)", "conflicts"]),
    # method given to a digital kind
    (_stage("notch", freq_hz=50, q=30, method='"tustin"'),
     ["stage 2 (notch)", "'method'", "analog"]),
    # bad choice values
    (_stage("rc-lowpass", cutoff_hz=8, method='"euler"'),
     ["stage 2 (rc-lowpass)", "'method'", "forward-euler", "matched"]),
    (_stage("butterworth", order=2, cutoff_hz=8, band='"low"'),
     ["'band'", "lowpass", "bandstop"]),
    (_stage("median", window=5, start='"cold"'), ["stage 2 (median)", "'start'", "steady", "zero"]),
    (_stage("median", window=5, bypass=1), ["stage 2 (median)", "'bypass'", "true or false"]),
    (_stage("butterworth", order=2, band='"bandpass"', cutoff_hz=8),
     ["stage 2 (butterworth)", "'cutoff_hz'", "low_hz and high_hz"]),
    (_stage("butterworth", order=2, low_hz=1, high_hz=4),
     ["stage 2 (butterworth)", "'low_hz'", "band"]),
    (_stage("rc-lowpass", cutoff_hz=8, method='"zoh"', prewarp_hz=8),
     ["stage 2 (rc-lowpass)", "'prewarp_hz'", "tustin-prewarp"]),
    # channels: a non-empty list of strings
    (_stage("median", window=5, channels="[]"), ["stage 2 (median)", "'channels'"]),
    (_stage("median", window=5, channels='"load"'), ["stage 2 (median)", "'channels'"]),
    (_stage("median", window=5, channels="[1, 2]"), ["stage 2 (median)", "'channels'"]),
    (_stage("median", window=5, channels='[""]'), ["stage 2 (median)", "'channels'"]),
    ('[[stage]]\nwindow = 5\n', ["stage 2", "'kind'"]),
    ('[[stage]]\nkind = 5\n', ["stage 2", "'kind'"]),
])
def test_stage_errors_name_stage_and_key(text, fragments):
    with pytest.raises(ChainFileError) as info:
        parse_chain(FIRST + text)
    message = str(info.value)
    assert message.startswith("stage 2 ")
    for fragment in fragments:
        assert fragment in message, (fragment, message)
    assert "\n" not in message


@pytest.mark.parametrize(("text", "fragment"), [
    ("rate_hz = -5\n", "rate_hz"),
    ("rate_hz = 0\n", "rate_hz"),
    ("rate_hz = true\n", "rate_hz"),
    ('rate_hz = "250"\n', "rate_hz"),
    ("rate_hz = nan\n", "rate_hz"),
    ("sample_rate = 250\n", "'sample_rate'"),
    ('[stage]\nkind = "median"\nwindow = 3\n', "[[stage]]"),
    ("stage = 3\n", "[[stage]]"),
])
def test_top_level_errors(text, fragment):
    with pytest.raises(ChainFileError) as info:
        parse_chain(text)
    assert fragment in str(info.value)


def test_toml_syntax_error_says_the_line():
    with pytest.raises(ChainFileError) as info:
        parse_chain('rate_hz = 250\n\n[[stage]]\nkind = "median\nwindow = 3\n')
    assert "TOML" in str(info.value) and "line 4" in str(info.value)


def test_chain_file_error_is_a_value_error():
    assert issubclass(ChainFileError, ValueError)


# -- round trip: parse(format(x)) == x for any valid spec -------------------------------

_finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
_names = st.text(min_size=1, max_size=8)


@st.composite
def stage_specs(draw) -> StageSpec:
    kind = draw(st.sampled_from(sorted(KINDS)))
    info = KINDS[kind]
    group = draw(st.sampled_from(info.alternatives)) if info.alternatives else ()
    params: dict[str, object] = {}
    if "band" in info.keys:
        two_edges = "low_hz" in group
        band = draw(st.sampled_from(BANDS[2:] if two_edges else BANDS[:2]))
        if two_edges or draw(st.booleans()):
            params["band"] = band
    for key in group:
        params[key] = draw(st.integers(1, 10)) if info.keys[key] is int else draw(_finite)
    if info.analog and draw(st.booleans()):
        params["method"] = draw(st.sampled_from(METHODS))
    if info.analog and params.get("method", "tustin-prewarp") == "tustin-prewarp" \
            and draw(st.booleans()):
        params["prewarp_hz"] = draw(_finite)
    if kind == "gain":
        for key in ("scale", "offset"):
            if draw(st.booleans()):
                params[key] = draw(_finite)
    for key, wanted in info.keys.items():
        if wanted == NUMBER and key in params:
            params[key] = float(params[key])
    channels = draw(st.none() | st.lists(_names, min_size=1, max_size=3, unique=True).map(tuple))
    return StageSpec(kind=kind, params=params, channels=channels,
                     bypass=draw(st.booleans()), start=draw(st.sampled_from(("steady", "zero"))))


@settings(max_examples=150, deadline=None)
@given(st.lists(stage_specs(), max_size=5),
       st.none() | st.floats(min_value=1e-3, max_value=1e7, allow_nan=False))
def test_round_trip(stages, rate):
    spec = ChainSpec(tuple(stages), rate)
    assert parse_chain(format_chain(spec)) == spec
