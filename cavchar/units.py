"""Quantities with SI prefixes: "6.8GHz", "20 mK", "1.2ms", "4.2e10".

Everything inside cavchar is SI (seconds, hertz, kelvin, watts, radians);
this module is the one place where text with units is turned into numbers and
back.  A bare number is read as already being in SI units, except where the
caller asks for a unit (``require_unit=True``, as every option of the command
line does for a dimensioned quantity: ``--freq 7.412`` is refused, because a
bare number there is far more often a slip than SI).

It also holds :data:`PLAUSIBLE_RANGES`, the ranges any superconducting microwave
cavity has (our own, deliberately wide limits), and :func:`plausibility_problem`,
which says when a value lies outside them and which unit slip would explain it.
"""

from __future__ import annotations

import math
import re

from cavchar.errors import InputError

__all__ = ["parse_quantity", "format_quantity", "DIMENSIONS", "PLAUSIBLE_RANGES",
           "plausibility_problem", "example", "display_prefix", "decimals_for"]

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


def parse_quantity(text: str | float | int, dimension: str, *, require_unit: bool = False,
                   minimum: float | None = None, strict_minimum: bool = False,
                   maximum: float | None = None, name: str | None = None) -> float:
    """Parse a number with an optional SI-prefixed unit into SI.

    Parameters
    ----------
    text
        For example ``"6.8GHz"``, ``"20 mK"``, ``"1.2ms"``, ``"350mK"``,
        ``"4.2e10"`` (a bare number is taken as SI), or a number.
    dimension
        One of :data:`DIMENSIONS` (``"time"``, ``"frequency"``, ``"temperature"``,
        ``"rate"``, ``"power"``, ``"phase"``, ``"dimensionless"``).
    require_unit
        Refuse a bare number for a dimensioned quantity (the error shows the
        expected form, e.g. ``7.412GHz``).
    minimum, strict_minimum, maximum
        Allowed range in SI units (``strict_minimum``: the value must exceed
        ``minimum``, e.g. a positive lifetime).
    name
        What the value is called in messages (e.g. ``"--freq"``); default the
        dimension.

    Returns
    -------
    float
        The value in SI units (s, Hz, K, 1/s, W, rad).

    Raises
    ------
    InputError
        If the text is not a finite number followed by a unit of that dimension,
        lacks a required unit, overflows or lies outside the allowed range.
    """
    if dimension not in DIMENSIONS:
        raise ValueError(f"unknown dimension {dimension!r}")
    label = f"{name}: " if name else ""
    shown = _shorten(text)
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
        unit = ""
    else:
        match = _NUMBER.match(str(text))
        if match is None:
            raise InputError(
                f"{label}cannot read {shown} as a {dimension}",
                hint=f"write a number with a unit, e.g. {example(dimension)}",
            )
        value = float(match.group(1))
        unit = match.group(2)
    if not math.isfinite(value):
        raise InputError(f"{label}{shown} is not a finite {dimension}",
                         hint=f"e.g. {example(dimension)}")
    if unit == "":
        if require_unit and dimension != "dimensionless" and value != 0:
            raise InputError(
                f"{label}{shown} has no unit",
                hint=f"write the unit, e.g. {_with_unit(value, dimension)}",
            )
        factor = 1.0
    else:
        factor = _unit_factor(unit, dimension)
    if factor is None:
        allowed = ", ".join(u for u in DIMENSIONS[dimension] if u) or "none"
        raise InputError(
            f"{label}{shown}: unit {_shorten(unit)} is not a {dimension} unit",
            hint=f"expected {allowed} with an SI prefix, e.g. {example(dimension)}",
        )
    result = value * factor
    if not math.isfinite(result):
        raise InputError(f"{label}{shown} is too large (overflows)",
                         hint=f"e.g. {example(dimension)}")
    _check_range(result, dimension, label, shown, minimum, strict_minimum, maximum)
    return result


def _check_range(value: float, dimension: str, label: str, shown: str,  # label: "NAME: "
                 minimum: float | None, strict_minimum: bool, maximum: float | None) -> None:
    unit = _FORMAT_UNIT[dimension]

    def fmt(x: float) -> str:
        return format_quantity(x, dimension) if unit else f"{x:g}"

    if minimum is not None and (value < minimum or (strict_minimum and value == minimum)):
        bound = ("> " if strict_minimum else ">= ") + fmt(minimum)
        what = "positive" if strict_minimum and minimum == 0 else bound
        raise InputError(f"{label}{shown} is out of range; it must be {what}")
    if maximum is not None and value > maximum:
        raise InputError(f"{label}{shown} is out of range; it must be <= {fmt(maximum)}")


def _shorten(text: object, limit: int = 60) -> str:
    """``repr`` of user text, cut in the middle when long (an echoed cell stays short)."""
    shown = repr(text) if isinstance(text, str) else str(text)
    if len(shown) > limit:
        shown = f"{shown[: limit // 2]}...{shown[-limit // 4:]} ({len(str(text)):,} characters)"
    return shown


def _with_unit(value: float, dimension: str) -> str:
    """The bare ``value`` with the unit a user most likely meant (the example's unit)."""
    unit = re.sub(r"^[0-9.]+", "", example(dimension))
    return f"{value:g}{unit}"


def example(dimension: str) -> str:
    """A typical value of ``dimension`` written with its unit, e.g. ``"6.8GHz"``."""
    return _example(dimension)


def _example(dimension: str) -> str:
    return {"time": "1.2ms", "frequency": "6.8GHz", "rate": "800/s", "temperature": "20mK",
            "power": "1nW", "phase": "0.5rad", "dimensionless": "0.01"}[dimension]


def decimals_for(error: float) -> int:
    """Decimal places that show an uncertainty ``error`` (> 0) by the rounding rule of the
    Particle Data Group (Review of Particle Physics, "Introduction: rounding"): take the
    three leading digits; 100-354 keep two significant digits, 355-949 one, 950-999 round
    up to 1000 and keep two.  The result may be negative (rounded to tens, hundreds ...);
    3 for an error that is not finite and positive.  The one rounding rule of cavchar's
    output: the summary line, tables, reports and the log."""
    if not (math.isfinite(error) and error > 0):
        return 3
    exponent = math.floor(math.log10(error))
    lead = int(round(error / 10 ** (exponent - 2), 6))  # 100..999, robust to 0.355 -> 354.99
    if lead >= 950:
        exponent, sig = exponent + 1, 2
    elif lead >= 355:
        sig = 1
    else:
        sig = 2
    return sig - 1 - exponent


def display_prefix(value: float) -> tuple[str, float]:
    """The SI prefix a value is shown with, and its factor: the largest prefix of
    ``T, G, M, k, '', m, µ, n, p, f`` not above ``|value|`` (a value that rounds up to
    the next prefix at 4 digits takes it), e.g. ``display_prefix(1.21e-3) == ("m", 1e-3)``.
    The one prefix table of output text, tables and figure axes."""
    magnitude = abs(value)
    for prefix, factor in _FORMAT_PREFIXES:
        if magnitude >= factor * 0.9995:
            return prefix, factor
    return _FORMAT_PREFIXES[-1]


def format_quantity(value: float, dimension: str, digits: int = 3) -> str:
    """Format an SI value with a readable prefix, e.g. ``format_quantity(1.21e-3, "time")``
    gives ``"1.21 ms"``.  ``digits`` is the number of significant digits."""
    unit = _FORMAT_UNIT[dimension]
    if not math.isfinite(value):
        return f"{value} {unit}".strip()
    if value == 0 or dimension in ("dimensionless", "phase"):
        return f"{value:.{digits}g} {unit}".strip()
    prefix, factor = display_prefix(value)
    scaled = value / factor
    return f"{scaled:.{digits}g} {prefix}{unit}"


#: ranges any superconducting microwave cavity has, in SI units (our own, deliberately
#: wide limits; outside them a unit slip is far likelier than the hardware):
#: lifetime 1 ns .. 1000 s, mode frequency 100 MHz .. 1 THz, stage temperature at most
#: 10 K (the cavity must be superconducting), effective mode temperature at most 10 K,
#: thermal photon number at most 1000.
PLAUSIBLE_RANGES: dict[str, tuple[float, float, str]] = {
    "lifetime": (1e-9, 1e3, "time"),
    "frequency": (1e8, 1e12, "frequency"),
    "stage_temperature": (0.0, 10.0, "temperature"),
    "effective_temperature": (0.0, 10.0, "temperature"),
    "n_thermal": (0.0, 1e3, "dimensionless"),
}

_SLIPS = {
    "lifetime": {"low": "a time column in us or ms read as s? give --time-unit or a unit in "
                        "the header", "high": "a time column in ms or us read as s? give "
                        "--time-unit (e.g. ms) or a unit in the header"},
    "frequency": {"low": "a frequency without its prefix? write e.g. 6.8GHz",
                  "high": "a frequency with a wrong prefix? write e.g. 6.8GHz"},
    "stage_temperature": {"high": "a temperature in mK written without its unit? "
                                  "write e.g. 20mK"},
    "effective_temperature": {"high": "check --freq and the time unit of the record"},
    "n_thermal": {"high": "check the photon-number column and the record's time unit"},
}


def plausibility_problem(quantity: str, value: float) -> str | None:
    """A sentence when ``value`` (SI) lies outside :data:`PLAUSIBLE_RANGES` for
    ``quantity``, naming the likely unit slip; None when it is plausible."""
    low, high, dimension = PLAUSIBLE_RANGES[quantity]
    if value is None or not math.isfinite(value):
        return None
    side = "low" if value < low else "high" if value > high else None
    if side is None or (side == "low" and low == 0.0):
        return None
    words = quantity.replace("_", " ")
    span = f"{format_quantity(low, dimension)} .. {format_quantity(high, dimension)}"
    if low == 0.0:
        span = f"at most {format_quantity(high, dimension)}"
    text = (f"{words} {format_quantity(value, dimension)} is outside what a superconducting "
            f"cavity has ({span})")
    hint = _SLIPS.get(quantity, {}).get(side)
    return text + (f"; {hint}" if hint else "")
