"""Quantities with SI prefixes: "6.8GHz", "20 mK", "1.2ms", "4.2e10".

Everything inside cavchar is SI (seconds, hertz, kelvin, watts, radians);
this module is the one place where text with units is turned into numbers and
back.  A bare number is read as already being in SI units.
"""

from __future__ import annotations

import math
import re

from cavchar.errors import InputError

__all__ = ["parse_quantity", "format_quantity", "DIMENSIONS"]

_PREFIXES: dict[str, float] = {
    "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6,
    "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6, "G": 1e9, "T": 1e12,
}

#: base unit symbols accepted for each dimension, with their factor to SI
DIMENSIONS: dict[str, dict[str, float]] = {
    "time": {"s": 1.0, "min": 60.0, "h": 3600.0},
    "frequency": {"Hz": 1.0},
    "rate": {"/s": 1.0, "1/s": 1.0, "Hz": 1.0},
    "temperature": {"K": 1.0},
    "power": {"W": 1.0},
    "phase": {"rad": 1.0, "deg": math.pi / 180.0},
    "dimensionless": {"": 1.0},
}

# prefixes that read naturally in output, largest first
_FORMAT_PREFIXES = [("T", 1e12), ("G", 1e9), ("M", 1e6), ("k", 1e3), ("", 1.0),
                    ("m", 1e-3), ("µ", 1e-6), ("n", 1e-9), ("p", 1e-12), ("f", 1e-15)]
_FORMAT_UNIT = {"time": "s", "frequency": "Hz", "rate": "/s", "temperature": "K",
                "power": "W", "phase": "rad", "dimensionless": ""}
_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")


def _unit_factor(unit: str, dimension: str) -> float | None:
    units = DIMENSIONS[dimension]
    if unit in units:
        return units[unit]
    for base, factor in units.items():
        if base and unit.endswith(base):
            prefix = unit[: -len(base)]
            if prefix in _PREFIXES and base not in ("min", "h", "deg"):
                return _PREFIXES[prefix] * factor
    return None


def parse_quantity(text: str | float | int, dimension: str) -> float:
    """Parse a number with an optional SI-prefixed unit into SI.

    Parameters
    ----------
    text
        For example ``"6.8GHz"``, ``"20 mK"``, ``"1.2ms"``, ``"350mK"``,
        ``"4.2e10"`` (a bare number is taken as SI), or a number.
    dimension
        One of :data:`DIMENSIONS` (``"time"``, ``"frequency"``, ``"temperature"``,
        ``"rate"``, ``"power"``, ``"phase"``, ``"dimensionless"``).

    Returns
    -------
    float
        The value in SI units (s, Hz, K, 1/s, W, rad).

    Raises
    ------
    InputError
        If the text is not a finite number followed by a unit of that dimension.
    """
    if dimension not in DIMENSIONS:
        raise ValueError(f"unknown dimension {dimension!r}")
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
        unit = ""
    else:
        match = _NUMBER.match(str(text))
        if match is None:
            raise InputError(
                f"cannot read {text!r} as a {dimension}",
                hint=f"write a number with a unit, e.g. {_example(dimension)}",
            )
        value = float(match.group(1))
        unit = match.group(2)
    if not math.isfinite(value):
        raise InputError(f"{text!r} is not a finite {dimension}")
    if unit == "":
        return value
    factor = _unit_factor(unit, dimension)
    if factor is None:
        allowed = ", ".join(u for u in DIMENSIONS[dimension] if u) or "none"
        raise InputError(
            f"{text!r}: unit {unit!r} is not a {dimension} unit",
            hint=f"expected {allowed} with an SI prefix, e.g. {_example(dimension)}",
        )
    return value * factor


def _example(dimension: str) -> str:
    return {"time": "1.2ms", "frequency": "6.8GHz", "rate": "800/s", "temperature": "20mK",
            "power": "1nW", "phase": "0.5rad", "dimensionless": "0.01"}[dimension]


def format_quantity(value: float, dimension: str, digits: int = 3) -> str:
    """Format an SI value with a readable prefix, e.g. ``format_quantity(1.21e-3, "time")``
    gives ``"1.21 ms"``.  ``digits`` is the number of significant digits."""
    unit = _FORMAT_UNIT[dimension]
    if not math.isfinite(value):
        return f"{value} {unit}".strip()
    if value == 0 or dimension in ("dimensionless", "phase"):
        return f"{value:.{digits}g} {unit}".strip()
    magnitude = abs(value)
    for prefix, factor in _FORMAT_PREFIXES:
        if magnitude >= factor * 0.9995:
            break
    scaled = value / factor
    return f"{scaled:.{digits}g} {prefix}{unit}"
