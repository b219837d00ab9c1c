"""SCPI text functions, with plain strings and with hypothesis.

Sources: IEEE 488.2-1992 (program message syntax, string data, error-queue entries) and
SCPI-1999 volume 1 (long and short header forms, 9.91E37 not-a-number, 9.9E37 overflow).
Quoted from memory of the standards' text; the examples are the standards' own kinds.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from pnbench.drivers import scpi

finite = st.floats(allow_nan=False, allow_infinity=False)


# --- format_value --------------------------------------------------------------------

@pytest.mark.parametrize(
    ("x", "text"),
    [(1e-5, "1e-05"), (0.5, "0.5"), (3.0, "3"), (-2.0, "-2"), (0.1, "0.1"), (1e20, "1e+20")],
)
def test_format_value_shortest_exact(x, text):
    assert scpi.format_value(x) == text


@given(finite)
def test_format_value_round_trips_through_parse_number(x):
    text = scpi.format_value(x)
    if abs(x) in (scpi.NAN_MARKER, scpi.OVERFLOW_MARKER):
        assert math.isnan(scpi.parse_number(text)) or math.isinf(scpi.parse_number(text))
    else:
        assert scpi.parse_number(text) == x
        assert float(text) == x


def test_format_value_writes_markers_for_non_finite():
    assert math.isnan(scpi.parse_number(scpi.format_value(math.nan)))
    assert scpi.parse_number(scpi.format_value(math.inf)) == math.inf
    assert scpi.parse_number(scpi.format_value(-math.inf)) == -math.inf


# --- fill and join ---------------------------------------------------------------------

def test_fill_value_state_form():
    assert scpi.fill(":SOUR:VOLT {value}", value=0.25) == ":SOUR:VOLT 0.25"
    assert scpi.fill(":OUTP {state}", state=True) == ":OUTP ON"
    assert scpi.fill(":OUTP {state}", state=False, on="1", off="0") == ":OUTP 0"
    assert scpi.fill(":IMP:MOD {form}", form="parallel") == ":IMP:MOD parallel"
    assert scpi.fill("*RST") == "*RST"


@pytest.mark.parametrize(
    ("template", "kwargs"),
    [
        (":SOUR:VOLT {value}", {}),  # placeholder without argument
        (":SOUR:VOLT 1", {"value": 2.0}),  # argument without placeholder
        (":SOUR:VOLT {level}", {"value": 2.0}),  # unknown placeholder
        (":SOUR:VOLT {value}", {"value": math.nan}),  # never send nan
        (":SOUR:VOLT {value}", {"value": math.inf}),
    ],
)
def test_fill_refuses_mismatches(template, kwargs):
    with pytest.raises(ValueError):
        scpi.fill(template, **kwargs)


def test_join_skips_blank_units():
    assert scpi.join([":A 1", "", "  ", ":B?"]) == ":A 1;:B?"
    assert scpi.join([":A 1", ":B?"], separator=" ; ") == ":A 1 ; :B?"
    assert scpi.join([]) == ""


# --- split_units, parse_command --------------------------------------------------------

def test_split_units_respects_quotes():
    msg = ':SYST:TEXT "a;b";*IDN?\n'
    assert scpi.split_units(msg) == [':SYST:TEXT "a;b"', "*IDN?"]
    assert scpi.split_units("1.0,2.0;0") == ["1.0,2.0", "0"]
    assert scpi.split_units("a;;b;") == ["a", "b"]
    assert scpi.split_units('"it""s;x";y') == ['"it""s;x"', "y"]


def test_split_units_unterminated_quote():
    with pytest.raises(ValueError):
        scpi.split_units(':SYST:TEXT "abc;*IDN?')


quoted_text = st.text(alphabet=st.characters(codec="ascii", exclude_characters="\n\r"), max_size=12)
units = st.lists(
    st.one_of(
        st.from_regex(r":[A-Z]{2,6}(:[A-Z]{2,6}){0,2}\??", fullmatch=True),
        quoted_text.map(lambda t: ":SYST:TEXT " + scpi.quote(t)),
    ),
    min_size=1,
    max_size=6,
)


@given(units)
def test_split_units_inverts_join(parts):
    assert scpi.split_units(scpi.join(parts)) == parts


@given(quoted_text)
def test_quote_unquote_round_trip(text):
    assert scpi.unquote(scpi.quote(text)) == text


def test_parse_command_forms():
    assert scpi.parse_command(":SOUR:VOLT:LEV 1e-3") == scpi.Command(":SOUR:VOLT:LEV", ["1e-3"])
    assert scpi.parse_command("*IDN?") == scpi.Command("*IDN", [], True)
    assert scpi.parse_command("  meas:volt? 10 , AUTO ") == scpi.Command(
        "meas:volt", ["10", "AUTO"], True
    )
    assert scpi.parse_command(':SYST:TEXT "a, b"').args == ['"a, b"']


@pytest.mark.parametrize("unit", ["", "   ", "?", ":SOUR::VOLT 1", "1abc", ":A 1,,2", "*"])
def test_parse_command_rejects(unit):
    with pytest.raises(ValueError):
        scpi.parse_command(unit)


@given(
    st.from_regex(r":?[A-Za-z]{1,8}(:[A-Za-z]{1,8}){0,3}", fullmatch=True),
    st.booleans(),
    st.lists(finite.filter(lambda v: not scpi.is_marker(v)), max_size=3),
)
def test_parse_command_reads_what_fill_and_join_built(header, query, values):
    args = ",".join(scpi.format_value(v) for v in values)
    unit = header + ("?" if query else "") + (" " + args if args else "")
    cmd = scpi.parse_command(unit)
    assert cmd.header == header
    assert cmd.query == query
    assert [scpi.parse_number(a) for a in cmd.args] == values


# --- header_matches ----------------------------------------------------------------

@pytest.mark.parametrize(
    "header",
    [":SOUR:VOLT:LEV", ":source:voltage:level", "SOUR:VOLT:LEV", ":SOURce:VOLTage:LEVel",
     ":sour:VOLTAGE:lev"],
)
def test_header_matches_long_and_short(header):
    assert scpi.header_matches(":SOURce:VOLTage:LEVel", header)


@pytest.mark.parametrize(
    "header",
    [":SOURC:VOLT:LEV", ":SOU:VOLT:LEV", ":SOUR:VOLT", ":SOUR:VOLT:LEV:X", ":SOUR:VOLT:LEV?",
     "", ":", ":SOUR::LEV"],
)
def test_header_matches_rejects_in_between_and_wrong(header):
    """SCPI-1999 vol. 1, 6.2.1: only the long or the short form is accepted (from memory)."""
    assert not scpi.header_matches(":SOURce:VOLTage:LEVel", header)


def test_header_matches_optional_nodes_queries_and_common():
    pattern = "[:SOURce]:VOLTage[:LEVel][:IMMediate]"
    for header in [":VOLT", ":SOUR:VOLT", "volt:lev", ":SOUR:VOLT:LEV:IMM", "VOLT:IMM"]:
        assert scpi.header_matches(pattern, header), header
    assert not scpi.header_matches(pattern, ":SOUR:LEV")
    assert scpi.header_matches(":OUTPut:STATe?", ":outp:stat?")
    assert not scpi.header_matches(":OUTPut:STATe?", ":OUTP:STAT")
    assert scpi.header_matches("*IDN?", "*idn?")
    assert not scpi.header_matches("*IDN?", "*RST")
    assert scpi.header_matches(":SENSe:CURRent:NPLCycles", ":SENS:CURR:NPLC")
    assert scpi.header_matches(":OUTPut2:STATe", ":OUTP2:STAT")


# --- numbers, booleans, error entries ----------------------------------------------

@pytest.mark.parametrize(
    ("text", "value"),
    [("1", 1.0), ("+1.000E-03", 1e-3), ("-0.5", -0.5), (".5", 0.5), ("5.", 5.0),
     (" 2e3\n", 2000.0), ("9.9E37", math.inf), ("-9.9E+37", -math.inf), ("INF", math.inf),
     ("ninf", -math.inf)],
)
def test_parse_number(text, value):
    assert scpi.parse_number(text) == value


@pytest.mark.parametrize("text", ["9.91E37", "+9.91000E+37", "NAN", "nan"])
def test_parse_number_not_a_number(text):
    """SCPI-1999 vol. 1, 7.2.1.5: 9.91E37 is the not-a-number value (from memory)."""
    assert math.isnan(scpi.parse_number(text))


@pytest.mark.parametrize("text", ["", " ", "1_000", "1.0A", "#H1F", "abc", "1e", "--1", "1,2", "١"])
def test_parse_number_rejects_garbage(text):
    with pytest.raises(ValueError):
        scpi.parse_number(text)


@given(st.text(max_size=10))
def test_parse_number_raises_only_value_error(text):
    try:
        result = scpi.parse_number(text)
    except ValueError:
        return
    assert isinstance(result, float)


def test_parse_numbers():
    assert scpi.parse_numbers("1.0,-2E-3, 9.91E37")[:2] == [1.0, -2e-3]
    assert math.isnan(scpi.parse_numbers("1,9.91E37")[1])
    with pytest.raises(ValueError, match="field 2"):
        scpi.parse_numbers("1,x,3")
    with pytest.raises(ValueError):
        scpi.parse_numbers("")


@given(st.lists(finite, min_size=1, max_size=8))
def test_parse_numbers_round_trip(values):
    values = [v for v in values if abs(v) not in (scpi.NAN_MARKER, scpi.OVERFLOW_MARKER)]
    if values:
        text = ",".join(scpi.format_value(v) for v in values)
        assert scpi.parse_numbers(text) == values


@pytest.mark.parametrize(
    ("text", "value"),
    [("1", True), ("0", False), ("ON", True), ("off", False), ("+1", True), ("0.0", False)],
)
def test_parse_bool(text, value):
    assert scpi.parse_bool(text) is value


@pytest.mark.parametrize("text", ["", "yes", "9.91E37", "O N"])
def test_parse_bool_rejects(text):
    with pytest.raises(ValueError):
        scpi.parse_bool(text)


def test_parse_error_entry():
    """IEEE 488.2 / SCPI-1999 error entries: code, quoted message (examples from memory)."""
    assert scpi.parse_error_entry('-113,"Undefined header"') == (-113, "Undefined header")
    assert scpi.parse_error_entry('+0,"No error"\n') == (0, "No error")
    assert scpi.parse_error_entry('-222,"Data out of range;value 5"') == (
        -222, "Data out of range;value 5")
    assert scpi.parse_error_entry('-100,"say ""hi"""') == (-100, 'say "hi"')
    assert scpi.parse_error_entry("-350,Queue overflow") == (-350, "Queue overflow")
    assert scpi.parse_error_entry("0") == (0, "")


@pytest.mark.parametrize("text", ["", "No error", '"x",-113', '-113,"unterminated', "1.5,x"])
def test_parse_error_entry_rejects(text):
    with pytest.raises(ValueError):
        scpi.parse_error_entry(text)


@given(st.integers(-999, 999), quoted_text)
def test_error_entry_round_trip(code, message):
    assert scpi.parse_error_entry(scpi.format_error_entry(code, message)) == (code, message)


def test_is_marker():
    assert scpi.is_marker(math.nan) and scpi.is_marker(math.inf) and scpi.is_marker(-math.inf)
    assert scpi.is_marker(9.91e37) and scpi.is_marker(-9.9e37)
    assert not scpi.is_marker(1.0) and not scpi.is_marker(9.9e36)


mnemonic = st.tuples(
    st.text(alphabet="ABCDEFGHIJKLMNOPQRSTUVWXYZ", min_size=1, max_size=4),
    st.text(alphabet="abcdefghijklmnopqrstuvwxyz", min_size=0, max_size=5),
)


@given(st.lists(mnemonic, min_size=1, max_size=4), st.data())
def test_header_matches_exactly_long_or_short_form_per_node(nodes, data):
    """SCPI-1999 vol. 1, 6.2.1 (from memory): each node is accepted in its short form (the
    capitals) or its long form, in any case; any other truncation is not a match."""
    pattern = "".join(":" + upper + lower for upper, lower in nodes)
    words = []
    for upper, lower in nodes:
        word = data.draw(st.sampled_from([upper, upper + lower]))
        words.append(data.draw(st.sampled_from([word, word.lower()])))
    assert scpi.header_matches(pattern, ":".join(words))
    k = data.draw(st.integers(0, len(nodes) - 1))
    upper, lower = nodes[k]
    if len(lower) >= 2:  # a form strictly between short and long
        bad = words.copy()
        bad[k] = upper + lower[: data.draw(st.integers(1, len(lower) - 1))]
        assert not scpi.header_matches(pattern, ":".join(bad))
