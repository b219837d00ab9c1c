"""SI-prefixed quantities for options and displays (quantiphy underneath)."""

from __future__ import annotations

import math

import pytest

from pnbench.errors import BadInput
from pnbench.sweeps.quantities import format_quantity, parse_quantity


@pytest.mark.parametrize("text, unit, value", [
    ("2.5mA", "A", 2.5e-3),
    ("2.5 mA", "A", 2.5e-3),
    ("1m", "V", 1e-3),
    ("-5", "V", -5.0),
    ("-5V", "V", -5.0),
    ("100u", "A", 1e-4),
    ("1e-3", "A", 1e-3),
    ("1MHz", "Hz", 1e6),
    ("1k", "Hz", 1e3),
    ("300 K", "K", 300.0),       # the unit K is not read as the prefix kilo
    ("300.15K", "K", 300.15),
    ("1 kohm", "ohm", 1e3),
    ("4.7kΩ", "ohm", 4.7e3),
    ("10p", "F", 1e-11),
    (0.25, "V", 0.25),
])
def test_parse_reads_si_prefixes_and_units(text, unit, value):
    """SI prefixes (BIPM, The International System of Units, 9th ed., 2019)."""
    assert parse_quantity(text, unit) == pytest.approx(value, rel=1e-15)


@pytest.mark.parametrize("text, unit, fragment", [
    ("5 mV", "A", "unit 'V', expected 'A'"),
    ("abc", "V", "cannot read 'abc'"),
    ("", "V", "empty"),
    ("nan", "V", "not a finite number"),
    ("inf", "V", "not a finite number"),
    ("1meg", "Hz", "unit 'eg'"),
])
def test_parse_refuses_with_a_message_naming_the_option(text, unit, fragment):
    with pytest.raises(BadInput, match="--bias") as err:
        parse_quantity(text, unit, what="--bias")
    assert fragment in str(err.value)


def test_parse_allows_infinity_only_when_asked():
    assert parse_quantity("inf", "ohm", allow_infinite=True) == math.inf


@pytest.mark.parametrize("value, unit, text", [
    (0.0013, "A", "1.3 mA"),
    (25.865e-3, "V", "25.865 mV"),
    (1.5e-12, "F", "1.5 pF"),
    (1e6, "Hz", "1 MHz"),
    (math.inf, "ohm", "inf ohm"),
    (-math.inf, "V", "-inf V"),
])
def test_format(value, unit, text):
    assert format_quantity(value, unit) == text


def test_format_then_parse_round_trips():
    for value in (3.3e-9, -0.65, 47e3, 1.0):
        assert parse_quantity(format_quantity(value, "V", prec=12), "V") == \
            pytest.approx(value, rel=1e-12)


def test_estimates_show_the_digits_their_sigma_supports():
    """The standard error to two significant digits and the value rounded to the same
    place (JCGM 100:2008, GUM 7.2.6), at least three significant digits."""
    from pnbench.sweeps.quantities import estimate_digits, format_estimate

    assert format_estimate(4.0123e-15, 4.0e-18, "A") == "4.0123 fA"   # 0.1 %: five digits
    assert format_estimate(4.0e-15, 4.0e-16, "A") == "4.00 fA"        # 10 %: zeros kept
    assert format_estimate(0.62012, 1.3e-3, "ohm") == "620.1 mohm"    # one spelling: ohm
    assert format_estimate(1.0312, 2.3e-3, "") == "1.0312"  # sigma 0.0023
    assert format_estimate(2.0, None, "V") == "2.00 V"
    assert estimate_digits(1.0, 0.5) == 3 and estimate_digits(1.0, 1e-12) == 6
