"""Physical constants and the default parameter values every module shares.

Each value is written once here; modules import it instead of repeating the literal.
"""

from __future__ import annotations

__all__ = [
    "DAYS_PER_YEAR",
    "DEFAULT_GRAVITY",
    "GRAVITATIONAL_CONSTANT",
    "MAX_ABS_ELEVATION",
    "MAX_ELASTIC_THICKNESS",
    "MAX_ICE_THICKNESS",
    "MGAL",
    "PRESENT_DATE",
    "SEA_WATER_DENSITY",
    "SECONDS_PER_YEAR",
]

GRAVITATIONAL_CONSTANT = 6.67430e-11
"""Newtonian constant of gravitation G (m^3 kg^-1 s^-2), CODATA 2018."""

MGAL = 1.0e-5
"""One milligal in m/s^2 (the unit of gravity anomalies at the output)."""

DEFAULT_GRAVITY = 9.81
"""Gravitational acceleration at the surface (m/s^2) used by default: the rounded value of
the flexure literature (common practice; standard gravity is 9.80665)."""

SEA_WATER_DENSITY = 1030.0
"""Density of sea water (kg/m^3), the default water and infill density (common practice)."""

DAYS_PER_YEAR = 365.25
"""Days in one Julian year, the year of every time in gridflex."""

SECONDS_PER_YEAR = DAYS_PER_YEAR * 86400.0
"""One Julian year (365.25 days) in seconds."""

PRESENT_DATE = "1950-01-01"
"""The "present" of ages before present (BP): 1 January 1950 (common practice of
radiocarbon and palaeoclimate time scales)."""

MAX_ABS_ELEVATION = 11.0e3
"""Largest elevation or depth (m, either sign) a grid may hold: the deepest ocean trench is
about 11 km below sea level and the highest summit under 9 km above it (common knowledge).
A larger value is a wrong unit or a fill value, and is refused."""

MAX_ICE_THICKNESS = 5000.0
"""Largest ice thickness (m) a grid may hold: the thickest ice measured on the present ice
sheets is under 5 km (common knowledge, from memory); a thicker cell is refused."""

MAX_ELASTIC_THICKNESS = 1.0e6
"""Largest elastic thickness (m) accepted: 1000 km. The thin-plate model needs te far below
the Earth's radius, and published te values stay below about 150 km (common knowledge,
from memory); a larger value is a wrong unit, and beyond about 1e99 m the rigidity would
overflow a float."""
