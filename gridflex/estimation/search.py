"""One-parameter searches shared by the Te estimators: a coarse grid, then Brent's method.

A misfit curve is evaluated on a grid of trial values (usually log-spaced); the best
grid point and its two neighbours bracket the minimum, which bounded Brent refines.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import scipy.optimize

from gridflex.errors import InputError
from gridflex.progress import Progress

__all__ = ["check_search_bounds", "grid_then_refine"]

DEFAULT_XATOL = 1e-5
"""Absolute tolerance of the refinement, in the unit of the grid (scipy's default)."""


def check_search_bounds(name: str, bounds: Any, unit: str = "") -> tuple[float, float]:
    """``(low, high)`` of a search range: two finite numbers with 0 < low < high.

    Parameters
    ----------
    name : str
        The argument's name for the message (e.g. ``"bounds"``).
    bounds : object
        The value given: a pair of numbers.
    unit : str, optional
        The unit of the bounds, shown in the message.

    Raises
    ------
    InputError
        Unless *bounds* is two finite numbers with 0 < low < high.
    """
    unit_text = f" ({unit})" if unit else ""
    try:
        low, high = (float(b) for b in bounds)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be two numbers{unit_text}, got {bounds!r}") from exc
    if not (math.isfinite(low) and math.isfinite(high) and 0.0 < low < high):
        raise InputError(
            f"{name} must satisfy 0 < low < high{unit_text}, both finite; got {bounds!r}"
        )
    return low, high


def grid_then_refine(
    objective: Callable[[float], float],
    grid: np.ndarray,
    *,
    xatol: float = DEFAULT_XATOL,
    progress: Progress | None = None,
) -> tuple[int, float]:
    """Minimise *objective* over *grid*, then refine between the best point's neighbours.

    Parameters
    ----------
    objective : callable
        The misfit as a function of the searched value (in the unit of *grid*).
    grid : numpy.ndarray
        Increasing trial values (at least 2).
    xatol : float
        Absolute tolerance of bounded Brent on the refinement.
    progress : callable, optional
        Called as ``progress(done, total)`` after each grid point.

    Returns
    -------
    best_index : int
        Index of the best grid point.
    best : float
        The minimiser: Brent's, unless the best grid point is at least as good.
    """
    coarse = []
    for i, x in enumerate(grid):
        coarse.append(objective(float(x)))
        if progress is not None:
            progress(i + 1, len(grid))
    best_index = int(np.argmin(coarse))
    bracket = (grid[max(best_index - 1, 0)], grid[min(best_index + 1, len(grid) - 1)])
    opt = scipy.optimize.minimize_scalar(
        objective, bounds=bracket, method="bounded", options={"xatol": xatol}
    )
    best = float(opt.x) if opt.fun <= coarse[best_index] else float(grid[best_index])
    return best_index, best
