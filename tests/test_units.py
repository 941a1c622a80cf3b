"""Parsing and formatting of quantities with SI prefixes."""

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cavchar.errors import InputError
from cavchar.units import format_quantity, parse_quantity


@pytest.mark.parametrize(
    ("text", "dimension", "expected"),
    [
        ("6.8GHz", "frequency", 6.8e9),
        ("20 mK", "temperature", 0.020),
        ("1.2ms", "time", 1.2e-3),
        ("350mK", "temperature", 0.350),
        ("4.2e10", "dimensionless", 4.2e10),
        ("10us", "time", 1e-5),
        ("10µs", "time", 1e-5),
        ("2 min", "time", 120.0),
        ("800/s", "rate", 800.0),
        ("90deg", "phase", math.pi / 2),
        (" 3.5 kHz ", "frequency", 3500.0),
        (0.5, "time", 0.5),
    ],
)
def test_parse(text, dimension, expected):
    assert parse_quantity(text, dimension) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "dimension", "fragment"),
    [
        ("6.8GHz", "time", "not a time unit"),
        ("fast", "time", "cannot read 'fast' as a time"),
        ("20 mk", "temperature", "not a temperature unit"),
        ("nan", "time", "cannot read"),
        ("inf K", "temperature", "cannot read"),
    ],
)
def test_parse_errors_name_string_and_dimension(text, dimension, fragment):
    with pytest.raises(InputError, match=fragment):
        parse_quantity(text, dimension)


def test_format():
    assert format_quantity(1.21e-3, "time") == "1.21 ms"
    assert format_quantity(6.8e9, "frequency") == "6.8 GHz"
    assert format_quantity(0.020, "temperature") == "20 mK"
    assert format_quantity(2.5e-6, "time") == "2.5 µs"


@given(st.floats(min_value=1e-14, max_value=1e13, allow_nan=False))
def test_format_parse_round_trip(value):
    text = format_quantity(value, "time", digits=12)
    assert parse_quantity(text, "time") == pytest.approx(value, rel=1e-11)
