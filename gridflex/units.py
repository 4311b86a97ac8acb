"""Physical quantities written as numbers (SI) or as strings with a unit ("25 km")."""

from __future__ import annotations

import math
import re
from typing import Any

from gridflex.errors import InputError

__all__ = ["DIMENSIONS", "FOOT", "parse_quantity", "si_unit", "unit_factor"]

FOOT = 0.3048
"""The international foot in metres (exact; international yard and pound agreement of 1959,
from memory). ``ft``, ``foot`` and ``feet`` mean this foot; the US survey foot is not accepted."""

DIMENSIONS: dict[str, dict[str, float]] = {
    "length": {
        "m": 1.0,
        "metre": 1.0,
        "meter": 1.0,
        "metres": 1.0,
        "meters": 1.0,
        "km": 1.0e3,
        "kilometre": 1.0e3,
        "kilometer": 1.0e3,
        "kilometres": 1.0e3,
        "kilometers": 1.0e3,
        "cm": 1.0e-2,
        "mm": 1.0e-3,
        "ft": FOOT,
        "foot": FOOT,
        "feet": FOOT,
    },
    "density": {
        "kg/m^3": 1.0,
        "kg/m3": 1.0,
        "kg m-3": 1.0,
        "kg m^-3": 1.0,
        "g/cm^3": 1.0e3,
        "g/cm3": 1.0e3,
        "g cm-3": 1.0e3,
        "g cm^-3": 1.0e3,
    },
    "pressure": {"Pa": 1.0, "kPa": 1.0e3, "MPa": 1.0e6, "GPa": 1.0e9},
    "force_per_length": {"N/m": 1.0, "N m-1": 1.0, "kN/m": 1.0e3, "MN/m": 1.0e6, "TN/m": 1.0e12},
    "acceleration": {"m/s^2": 1.0, "m/s2": 1.0, "m s-2": 1.0},
    "rigidity": {"N m": 1.0, "N*m": 1.0, "Nm": 1.0},
    # ages: ka / Ma (thousand / million years before present) and kyr / Myr (durations)
    # are all counted in years here, the sign (before present or after) set by the key
    "time": {
        "yr": 1.0,
        "year": 1.0,
        "years": 1.0,
        "kyr": 1.0e3,
        "ka": 1.0e3,
        "Myr": 1.0e6,
        "Ma": 1.0e6,
    },
    "viscosity": {"Pa s": 1.0, "Pa*s": 1.0},
}
"""Accepted units per dimension, with their factor to the SI (or year) unit.

The one table of units: scenario quantities (``"25 km"``) and the CF ``units``
attribute of grid files (``"km"``, ``"g cm-3"``, ``"MPa"``) are both read through it."""

_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def si_unit(dimension: str) -> str:
    """The SI unit (factor 1) of a :data:`DIMENSIONS` entry, e.g. ``"m"``."""
    return next(unit for unit, factor in DIMENSIONS[dimension].items() if factor == 1.0)


def unit_factor(unit: str, dimension: str, where: str) -> float:
    """Factor that converts *unit* to SI for *dimension*; InputError naming *where*."""
    table = DIMENSIONS[dimension]
    unit = unit.strip()
    if unit in table:
        return table[unit]
    allowed = ", ".join(table)
    kind = dimension.replace("_", " ")
    other = next((name for name, units in DIMENSIONS.items() if unit in units), None)
    actually = f" (it is a {other.replace('_', ' ')})" if other else ""
    raise InputError(f"{where}: unit {unit!r} is not a {kind}{actually}; use one of {allowed}")


def parse_quantity(value: Any, dimension: str, where: str) -> float:
    """A number (taken as SI) or a string ``"<number> <unit>"`` converted to SI.

    Parameters
    ----------
    value : float, int or str
        The value as written.
    dimension : str
        One of :data:`DIMENSIONS`.
    where : str
        Where the value came from, for messages (file, table, key).

    Examples
    --------
    >>> parse_quantity("25 km", "length", "x")
    25000.0
    >>> parse_quantity(1030, "density", "x")
    1030.0
    """
    if isinstance(value, bool):
        raise InputError(f"{where}: expected a number, got {value!r}")
    if isinstance(value, (int, float)):
        number = float(value)
    elif isinstance(value, str):
        match = _QUANTITY.match(value)
        if not match:
            raise InputError(f"{where}: cannot read {value!r} as a number with a unit")
        number = float(match.group(1))
        if match.group(2):
            number *= unit_factor(match.group(2), dimension, where)
    else:
        raise InputError(f"{where}: expected a number or a string like '25 km', got {value!r}")
    if not math.isfinite(number):
        raise InputError(f"{where}: value must be finite, got {value!r}")
    return number
