"""Values along a straight line across a result grid."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.memory import check_memory
from gridflex.validation import check_integer, check_number

__all__ = [
    "EARTH_RADIUS",
    "STEP_AXES",
    "at_step",
    "check_profile_ends",
    "check_profile_point",
    "one_column_per_step",
    "profile_ends",
    "sample_profile",
]

EARTH_RADIUS = 6_371_008.8
"""Mean Earth radius (m) for distances along geographic profiles (IUGG; from memory)."""


def _is_geographic(ds: xr.Dataset) -> bool:
    units = str(ds["x"].attrs.get("units", "")).lower()
    return units.startswith("degree")


def _wrap_into(lon: float, grid_lon: np.ndarray) -> float:
    """*lon* moved by whole turns into the span of the grid's longitudes, if that helps."""
    west = float(np.min(grid_lon))
    wrapped = west + (lon - west) % 360.0
    return wrapped if wrapped <= float(np.max(grid_lon)) else lon


STEP_AXES = ("time", "stage", "step")
"""Axes of results through time: a history's ``time``, a staged basin's ``stage``, a
backstrip's ``step``. Any other axis besides ``y`` and ``x`` (e.g. a basin's
``horizon``) is kept whole."""


def at_step(ds: xr.Dataset, value: float, where: str) -> xr.Dataset:
    """*ds* at the step of its one time, stage or step axis nearest *value*.

    The steps are labelled by ``<axis>_years`` (a history's times in years), else the
    ``age`` coordinate (a basin's stages, years before present), else the axis' own
    numbers. Other axes (a basin's ``horizon``) are kept.

    Raises
    ------
    InputError
        *ds* has no time, stage or step axis, or more than one.
    """
    dims = {str(d) for v in ds.data_vars.values() for d in v.dims}
    axes = [a for a in STEP_AXES if a in dims]
    if len(axes) != 1:
        others = sorted(dims - {"y", "x"})
        raise InputError(
            f"{where}: --at needs exactly one axis of {', '.join(STEP_AXES)}, found {others}"
        )
    axis = axes[0]
    index = int(np.argmin(np.abs(_step_values(ds, axis)[1] - value)))
    return ds.isel({axis: index})


def _step_values(ds: xr.Dataset | xr.DataArray, axis: str) -> tuple[str, np.ndarray]:
    """A name and the numbers labelling the steps of *axis*: ``<axis>_years`` when
    present (times of a history in years, named *axis*), else an ``age`` coordinate on
    *axis* (a basin's stages, years before present), else the axis' own numeric
    coordinate, else the step index (the first of these whose values all differ)."""
    for name, label in ((f"{axis}_years", axis), ("age", "age"), (axis, axis)):
        if name in ds.coords and ds[name].dims == (axis,):
            try:
                values = np.asarray(ds[name].values, dtype=np.float64)
            except (TypeError, ValueError):
                continue  # dates
            if np.unique(values).size == values.size:  # labels that tell the steps apart
                return label, values
    return axis, np.arange(ds.sizes[axis], dtype=np.float64)


def one_column_per_step(profile: xr.Dataset) -> xr.Dataset:
    """*profile* with each variable that has axes besides ``distance`` (time, stage,
    step, horizon) split into one variable per combination of their steps, named
    ``name[axis=value]...`` (a basin's stages by their age): a table for CSV.
    """
    out = xr.Dataset(coords={k: v for k, v in profile.coords.items() if v.dims == ("distance",)})
    for name, var in profile.data_vars.items():
        others = [str(d) for d in var.dims if d != "distance"]
        if not others:
            out[name] = var
            continue
        labels = [_step_values(var, axis) for axis in others]
        for index in np.ndindex(*(var.sizes[axis] for axis in others)):
            column = var.isel(dict(zip(others, index, strict=True)), drop=True)
            key = "".join(
                f"[{label}={values[i]:g}]" for (label, values), i in zip(labels, index, strict=True)
            )
            out[f"{name}{key}"] = column.transpose("distance").assign_attrs(var.attrs)
    return out


def _distances(xs: np.ndarray, ys: np.ndarray, geographic: bool) -> np.ndarray:
    if not geographic:
        return np.hypot(xs - xs[0], ys - ys[0])
    lon, lat = np.radians(xs), np.radians(ys)
    # haversine distance from the start point on a sphere
    a = (
        np.sin((lat - lat[0]) / 2) ** 2
        + np.cos(lat[0]) * np.cos(lat) * np.sin((lon - lon[0]) / 2) ** 2
    )
    return 2 * EARTH_RADIUS * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))


PROFILE_SAMPLE_WORDS = 8
"""float64 values per profile point and sampled step besides the variables (positions,
distances, interpolation weights), for the memory estimate before sampling."""


def check_profile_point(name: str, value: Any) -> tuple[float, float]:
    """One end of a profile as ``(x, y)``: a pair of finite numbers (not booleans).

    Raises
    ------
    InputError
        Naming *name* and the value.
    """
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence) or len(value) != 2:
        raise InputError(f"{name} must be a pair [x, y] of numbers, got {value!r}")
    x, y = (check_number(f"{name} {axis}", v) for axis, v in zip("xy", value, strict=True))
    return x, y


def check_profile_ends(
    start: Any, end: Any, names: tuple[str, str] = ("start", "end")
) -> tuple[tuple[float, float], tuple[float, float]]:
    """The two ends of a profile as ``((x0, y0), (x1, y1))``: each a pair of finite
    numbers (not booleans), and the two ends apart.

    Parameters
    ----------
    start, end : object
        The ends as given.
    names : tuple of str
        How the two ends are called in messages (e.g. ``"[output] profile_start"``).

    Raises
    ------
    InputError
        Naming the end and its value.
    """
    ends = [check_profile_point(name, v) for name, v in zip(names, (start, end), strict=True)]
    if ends[0] == ends[1]:
        raise InputError(
            f"{names[0]} and {names[1]} are the same point {list(ends[0])!r}: "
            "a profile needs two different ends"
        )
    return ends[0], ends[1]


def profile_ends(
    ds: xr.Dataset, start: Sequence[float], end: Sequence[float]
) -> tuple[float, float, float, float]:
    """``(x0, y0, x1, y1)`` of a profile on *ds*'s grid, checked to lie on it.

    Only the coordinates ``x`` and ``y`` of *ds* are used (a Dataset of coordinates
    alone will do, e.g. to check a line before the grid is computed); longitudes are
    put in the grid's convention (0-360 or ±180).

    Raises
    ------
    InputError
        Ends that are not two numbers each, the same point twice, or an end outside
        the grid.
    """
    (x0, y0), (x1, y1) = check_profile_ends(start, end, ("profile start", "profile end"))
    xs_grid, ys_grid = ds["x"].values, ds["y"].values
    if _is_geographic(ds):  # longitudes in the grid's convention (0-360 or ±180)
        x0, x1 = _wrap_into(x0, xs_grid), _wrap_into(x1, xs_grid)
    for name, (px, py) in (("start", (x0, y0)), ("end", (x1, y1))):
        if not (min(xs_grid) <= px <= max(xs_grid) and min(ys_grid) <= py <= max(ys_grid)):
            raise InputError(
                f"profile {name} ({px:g}, {py:g}) lies outside the grid "
                f"(x {min(xs_grid):g} to {max(xs_grid):g}, y {min(ys_grid):g} to {max(ys_grid):g})"
            )
    return x0, y0, x1, y1


def sample_profile(
    ds: xr.Dataset,
    start: Sequence[float],
    end: Sequence[float],
    samples: int | None = None,
    variables: Sequence[str] | None = None,
) -> xr.Dataset:
    """Sample grid variables along the straight line from *start* to *end*.

    Parameters
    ----------
    ds : xarray.Dataset
        Result on dims ``("y", "x")``; coordinates in metres or, for a geographic
        grid, in degrees (``units`` starting with "degree").
    start, end : sequence of two floats
        ``(x, y)`` of the ends, in the grid's coordinates (m, or lon/lat degrees).
    samples : int, optional
        Number of points; default about two per cell crossed.
    variables : sequence of str, optional
        Variables to sample; default every data variable on ``("y", "x")``.

    Returns
    -------
    xarray.Dataset
        On dim ``distance`` (m from *start*; great-circle for geographic grids),
        with coordinates ``x`` and ``y`` of each point and the sampled variables
        (bilinear interpolation).

    Raises
    ------
    InputError
        Ends that are not two numbers each, or a line that leaves the grid.
    """
    x0, y0, x1, y1 = profile_ends(ds, start, end)
    xs_grid, ys_grid = ds["x"].values, ds["y"].values
    if samples is None:
        dx = abs(float(xs_grid[1] - xs_grid[0]))
        dy = abs(float(ys_grid[1] - ys_grid[0]))
        samples = max(int(2 * max(abs(x1 - x0) / dx, abs(y1 - y0) / dy)) + 1, 2)
    samples = check_integer("samples", samples, minimum=2)
    # every grid, also with a time, stage, step or horizon axis before (y, x)
    grids = [str(n) for n, v in ds.data_vars.items() if {"y", "x"} <= set(v.dims)]
    if variables is None:
        variables = grids
    missing = [v for v in variables if v not in grids]
    if missing:
        what = "no variable" if missing[0] not in ds else "not a grid on (y, x):"
        raise InputError(f"{what} {missing[0]!r} to sample; the grids are {', '.join(grids)}")
    steps = sum(int(ds[v].size // (ds.sizes["y"] * ds.sizes["x"])) for v in variables)
    check_memory(
        8 * samples * (steps + PROFILE_SAMPLE_WORDS),
        f"a profile of {samples} points over {steps} grid(s)",
        advice="ask for fewer samples",
    )
    t = np.linspace(0.0, 1.0, samples)
    xs, ys = x0 + t * (x1 - x0), y0 + t * (y1 - y0)
    distance = _distances(xs, ys, _is_geographic(ds))
    where = {"x": xr.DataArray(xs, dims="distance"), "y": xr.DataArray(ys, dims="distance")}
    out = ds[list(variables)].interp(where, method="linear")
    out = out.assign_coords(distance=("distance", distance), x=("distance", xs), y=("distance", ys))
    out["distance"].attrs = {"units": "m", "long_name": "distance along the profile"}
    for axis in ("x", "y"):  # the working grid is in metres unless it says otherwise
        out[axis].attrs = {"units": "m", **ds[axis].attrs}
    for name in variables:
        out[name].attrs = dict(ds[name].attrs)
    return out
