"""Quantity parsing at the input boundary (SI prefixes per the SI Brochure, BIPM 2019)."""

import math

import pytest

from coildrive.errors import InputError
from coildrive.units import format_si, parse_quantity


@pytest.mark.parametrize("text, dimension, expected", [
    ("45 mH", "inductance", 45e-3),
    ("25 kHz", "frequency", 25e3),
    ("25kHz", "frequency", 25e3),
    ("-10 degC", "temperature", -10.0),
    ("300 K", "temperature", 300 - 273.15),   # 0 degC = 273.15 K (SI Brochure)
    ("40 mohm", "resistance", 0.040),
    ("4.7 kΩ", "resistance", 4700.0),
    ("2.2 µH", "inductance", 2.2e-6),
    ("2.2 uH", "inductance", 2.2e-6),
    ("1.5 mm", "length", 1.5e-3),
    ("1 m", "length", 1.0),
    ("12 g", "mass", 0.012),
    ("0.2 kg", "mass", 0.2),
    ("800 N/m", "stiffness", 800.0),
    ("3 N/mm", "stiffness", 3000.0),
    ("7 %", "dimensionless", 0.07),
    ("1e-3 s", "time", 1e-3),
    (24, "voltage", 24.0),
    (0.5, "current", 0.5),
])
def test_parse(text, dimension, expected):
    assert parse_quantity(text, dimension) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("value, dimension, fragment", [
    ("48 mH", "resistance", "is an inductance, expected a resistance in ohm"),
    ("12 furlongs", "length", "unknown unit 'furlongs'"),
    ("fast", "time", "is not a number with a unit"),
    (True, "voltage", "is not a number"),
    ([1, 2], "voltage", "is not a number"),
    ("20 V", "temperature", "is not a temperature"),
    ("inf V", "voltage", "is not a number"),
])
def test_parse_errors_name_file_and_key(value, dimension, fragment):
    with pytest.raises(InputError) as info:
        parse_quantity(value, dimension, "valve.toml", "coil.resistance")
    text = str(info.value)
    assert text.startswith("valve.toml: coil.resistance: "), text
    assert fragment in text, text


def test_non_finite_number_rejected():
    with pytest.raises(InputError):
        parse_quantity(math.inf, "voltage", "f", "k")


def test_format_si():
    assert format_si(0.0123, "s") == "12.3 ms"
    assert format_si(25000.0, "Hz") == "25 kHz"
    assert format_si(0.0, "A") == "0 A"
    # fewer digits than the integer part has: the integer, never an exponent
    assert format_si(0.79, "s", 2) == "790 ms" and format_si(0.0123, "s", 2) == "12 ms"
