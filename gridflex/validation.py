"""Checks of scalar arguments at the library's boundary, with one wording for every module.

Each check returns the value converted to a plain Python type, or raises
:class:`gridflex.errors.InputError` naming the argument, showing the value with ``!r``
and saying what is allowed. Booleans, strings and complex numbers are never numbers;
numpy scalars are.

Examples
--------
>>> check_number("te", 25e3, unit="m", minimum=0.0)
25000.0
>>> check_density("ice_density", 917)
917.0
>>> check_number("te", "25 km", unit="m")
Traceback (most recent call last):
...
gridflex.errors.InputError: te must be a finite number (m), got '25 km'
"""

from __future__ import annotations

import math
import numbers
import os
from collections.abc import Iterable
from typing import Any, NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from gridflex.constants import MAX_ABS_ELEVATION, MAX_ELASTIC_THICKNESS, MAX_ICE_THICKNESS
from gridflex.errors import InputError

__all__ = [
    "GRID_ROLES",
    "GridRole",
    "check_choice",
    "check_density",
    "check_flag",
    "check_grid_range",
    "check_integer",
    "check_number",
    "check_path_text",
]


def _is_real(value: Any) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def _bounds_text(minimum: float | None, maximum: float | None, strict: bool) -> str:
    parts = []
    if minimum is not None:
        parts.append(f"{'>' if strict else '>='} {minimum:g}")
    if maximum is not None:
        parts.append(f"<= {maximum:g}")
    return " " + " and ".join(parts) if parts else ""


def check_number(
    name: str,
    value: Any,
    *,
    unit: str = "",
    minimum: float | None = None,
    maximum: float | None = None,
    strict: bool = False,
) -> float:
    """A finite real number, optionally bounded.

    Parameters
    ----------
    name : str
        How the argument is called in the message (e.g. ``"te"`` or ``"[plate] te"``).
    value : object
        The value to check: a Python or numpy real number.
    unit : str, optional
        The unit the number is in, shown in the message (e.g. ``"m"``).
    minimum, maximum : float, optional
        Bounds; ``maximum`` is inclusive.
    strict : bool, default False
        Whether ``minimum`` itself is refused (``value > minimum``).

    Returns
    -------
    float
        The value as a Python float.

    Raises
    ------
    InputError
        When *value* is not a finite real number within the bounds.
    """
    unit_text = f" ({unit})" if unit else ""
    wanted = f"{name} must be a finite number{_bounds_text(minimum, maximum, strict)}{unit_text}"
    if not _is_real(value):
        raise InputError(f"{wanted}, got {value!r}")
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{wanted}, got {value!r}")
    if minimum is not None and (number <= minimum if strict else number < minimum):
        raise InputError(f"{wanted}, got {value!r}")
    if maximum is not None and number > maximum:
        raise InputError(f"{wanted}, got {value!r}")
    return number


def check_density(name: str, value: Any, *, allow_zero: bool = True) -> float:
    """A density (kg/m^3): finite and >= 0, or > 0 when ``allow_zero`` is False.

    Zero is a real density (air); refuse it only where a formula divides by it.
    """
    return check_number(name, value, unit="kg/m^3", minimum=0.0, strict=not allow_zero)


def check_integer(
    name: str, value: Any, *, minimum: int | None = None, maximum: int | None = None
) -> int:
    """A whole number (Python or numpy integer, never a bool or a float), optionally bounded."""
    wanted = f"{name} must be a whole number{_bounds_text(minimum, maximum, False)}"
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise InputError(f"{wanted}, got {value!r}")
    number = int(value)
    if (minimum is not None and number < minimum) or (maximum is not None and number > maximum):
        raise InputError(f"{wanted}, got {value!r}")
    return number


def check_choice(name: str, value: Any, allowed: Iterable[str]) -> str:
    """One of the strings in *allowed*."""
    choices = tuple(allowed)
    if not isinstance(value, str) or value not in choices:
        listed = ", ".join(map(repr, choices))
        raise InputError(f"{name} must be one of {listed}; got {value!r}")
    return value


def check_flag(name: str, value: Any) -> bool:
    """A boolean (Python or numpy bool)."""
    if not isinstance(value, (bool, np.bool_)):
        raise InputError(f"{name} must be true or false, got {value!r}")
    return bool(value)


def check_path_text(name: str, value: Any) -> str:
    """A file path (a string or :class:`os.PathLike`) the operating system can take:
    no NUL character, not empty. Returns it as a string.

    Examples
    --------
    >>> check_path_text("--csv", "out/profile.csv")
    'out/profile.csv'
    >>> check_path_text("[output] file", "out\\x00.nc")
    Traceback (most recent call last):
    ...
    gridflex.errors.InputError: [output] file must be a file path without NUL characters, \
got 'out\\x00.nc'
    """
    try:
        text = os.fspath(value)
    except TypeError:
        raise InputError(f"{name} must be a file path, got {value!r}") from None
    if isinstance(text, bytes):
        text = os.fsdecode(text)
    if not text:
        raise InputError(f"{name} must be a file path, got an empty string")
    if "\x00" in text:
        raise InputError(f"{name} must be a file path without NUL characters, got {text!r}")
    return text


class GridRole(NamedTuple):
    """What a grid file holds: its quantity and the physical range of its values (SI).

    Attributes
    ----------
    dimension : str or None
        A :data:`gridflex.units.DIMENSIONS` key (``None``: no unit, e.g. a mask).
    minimum, maximum : float or None
        Inclusive bounds in the SI unit of *dimension* (``None``: unbounded).
    label : str
        What the values are, for messages.
    """

    dimension: str | None
    minimum: float | None
    maximum: float | None
    label: str


GRID_ROLES: dict[str, GridRole] = {
    "thickness": GridRole("length", 0.0, None, "a thickness (m)"),
    "elevation": GridRole(
        "length", -MAX_ABS_ELEVATION, MAX_ABS_ELEVATION, "an elevation or bathymetry (m)"
    ),
    "depth": GridRole("length", -MAX_ABS_ELEVATION, MAX_ABS_ELEVATION, "a depth (m)"),
    "ice_thickness": GridRole("length", 0.0, MAX_ICE_THICKNESS, "an ice thickness (m)"),
    "elastic_thickness": GridRole("length", 0.0, MAX_ELASTIC_THICKNESS, "an elastic thickness (m)"),
    "deflection": GridRole("length", None, None, "a deflection (m)"),
    "length": GridRole("length", None, None, "a length (m)"),
    "stress": GridRole("pressure", None, None, "a stress (Pa)"),
    "density": GridRole("density", 0.0, None, "a density (kg m-3)"),
    "mask": GridRole(None, None, None, "a mask"),
    "stretching_factor": GridRole(None, 1.0, None, "a stretching factor (1 = unstretched)"),
    "anomaly": GridRole(None, None, None, "a gravity anomaly (mGal)"),
}
"""Every kind of grid a scenario reads, with its quantity and physical range (SI).

Thicknesses are never negative; elevations, bathymetry and depths lie within
``gridflex.constants.MAX_ABS_ELEVATION`` of sea level; ice is at most
``gridflex.constants.MAX_ICE_THICKNESS`` thick."""


def check_grid_range(values: ArrayLike, role: str, where: str) -> None:
    """Refuse a grid with values outside the physical range of its *role*.

    Parameters
    ----------
    values : array_like
        The grid's values in the SI unit of the role (m, Pa, kg m-3); NaN cells (no
        data) are not checked.
    role : str
        A :data:`GRID_ROLES` key, e.g. ``"thickness"`` or ``"ice_thickness"``.
    where : str
        File and variable (and scenario key), for the message.

    Raises
    ------
    InputError
        Naming *where*, the number of cells out of range and the worst value.

    Examples
    --------
    >>> check_grid_range([0.0, 120.0, float("nan")], "thickness", "a.nc: variable 'h'")
    >>> check_grid_range([[0.0, -3.0], [-0.5, 2.0]], "thickness", "a.nc: variable 'h'")
    Traceback (most recent call last):
    ...
    gridflex.errors.InputError: a.nc: variable 'h': 2 cell(s) below 0, down to -3 \
(a thickness (m) cannot be negative); check the units and the fill values
    """
    spec = GRID_ROLES.get(role)
    if spec is None:
        raise InputError(f"{where}: unknown grid role {role!r}; use one of {', '.join(GRID_ROLES)}")
    array = np.asarray(values, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        if spec.minimum is not None:
            low = array < spec.minimum
            if low.any():
                reason = (
                    "cannot be negative" if spec.minimum == 0.0 else f"is at least {spec.minimum:g}"
                )
                raise InputError(
                    f"{where}: {int(low.sum())} cell(s) below {spec.minimum:g}, down to "
                    f"{float(array[low].min()):.6g} ({spec.label} {reason}); check the units "
                    "and the fill values"
                )
        if spec.maximum is not None:
            high = array > spec.maximum
            if high.any():
                raise InputError(
                    f"{where}: {int(high.sum())} cell(s) above {spec.maximum:g}, up to "
                    f"{float(array[high].max()):.6g} ({spec.label} is at most "
                    f"{spec.maximum:g}); check the units and the fill values"
                )
