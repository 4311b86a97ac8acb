"""Synthetic load shapes on a regular grid: for tests, examples and the demo.

The island chain is an invented scenario (no real place): five volcanic edifices
along a line, decreasing in size along the chain as if carried away from a
melting source.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.validation import check_number

__all__ = [
    "ISLAND_CHAIN",
    "disc_height",
    "empty_grid",
    "gaussian_height",
    "grid_points",
    "island_chain_height",
]

SHAPES = ("island-chain", "disc", "gaussian")  # island_chain_height, disc_height, gaussian_height

ISLAND_CHAIN = (
    # (x km, y km, height above the sea floor m, basal radius km)
    (-150.0, 110.0, 5200.0, 42.0),
    (-80.0, 60.0, 4700.0, 36.0),
    (-15.0, 12.0, 4100.0, 30.0),
    (45.0, -35.0, 3300.0, 24.0),
    (100.0, -80.0, 2400.0, 18.0),
)
"""Invented volcanic edifices of the demo chain, relative to the grid centre."""


def empty_grid(rows: int, columns: int, spacing: float) -> xr.DataArray:
    """Zeros on a ``(rows, columns)`` grid of cell size *spacing* (m) centred on 0.

    Examples
    --------
    >>> g = empty_grid(4, 6, 1000.0)
    >>> g.shape, float(g.x[0]), float(g.x[-1])
    ((4, 6), -2500.0, 2500.0)
    """
    if rows < 4 or columns < 4:
        raise InputError(f"grid must have at least 4 x 4 cells, got {rows} x {columns}")
    check_number("grid spacing", spacing, unit="m", minimum=0.0, strict=True)
    y = (np.arange(rows) - (rows - 1) / 2.0) * spacing
    x = (np.arange(columns) - (columns - 1) / 2.0) * spacing
    grid = xr.DataArray(np.zeros((rows, columns)), dims=("y", "x"), coords={"y": y, "x": x})
    grid["y"].attrs = {"units": "m", "axis": "Y"}
    grid["x"].attrs = {"units": "m", "axis": "X"}
    return grid


Points = tuple[np.ndarray, np.ndarray, float, float]
"""Metric cell centres ``(X, Y)`` (2-D, m) and cell size ``(dy, dx)`` (m)."""


def grid_points(grid: xr.DataArray) -> Points:
    """Cell centres and size of a metric grid with 1-D coordinates (see :data:`Points`)."""
    x = grid["x"].values.astype(np.float64)
    y = grid["y"].values.astype(np.float64)
    xx, yy = np.meshgrid(x, y)
    return xx, yy, float(abs(y[1] - y[0])), float(abs(x[1] - x[0]))


def _offsets(points: Points, cx: float, cy: float) -> tuple[np.ndarray, np.ndarray]:
    return points[0] - cx, points[1] - cy


def disc_height(
    grid: xr.DataArray,
    radius: float,
    height: float,
    cx: float = 0.0,
    cy: float = 0.0,
    supersample: int = 8,
    points: Points | None = None,
) -> xr.DataArray:
    """A flat-topped disc, with each cell weighted by the share of it inside the disc.

    Parameters
    ----------
    grid : xarray.DataArray
        Template grid (coordinates in m unless *points* is given).
    radius, height : float
        Disc radius and height (m).
    cx, cy : float, default 0
        Centre (m).
    supersample : int, default 8
        Sub-cells per cell side for the area fraction.
    points : tuple, optional
        Metric cell centres and size (:data:`Points`), for grids whose coordinates
        are not metres (a geographic grid projected locally).
    """
    points = grid_points(grid) if points is None else points
    ox, oy = _offsets(points, cx, cy)
    dy, dx = points[2], points[3]
    sub = (np.arange(supersample) + 0.5) / supersample - 0.5
    inside = np.zeros(grid.shape)
    with np.errstate(over="ignore"):  # a radius beyond 1e154 m covers every cell
        radius2 = np.float64(radius) ** 2
    for sy in sub * dy:
        r2y = (oy + sy) ** 2
        for sx in sub * dx:
            inside += ((ox + sx) ** 2 + r2y) <= radius2
    return grid.copy(data=height * inside / supersample**2)


def gaussian_height(
    grid: xr.DataArray,
    width: float,
    height: float,
    cx: float = 0.0,
    cy: float = 0.0,
    points: Points | None = None,
) -> xr.DataArray:
    """h = height exp(-r² / (2 width²)) centred on (cx, cy) (all in m); *points* as in
    :func:`disc_height`."""
    ox, oy = _offsets(grid_points(grid) if points is None else points, cx, cy)
    with np.errstate(over="ignore"):  # scaled first: no 0/0 for a width of 1e-320 m
        r2 = (ox / width) ** 2 + (oy / width) ** 2  # nor an overflow of width² beyond 1e154 m
    return grid.copy(data=height * np.exp(-r2 / 2.0))


def island_chain_height(grid: xr.DataArray, points: Points | None = None) -> xr.DataArray:
    """Height above the sea floor (m) of the invented demo island chain.

    Each edifice is a cone with rounded flanks, ``h (1 - (r/R)^2)^1.5`` inside its
    basal radius R; positions are relative to the grid centre (*points* as in
    :func:`disc_height`).
    """
    points = grid_points(grid) if points is None else points
    total = np.zeros(grid.shape)
    for x_km, y_km, height, radius_km in ISLAND_CHAIN:
        ox, oy = _offsets(points, x_km * 1e3, y_km * 1e3)
        s = 1.0 - (ox**2 + oy**2) / (radius_km * 1e3) ** 2
        np.maximum(total, height * np.clip(s, 0.0, None) ** 1.5, out=total)
    return grid.copy(data=total)
