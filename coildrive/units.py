"""Quantities in input files: bare SI numbers or strings with a unit and SI prefix.

Every quantity is converted to SI base units at the input boundary ("45 mH" -> 0.045,
"25 kHz" -> 25000.0, "-10 degC" -> -10.0). Temperatures are kept in degrees Celsius;
a value in kelvin ("300 K") is converted to degrees Celsius. Everything inside
coildrive is SI (ohm, H, V, A, s, Hz, K/W, kg, N, m, J, W) and degC for temperatures.

>>> parse_quantity("45 mH", "inductance")
0.045
>>> parse_quantity("25kHz", "frequency")
25000.0
>>> parse_quantity(-10, "temperature")
-10.0
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from .errors import InputError


@dataclass(frozen=True)
class Dimension:
    """A physical dimension: its display name and the SI unit symbol to suggest."""

    name: str
    si: str


DIMENSIONS: dict[str, Dimension] = {
    "resistance": Dimension("resistance", "ohm"),
    "inductance": Dimension("inductance", "H"),
    "voltage": Dimension("voltage", "V"),
    "current": Dimension("current", "A"),
    "time": Dimension("time", "s"),
    "frequency": Dimension("frequency", "Hz"),
    "thermal_resistance": Dimension("thermal resistance", "K/W"),
    "temperature": Dimension("temperature", "degC"),
    "mass": Dimension("mass", "kg"),
    "force": Dimension("force", "N"),
    "stiffness": Dimension("spring rate", "N/m"),
    "length": Dimension("length", "m"),
    "damping": Dimension("damping", "N*s/m"),
    "power": Dimension("power", "W"),
    "energy": Dimension("energy", "J"),
    "heat_capacity": Dimension("heat capacity", "J/K"),
    "capacitance": Dimension("capacitance", "F"),
    "flux_linkage": Dimension("flux linkage", "Wb"),
    "dimensionless": Dimension("plain number", ""),
}

# symbol -> (dimension, scale to SI, may take an SI prefix)
_UNITS: dict[str, tuple[str, float, bool]] = {
    "ohm": ("resistance", 1.0, True),
    "Ohm": ("resistance", 1.0, True),
    "\u03a9": ("resistance", 1.0, True),  # GREEK CAPITAL LETTER OMEGA
    "\u2126": ("resistance", 1.0, True),  # OHM SIGN
    "H": ("inductance", 1.0, True),
    "V": ("voltage", 1.0, True),
    "A": ("current", 1.0, True),
    "s": ("time", 1.0, True),
    "Hz": ("frequency", 1.0, True),
    "S/s": ("frequency", 1.0, True),
    "K/W": ("thermal_resistance", 1.0, False),
    "degC/W": ("thermal_resistance", 1.0, False),
    "\u00b0C/W": ("thermal_resistance", 1.0, False),
    "g": ("mass", 1e-3, True),
    "N": ("force", 1.0, True),
    "N/m": ("stiffness", 1.0, True),
    "N/mm": ("stiffness", 1e3, False),
    "m": ("length", 1.0, True),
    "N*s/m": ("damping", 1.0, False),
    "N s/m": ("damping", 1.0, False),
    "Ns/m": ("damping", 1.0, False),
    "N\u00b7s/m": ("damping", 1.0, False),
    "W": ("power", 1.0, True),
    "J": ("energy", 1.0, True),
    "J/K": ("heat_capacity", 1.0, True),
    "J/degC": ("heat_capacity", 1.0, False),
    "F": ("capacitance", 1.0, True),
    "Wb": ("flux_linkage", 1.0, True),
    "V*s": ("flux_linkage", 1.0, False),
    "Vs": ("flux_linkage", 1.0, False),
    "%": ("dimensionless", 0.01, False),
}
_TEMPERATURE_UNITS = {"degC": 0.0, "\u00b0C": 0.0, "K": -273.15}

_PREFIXES = {
    "p": 1e-12, "n": 1e-9, "u": 1e-6, "\u00b5": 1e-6, "\u03bc": 1e-6,
    "m": 1e-3, "k": 1e3, "M": 1e6, "G": 1e9,
}

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def _lookup(symbol: str) -> tuple[str, float] | None:
    """Return (dimension, scale) of a unit symbol, with an optional SI prefix."""
    if symbol in _UNITS:
        dim, scale, _ = _UNITS[symbol]
        return dim, scale
    if len(symbol) > 1 and symbol[0] in _PREFIXES:
        base = _UNITS.get(symbol[1:])
        if base is not None and base[2]:
            return base[0], base[1] * _PREFIXES[symbol[0]]
    return None


def _article(noun: str) -> str:
    return ("an " if noun[0] in "aeiou" else "a ") + noun


def example_for(dimension: str) -> str:
    """An example value string for an error message."""
    return {
        "resistance": '"48 ohm"', "inductance": '"45 mH"', "voltage": '"24 V"',
        "current": '"0.5 A"', "time": '"20 ms"', "frequency": '"25 kHz"',
        "thermal_resistance": '"15 K/W"', "temperature": '"-10 degC"',
        "mass": '"12 g"', "force": '"3.5 N"', "stiffness": '"800 N/m"',
        "length": '"1.5 mm"', "damping": '"0.2 N*s/m"', "power": '"2 W"',
        "energy": '"50 mJ"', "heat_capacity": '"12 J/K"', "capacitance": '"470 uF"',
        "flux_linkage": '"12 mWb"', "dimensionless": "0.1 or \"10 %\"",
    }[dimension]


def parse_quantity(value: object, dimension: str, source: str = "", key: str = "") -> float:
    """Convert a file value to SI (degC for temperature).

    Parameters
    ----------
    value : int, float or str
        A bare number in SI base units, or a string such as ``"45 mH"``.
    dimension : str
        One of :data:`DIMENSIONS`.
    source, key : str
        File and key, used only to word an :class:`InputError`.

    Raises
    ------
    InputError
        If the value is not a number, has no or the wrong unit, or is not finite.
    """
    dim = DIMENSIONS[dimension]
    expected = f"expected {_article(dim.name)}" + (f" in {dim.si}" if dim.si else "")
    expected += f", e.g. {example_for(dimension)}"
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise InputError(source, key, f"{short_repr(value)} is not a number, {expected}")
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:   # TOML integers are unbounded: -10**400 parses
            raise InputError(source, key, f"{short_repr(value)} is too large a number, {expected}") from None
    else:
        match = _NUMBER.match(value)
        if not match:
            raise InputError(source, key, f"{short_repr(value)} is not a number with a unit, {expected}")
        number = float(match.group(1))
        symbol = match.group(2)
        if dimension == "temperature":
            if symbol == "":
                pass
            elif symbol in _TEMPERATURE_UNITS:
                number += _TEMPERATURE_UNITS[symbol]
            else:
                raise InputError(source, key, f"{short_repr(value)}: unit {symbol!r} is not a temperature, {expected}")
        elif symbol:
            found = _lookup(symbol)
            if found is None:
                raise InputError(source, key, f"{short_repr(value)}: unknown unit {symbol!r}, {expected}")
            got_dim, scale = found
            if got_dim != dimension:
                raise InputError(
                    source, key,
                    f"{short_repr(value)} is {_article(DIMENSIONS[got_dim].name)}, {expected}",
                )
            number *= scale
    if not math.isfinite(number):
        raise InputError(source, key, f"{short_repr(value)} is not finite, {expected}")
    return number


def short_repr(value: object) -> str:
    """``repr`` of a file value, cut to a readable length (a 400-digit integer stays one line)."""
    text = repr(value)
    return text if len(text) <= 40 else f"{text[:18]}...{text[-6:]} ({len(text)} characters)"


def format_si(value: float, unit: str, digits: int = 4) -> str:
    """Format a number with an SI prefix, e.g. ``format_si(0.0123, "s") == "12.3 ms"``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    exponent = int(math.floor(math.log10(abs(value)) / 3))
    exponent = max(-4, min(3, exponent))
    prefix = {-4: "p", -3: "n", -2: "\u00b5", -1: "m", 0: "", 1: "k", 2: "M", 3: "G"}[exponent]
    scaled = value / 10 ** (3 * exponent)
    # at least the integer part's digits: 790 ms, not 7.9e+02 ms
    digits = max(digits, int(math.floor(math.log10(abs(scaled)))) + 1) if abs(scaled) >= 1 else digits
    return f"{scaled:.{digits}g} {prefix}{unit}".strip()
