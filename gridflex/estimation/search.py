"""Searches shared by the Te estimators: coarse grids, then a local refinement.

One parameter: a misfit curve is evaluated on a grid of trial values (usually
log-spaced); the best grid point and its two neighbours bracket the minimum, which
bounded Brent refines (:func:`grid_then_refine`). Several parameters, each mapped onto
[0, 1]: coarse scans along groups of coordinates (:func:`scan_groups`), then a bounded
trust-region least-squares refinement of the residual vector
(:func:`refine_least_squares`), which also gives the Jacobian at the minimum.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import scipy.optimize

from gridflex.errors import InputError
from gridflex.progress import Progress

__all__ = ["check_search_bounds", "grid_then_refine", "refine_least_squares", "scan_groups"]

DEFAULT_XATOL = 1e-5
"""Absolute tolerance of the refinement, in the unit of the grid (scipy's default)."""


def check_search_bounds(
    name: str, bounds: Any, unit: str = "", *, positive: bool = True
) -> tuple[float, float]:
    """``(low, high)`` of a search range: two finite numbers with low < high (and 0 < low).

    Parameters
    ----------
    name : str
        The argument's name for the message (e.g. ``"bounds"``).
    bounds : object
        The value given: a pair of numbers.
    unit : str, optional
        The unit of the bounds, shown in the message.
    positive : bool, default True
        Also require 0 < low (a range searched in logarithm).

    Raises
    ------
    InputError
        Unless *bounds* is two finite numbers with low < high (and 0 < low).
    """
    unit_text = f" ({unit})" if unit else ""
    try:
        low, high = (float(b) for b in bounds)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be two numbers{unit_text}, got {bounds!r}") from exc
    ordered = low < high and (low > 0.0 or not positive)
    if not (math.isfinite(low) and math.isfinite(high) and ordered):
        rule = "0 < low < high" if positive else "low < high"
        raise InputError(f"{name} must satisfy {rule}{unit_text}, both finite; got {bounds!r}")
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


def scan_groups(
    objective: Callable[[np.ndarray], float],
    start: np.ndarray,
    groups: Sequence[Sequence[int]],
    samples: int,
    *,
    progress: Progress | None = None,
) -> np.ndarray:
    """Coarse search on [0, 1]^p: scan each group of coordinates in turn, keep the best.

    For each group, the coordinates it names are set together to each of *samples*
    evenly spaced values in [0, 1] (the others held at the best point so far) and the
    best point is kept; a group of two coordinates scans their diagonal.

    Parameters
    ----------
    objective : callable
        The misfit at a point of [0, 1]^p.
    start : numpy.ndarray
        The point the first scan starts from.
    groups : sequence of sequences of int
        The coordinates scanned together, group after group.
    samples : int
        Values per scan (>= 2).
    progress : callable, optional
        Called as ``progress(done, total)`` after each point.

    Returns
    -------
    numpy.ndarray
        The best point seen.
    """
    best = np.array(start, dtype=np.float64)
    best_value = math.inf
    total, done = len(groups) * samples, 0
    for group in groups:
        for t in np.linspace(0.0, 1.0, samples):
            point = best.copy()
            point[list(group)] = t
            value = objective(point)
            if value < best_value:
                best_value, best = value, point
            done += 1
            if progress is not None:
                progress(done, total)
    return best


def refine_least_squares(
    residuals: Callable[[np.ndarray], np.ndarray],
    start: np.ndarray,
    *,
    diff_step: float,
    xtol: float,
    ftol: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Minimise the sum of squared *residuals* on [0, 1]^p from *start*.

    A bounded trust-region reflective least-squares search (:func:`scipy.optimize.least_squares`,
    ``method="trf"``) with a forward-difference Jacobian of step *diff_step*.

    Returns
    -------
    point : numpy.ndarray
        The minimiser found.
    jacobian : numpy.ndarray, shape (n, p)
        The Jacobian of the residuals there (its normal matrix J^T J is the Gauss-Newton
        approximation of half the Hessian of the sum of squares).
    """
    result = scipy.optimize.least_squares(
        residuals,
        np.clip(np.asarray(start, dtype=np.float64), 0.0, 1.0),
        bounds=(0.0, 1.0),
        method="trf",
        diff_step=diff_step,
        xtol=xtol,
        ftol=ftol,
        gtol=1e-10,
    )
    return np.asarray(result.x, dtype=np.float64), np.asarray(result.jac, dtype=np.float64)
