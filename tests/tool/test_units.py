"""Values with SI prefixes as engineers write them (bench.units)."""

import math

import pytest

from bench.units import QuantityError, format_si, parse_quantity


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("22u", None, 22e-6),
        ("4.7n", "F", 4.7e-9),
        ("100 Hz", "Hz", 100.0),
        ("200 MHz", "Hz", 200e6),
        ("6.3 V", "V", 6.3),
        ("1F", "F", 1.0),  # "F" alone is farad when farads are expected, not femto
        ("10mF", "F", 10e-3),
        ("2meg", "ohm", 2e6),  # SPICE spelling of mega
        ("1.5k ohm", "ohm", 1500.0),
        ("10 Ω", "ohm", 10.0),
        ("100 mohm", "ohm", 0.1),
        ("499", "ohm", 499.0),
        ("10 mA", "A", 10e-3),
        ("-10 dBm", "dBm", -10.0),
        ("5ms", "s", 5e-3),
        ("2.2 uF", "F", 2.2e-6),
        ("2.2 µF", "F", 2.2e-6),
        ("1e-3", None, 1e-3),
        ("1e12 ms", "s", 1e9),  # the number's exponent and the prefix's add up
        ("2.5E-3 kHz", "Hz", 2.5),
        ("1e+3m", None, 1.0),
        (0.47, "H", 0.47),
        (12, "V", 12.0),
    ],
)
def test_parse_quantity(text, unit, expected):
    assert parse_quantity(text, unit) == pytest.approx(expected, rel=1e-15)


def test_decimal_prefix_scaling_is_exact():
    # 4.7 * 1e-9 in binary floating point is 4.700000000000001e-09; the parser scales
    # through the decimal exponent so the value written is the value read.
    assert parse_quantity("4.7n") == 4.7e-9


@pytest.mark.parametrize(
    ("text", "unit", "message"),
    [
        ("6.3 V", "Hz", "unit 'V'"),
        ("abc", None, "cannot read 'abc'"),
        ("1 furlong", "Hz", "is not Hz"),
        ("nan", None, "cannot read"),
        (True, None, "expected a number"),
        (None, "F", "expected a number in F"),
        (float("inf"), None, "not a finite number"),
        ("1e400 mV", "V", "not a finite number"),
        ("1e" + "9" * 5000 + " s", "s", "not a finite number"),  # no int of 5000 digits
    ],
)
def test_bad_quantities_name_the_problem(text, unit, message):
    with pytest.raises(QuantityError, match=message):
        parse_quantity(text, unit, name="sweep.start")


def test_error_names_the_key():
    with pytest.raises(QuantityError, match=r"^sweep\.stop:"):
        parse_quantity("fast", "Hz", name="sweep.stop")


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [
        (4.7e-9, "F", "4.7 nF"),
        (22e-6, "F", "22 µF"),
        (1.2e-3, "ohm", "1.2 mohm"),
        (200e6, "Hz", "200 MHz"),
        (0.0, "V", "0 V"),
    ],
)
def test_format_si(value, unit, text):
    assert format_si(value, unit) == text


@pytest.mark.parametrize(
    ("value", "digits", "text"),
    [
        (151e3, 2, "151 kHz"),  # more integer digits than asked for: all, no exponent
        (-151.0, 2, "-151 Hz"),
        (1.5e6, 2, "1.5 MHz"),
        (999.7e3, 3, "1000 kHz"),
    ],
)
def test_format_si_never_writes_an_exponent(value, digits, text):
    assert format_si(value, "Hz", digits) == text


def test_format_then_parse_round_trip():
    for value in (3.3e-12, 4.7e-9, 0.1e-6, 22e-6, 1.5e3, 2.5e9):
        assert math.isclose(parse_quantity(format_si(value, "F", digits=12), "F"), value)
