"""Quantities with units, parsed once at the edge.

>>> parse_distance("5 km")
5000.0
>>> parse_distance("1.5 mi")
2414.016
>>> parse_duration("8 min")
480.0
>>> parse_fraction("90 %")
0.9
"""

from __future__ import annotations

import math
import re

from .errors import ParameterError

__all__ = [
    "DISTANCE_UNITS",
    "DURATION_UNITS",
    "parse_distance",
    "parse_duration",
    "parse_fraction",
    "parse_quantity",
]

# International yard and pound agreement (1959): 1 ft = 0.3048 m exactly;
# 1 mi = 1609.344 m exactly; nautical mile = 1852 m (International
# Hydrographic Conference 1929).
DISTANCE_UNITS: dict[str, float] = {
    "m": 1.0,
    "metre": 1.0,
    "metres": 1.0,
    "meter": 1.0,
    "meters": 1.0,
    "km": 1000.0,
    "ft": 0.3048,
    "feet": 0.3048,
    "foot": 0.3048,
    "yd": 0.9144,
    "mi": 1609.344,
    "mile": 1609.344,
    "miles": 1609.344,
    "nmi": 1852.0,
}

DURATION_UNITS: dict[str, float] = {
    "s": 1.0,
    "sec": 1.0,
    "second": 1.0,
    "seconds": 1.0,
    "min": 60.0,
    "minute": 60.0,
    "minutes": 60.0,
    "h": 3600.0,
    "hr": 3600.0,
    "hour": 3600.0,
    "hours": 3600.0,
}

_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z%]*)\s*$")


def parse_quantity(
    value: object, units: dict[str, float], default_unit: str | None, what: str, param: str | None = None
) -> float:
    """Convert ``value`` (a number or a string such as ``"5 km"``) to base units.

    A bare number is taken in ``default_unit``; with ``default_unit=None`` a
    bare number is an error, because the unit would be a guess.
    """
    name = param or what
    if isinstance(value, bool):
        raise ParameterError(f"{name}: expected a {what} such as '5 km', got {value!r}", param)
    if isinstance(value, (int, float)):
        if default_unit is None:
            raise ParameterError(
                f"{name}: the {what} {value!r} has no unit; write it with one, e.g. '{value} "
                f"{next(iter(units))}' (units: {', '.join(sorted(set(units)))})",
                param,
            )
        if not math.isfinite(value):
            raise ParameterError(f"{name}: expected a finite {what} such as '5 km', got {value!r}", param)
        return float(value) * units[default_unit]
    if not isinstance(value, str):
        raise ParameterError(f"{name}: expected a {what} such as '5 km', got {type(value).__name__}", param)
    match = _QUANTITY.match(value)
    if not match:
        raise ParameterError(f"{name}: cannot read {value!r} as a {what}; write a number and a unit, e.g. '5 km'", param)
    number, unit = float(match.group(1)), match.group(2).lower()
    if not unit:
        if default_unit is None:
            raise ParameterError(
                f"{name}: the {what} {value!r} has no unit; add one ({', '.join(sorted(set(units)))})", param
            )
        unit = default_unit
    if unit not in units:
        raise ParameterError(
            f"{name}: unknown unit {unit!r} in {value!r}; use one of {', '.join(sorted(set(units)))}", param
        )
    return number * units[unit]


def parse_distance(value: object, default_unit: str | None = "m", param: str | None = None) -> float:
    """Distance in metres from ``"5 km"``, ``"1.5 mi"``, ``"800 m"`` or a number (metres)."""
    return parse_quantity(value, DISTANCE_UNITS, default_unit, "distance", param)


def parse_duration(value: object, default_unit: str | None = "s", param: str | None = None) -> float:
    """Duration in seconds from ``"8 min"``, ``"240 s"``, ``"1 h"`` or a number (seconds)."""
    return parse_quantity(value, DURATION_UNITS, default_unit, "duration", param)


def parse_fraction(value: object, param: str | None = None) -> float:
    """Fraction in [0, 1] from ``"90 %"``, ``"90%"`` or a number (0.9 or 90 are both read as 90 %).

    A bare number above 1 is read as a percentage, so ``95`` and ``0.95`` agree.
    """
    name = param or "share"
    if isinstance(value, str):
        text = value.strip()
        if text.endswith("%"):
            try:
                frac = float(text[:-1]) / 100.0
            except ValueError:
                raise ParameterError(f"{name}: cannot read {value!r} as a percentage, e.g. '95 %'", param) from None
        else:
            try:
                frac = float(text)
            except ValueError:
                raise ParameterError(f"{name}: cannot read {value!r} as a share, e.g. '95 %' or 0.95", param) from None
            if frac > 1.0:
                frac /= 100.0
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        frac = float(value)
        if frac > 1.0:
            frac /= 100.0
    else:
        raise ParameterError(f"{name}: expected a share such as '95 %' or 0.95, got {value!r}", param)
    if not 0.0 <= frac <= 1.0:
        raise ParameterError(f"{name}: a share must be between 0 % and 100 %, got {value!r}", param)
    return frac
