"""Elastic-thickness grids from simple structures: a margin profile and break lines.

Coordinates are those of the working grid (projected map coordinates, metres). A cell
with te = 0 is broken: no bending moment crosses it (see
:mod:`gridflex.solvers.finite_difference`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import scipy.ndimage
import xarray as xr

from gridflex.errors import InputError
from gridflex.grid import check_grid, check_same_grid
from gridflex.validation import check_number

__all__ = ["break_mask", "broken_te", "margin_te"]

Point = Sequence[float]


def _points(line: Sequence[Point], name: str, minimum: int = 2) -> np.ndarray:
    try:
        points = np.asarray(line, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be a list of [x, y] pairs in metres, got {line!r}") from exc
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] < minimum:
        raise InputError(
            f"{name} must be a list of at least {minimum} [x, y] pairs in metres, got {line!r}"
        )
    if not np.all(np.isfinite(points)):
        raise InputError(f"{name} contains a non-finite coordinate: {line!r}")
    return points


def margin_te(
    like: xr.DataArray,
    te_left: float,
    te_right: float,
    line: Sequence[Point],
    width: float,
) -> xr.DataArray:
    """te changing from one value to another across a straight line.

    Looking along *line* from its first point to its second, te is *te_left* on the left
    and *te_right* on the right; over a band of *width* centred on the line it changes
    smoothly, te = te_left + (te_right - te_left) (1 - cos(pi u)) / 2 with u going from 0 to
    1 across the band.

    Parameters
    ----------
    like : xarray.DataArray
        A grid on dims ``("y", "x")`` (coordinates in metres) giving the output grid.
    te_left, te_right : float
        Elastic thickness on either side (m, >= 0).
    line : sequence of two (x, y) pairs
        Two distinct points (m) on the line.
    width : float
        Width of the transition (m, >= 0); 0 gives a step.

    Returns
    -------
    xarray.DataArray
        te (m) on *like*'s grid.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(5) * 10e3
    >>> grid = xr.DataArray(np.zeros((5, 5)), dims=("y", "x"), coords={"y": x, "x": x})
    >>> te = margin_te(grid, 60e3, 10e3, [(20e3, 0.0), (20e3, 1.0)], 0.0)
    >>> te.values[0].tolist()  # the line x = 20 km runs north: west is on its left
    [60000.0, 60000.0, 35000.0, 10000.0, 10000.0]
    """
    check_grid(like, "margin grid")
    for name, value in (("te_left", te_left), ("te_right", te_right), ("width", width)):
        check_number(f"margin {name}", value, unit="m", minimum=0.0)
    points = _points(line, "margin line")
    (x0, y0), (x1, y1) = points[0], points[1]
    length = float(np.hypot(x1 - x0, y1 - y0))
    if length == 0.0:
        raise InputError(f"margin line needs two distinct points, got {line!r}")
    xx, yy = np.meshgrid(like["x"].values, like["y"].values)
    # signed distance, positive on the right looking from the first point to the second
    right = ((xx - x0) * (y1 - y0) - (yy - y0) * (x1 - x0)) / length
    if width > 0:
        u = np.clip(right / width + 0.5, 0.0, 1.0)
        share = 0.5 * (1.0 - np.cos(np.pi * u))
    else:
        share = np.where(right > 0, 1.0, np.where(right < 0, 0.0, 0.5))
    te = te_left + (te_right - te_left) * share
    out = like.copy(data=te)
    out.attrs = {"units": "m", "long_name": "effective elastic thickness"}
    return out.rename("elastic_thickness")


def break_mask(
    like: xr.DataArray, polylines: Sequence[Sequence[Point]], width: float = 0.0
) -> xr.DataArray:
    """Cells crossed by break polylines.

    Every polyline is sampled every quarter cell and the cell nearest to each sample is
    marked, which draws an 8-connected line one cell thick: a hinge that cuts the plate
    (no pair of plate cells on opposite sides shares a stencil). A *width* wider than a
    cell marks every cell whose centre lies within width / 2 of the line: a gap that
    separates two plates with free ends.

    Parameters
    ----------
    like : xarray.DataArray
        Grid on dims ``("y", "x")`` with coordinates in metres.
    polylines : sequence of polylines
        Each a sequence of at least two (x, y) points (m) in the grid's coordinates.
        Parts outside the grid are ignored.
    width : float, default 0
        Width of the break (m); 0 for a single-cell hinge line.

    Returns
    -------
    xarray.DataArray of bool
        True on broken cells.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(5) * 1e3
    >>> grid = xr.DataArray(np.zeros((5, 5)), dims=("y", "x"), coords={"y": x, "x": x})
    >>> break_mask(grid, [[(0.0, 0.0), (4e3, 4e3)]]).values.astype(int).diagonal().tolist()
    [1, 1, 1, 1, 1]
    """
    spec = check_grid(like, "break grid")
    check_number("break width", width, unit="m", minimum=0.0)
    xs, ys = like["x"].values.astype(np.float64), like["y"].values.astype(np.float64)
    step_x, step_y = xs[1] - xs[0], ys[1] - ys[0]
    mask = np.zeros(spec.shape, dtype=bool)
    for number, line in enumerate(polylines):
        points = _points(line, f"break line {number + 1}")
        for (xa, ya), (xb, yb) in zip(points[:-1], points[1:], strict=True):
            cells = max(abs(xb - xa) / spec.dx, abs(yb - ya) / spec.dy)
            t = np.linspace(0.0, 1.0, int(np.ceil(4 * cells)) + 2)
            i = np.rint((xa + t * (xb - xa) - xs[0]) / step_x).astype(np.int64)
            j = np.rint((ya + t * (yb - ya) - ys[0]) / step_y).astype(np.int64)
            inside = (i >= 0) & (i < spec.nx) & (j >= 0) & (j < spec.ny)
            mask[j[inside], i[inside]] = True
    if width > max(spec.dx, spec.dy) and mask.any():
        distance = scipy.ndimage.distance_transform_edt(~mask, sampling=(spec.dy, spec.dx))
        mask = distance <= 0.5 * width
    out = like.copy(data=mask)
    out.attrs = {"long_name": "broken plate (te = 0)"}
    return out.rename("broken")


def broken_te(te: xr.DataArray, mask: xr.DataArray) -> xr.DataArray:
    """*te* with 0 on the cells where *mask* is true (same grid).

    Raises
    ------
    InputError
        If *mask* is not on *te*'s grid.
    """
    check_same_grid(mask, te, "break mask")
    return te.where(~mask.values.astype(bool), 0.0)
