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
from collections.abc import Iterable
from typing import Any

import numpy as np

from gridflex.errors import InputError

__all__ = [
    "check_choice",
    "check_density",
    "check_flag",
    "check_integer",
    "check_number",
    "check_values_within",
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


def check_values_within(
    name: str, values: Any, minimum: float, maximum: float, *, unit: str = ""
) -> None:
    """Refuse an array with values outside ``[minimum, maximum]`` (NaN cells are ignored).

    For grids whose role bounds them physically (ice thickness, bed elevation): a value
    outside is a wrong unit or an undeclared fill value, never data.

    Parameters
    ----------
    name : str
        What the values are (file, variable, key), for the message.
    values : array_like
        The values, already in *unit*.
    minimum, maximum : float
        Inclusive bounds.
    unit : str, optional
        Unit of the values and bounds, shown in the message.

    Raises
    ------
    InputError
        Naming *name*, the number of cells outside and the worst value.

    Examples
    --------
    >>> check_values_within("ice", [0.0, 7000.0, 9000.0], 0.0, 5000.0, unit="m")
    Traceback (most recent call last):
    ...
    gridflex.errors.InputError: ice: 2 cell(s) outside 0 to 5000 m; the worst is 9000 m
    """
    array = np.asarray(values, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        below = array < minimum
        above = array > maximum
    count = int(below.sum() + above.sum())
    if count == 0:
        return
    excess = np.where(below, minimum - array, 0.0) + np.where(above, array - maximum, 0.0)
    worst = float(array.flat[int(np.argmax(np.nan_to_num(excess, nan=0.0)))])
    unit_text = f" {unit}" if unit else ""
    raise InputError(
        f"{name}: {count} cell(s) outside {minimum:g} to {maximum:g}{unit_text}; "
        f"the worst is {worst:g}{unit_text}"
    )
