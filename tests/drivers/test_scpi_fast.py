"""The fast paths of `pnbench.drivers.scpi` give what the general ones give.

Text without a quote character is split with ``str.split`` instead of the character walk
that respects quotes, and templates are read once and cached: for any text the results
must be the same as the general code's. The reference for `fill` is the plain regular
expression substitution it replaced (common practice, no source).
"""

from __future__ import annotations

import math
import re

import pytest
from hypothesis import given
from hypothesis import strategies as st

from pnbench.drivers import scpi

# texts built from the characters that matter: separators, quotes, spaces, letters
_ALPHABET = st.sampled_from(list(";,: \t\"'?*AbcV0129.e+-{}"))
texts = st.lists(_ALPHABET, max_size=40).map("".join)
separators = st.sampled_from([";", ",", ";;", ":", "\n"])


@given(texts, separators)
def test_split_fast_path_equals_the_character_walk(text, separator):
    try:
        walked = scpi._split_quoted(text, separator)
    except ValueError:  # an unterminated quote: both refuse it
        with pytest.raises(ValueError):
            scpi._split_outside_quotes(text, separator)
        return
    assert scpi._split_outside_quotes(text, separator) == walked


@given(st.lists(st.text(st.sampled_from(list("AbV0:.9 e-+?")), max_size=12), max_size=6),
       separators)
def test_unquoted_messages_take_the_fast_path_and_split_as_before(units, separator):
    message = separator.join(units)
    assert scpi._split_outside_quotes(message, separator) == \
        scpi._split_quoted(message, separator)
    assert scpi.split_units(message, separator) == \
        [u.strip() for u in scpi._split_quoted(message.strip(), separator) if u.strip()]


_PLACEHOLDER = re.compile(r"\{([^{}]*)\}")


def _reference_fill(template, value=None, state=None, form=None):
    def replace(match):
        name = match.group(1)
        if name == "value":
            return scpi.format_value(value)
        if name == "state":
            return "ON" if state else "OFF"
        return str(form)
    return _PLACEHOLDER.sub(replace, template)


literals = st.text(st.sampled_from(list(":SOURVOLTage ;,*?\"'0")), max_size=8)


@given(st.lists(st.tuples(literals, st.sampled_from(["value", "state", "form"])),
                max_size=3, unique_by=lambda t: t[1]),
       literals,
       st.floats(allow_nan=False, allow_infinity=False), st.booleans(),
       st.sampled_from(["VOLT", "CURR", "CPG"]))
def test_cached_fill_equals_substitution(parts, tail, value, state, form):
    template = "".join(f"{lit}{{{name}}}" for lit, name in parts) + tail
    names = {name for _, name in parts}
    kwargs = {k: v for k, v in (("value", value), ("state", state), ("form", form))
              if k in names}
    assert scpi.fill(template, **kwargs) == _reference_fill(template, **kwargs)
    assert scpi.fill(template, **kwargs) == scpi.fill(template, **kwargs)  # cached again


def test_fill_still_refuses_after_caching():
    assert scpi.fill(":SOUR:VOLT {value}", value=1.5) == ":SOUR:VOLT 1.5"
    with pytest.raises(ValueError, match="non-finite"):
        scpi.fill(":SOUR:VOLT {value}", value=math.inf)
    with pytest.raises(ValueError, match="needs a value"):
        scpi.fill(":SOUR:VOLT {value}")
    with pytest.raises(ValueError, match="unknown placeholder"):
        scpi.fill(":SOUR:VOLT {level}", value=1.0)


def _queries_by_parsing(message: str, separator: str = ";") -> int:
    """The former count: parse each unit, fall back to its first word when malformed."""
    count = 0
    for unit in scpi.split_units(message, separator):
        try:
            count += scpi.parse_command(unit).query
        except ValueError:
            count += unit.split(None, 1)[0].endswith("?")
    return count


@given(st.lists(st.text(st.sampled_from(list(":SOURVOLT?* 1.5e-3,\"'")), max_size=14),
                max_size=6))
def test_counting_queries_by_header_equals_parsing_them(units):
    from pnbench.drivers.session import count_queries

    message = ";".join(units)
    try:
        expected = _queries_by_parsing(message)
    except ValueError:  # an unterminated quote: both refuse it
        with pytest.raises(ValueError):
            count_queries(message)
        return
    assert count_queries(message) == expected


_NUMBER_BY_PATTERN = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)
_WORDS = {"NAN": math.nan, "INF": math.inf, "INFINITY": math.inf, "+INF": math.inf,
          "+INFINITY": math.inf, "-INF": -math.inf, "-INFINITY": -math.inf,
          "NINF": -math.inf, "NINFINITY": -math.inf}


def _number_by_pattern(text: str) -> float:
    """The former parse_number: the special words, else the decimal pattern of SCPI-1999
    vol. 1 7.2.1 (NR1/NR2/NR3) and the markers of 7.2.1.5."""
    s = text.strip()
    if s.upper() in _WORDS:
        return _WORDS[s.upper()]
    if not _NUMBER_BY_PATTERN.fullmatch(s):
        raise ValueError(s)
    x = float(s)
    if abs(x) == scpi.NAN_MARKER:
        return math.nan
    if abs(x) == scpi.OVERFLOW_MARKER:
        return math.copysign(math.inf, x)
    return x


def _same(a: float, b: float) -> bool:
    return (math.isnan(a) and math.isnan(b)) or a == b


number_texts = st.one_of(
    st.text(st.sampled_from(list("0123456789.eE+-_ \tnaifNAIFxX٣")), max_size=12),
    st.floats().map(repr), st.floats().map(lambda x: f"{x:+.6E}"),
    st.sampled_from(["9.91E37", "-9.91e+37", "9.9E37", "-9.9E+37", "NaN", "-inf",
                     "Infinity", "nINF", "+nan", "1_0", "1e500", "-1e-500", "0x10",
                     "5.", ".5", "+.5e-3", "1.e5", " 7 ", "١", "infinity"]))


@given(number_texts)
def test_number_fast_path_reads_what_the_pattern_reads(text):
    try:
        expected = _number_by_pattern(text)
    except ValueError:
        with pytest.raises(ValueError):
            scpi.parse_number(text)
        return
    assert _same(scpi.parse_number(text), expected)


@given(st.lists(number_texts, min_size=1, max_size=4))
def test_numbers_split_and_read_as_field_by_field(fields):
    text = ",".join(fields)
    try:
        expected = [_number_by_pattern(f) for f in scpi.split_args(text)] or None
    except ValueError:
        expected = None
    if expected is None:
        with pytest.raises(ValueError):
            scpi.parse_numbers(text)
        return
    got = scpi.parse_numbers(text)
    assert len(got) == len(expected) and all(map(_same, got, expected))


@given(literals, literals, st.floats(allow_nan=False, allow_infinity=False))
def test_value_template_builds_what_fill_builds(before, after, value):
    template = f"{before}{{value}}{after}"
    head, tail = scpi.value_template(template)
    assert head + scpi.format_value(value) + tail == scpi.fill(template, value=value).strip()


def test_value_template_takes_one_value_placeholder_only():
    for template in (":OUTP {state}", ":SOUR:VOLT", ":A {value};:B {value}"):
        with pytest.raises(ValueError, match="exactly one placeholder"):
            scpi.value_template(template)
