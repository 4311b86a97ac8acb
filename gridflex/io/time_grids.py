"""Grids through time in NetCDF: reading ice histories, a CF time axis for outputs.

Inside gridflex a time is a number of Julian years (365.25 days) after a reference
date, negative before it (1950-01-01 by default, the "present" of years before
present). Written files carry a CF time axis, ``days since <reference>`` in the
proleptic Gregorian calendar (days = years x 365.25), and the same times in years
as the auxiliary coordinate ``time_years``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from gridflex.constants import DAYS_PER_YEAR
from gridflex.errors import InputError
from gridflex.gis.geometry import GridGeometry
from gridflex.io.netcdf import NETCDF_LOCK
from gridflex.units import DIMENSIONS, unit_factor

__all__ = [
    "DAYS_PER_YEAR",
    "DEFAULT_TIME_REFERENCE",
    "cf_time_axis",
    "read_history",
    "read_series",
    "years_from_cf",
]

DEFAULT_TIME_REFERENCE = "1950-01-01"
CALENDAR = "proleptic_gregorian"


def years_from_cf(
    values: np.ndarray, units: str | None, calendar: str | None, reference: str, where: str
) -> np.ndarray:
    """Times of a file in years after *reference*.

    Parameters
    ----------
    values : numpy.ndarray
        Raw numbers of the time variable.
    units : str or None
        Its ``units``: ``"<unit> since <date>"`` (CF), a plain year unit (``yr``,
        ``year``, ``years``, ``kyr``, ``ka``) or None (years).
    calendar : str or None
        CF calendar (``standard`` if None).
    reference : str
        Date that is year 0, e.g. ``"1950-01-01"``.
    where : str
        File and variable, for messages.
    """
    raw = np.asarray(values, dtype=np.float64)
    if units is None or not str(units).strip():
        return raw
    units = str(units).strip()
    if " since " not in units:
        factors = DIMENSIONS["time"]
        if units not in factors:
            raise InputError(
                f"{where}: time unit {units!r} is not understood; use years "
                f"({', '.join(factors)}) or a CF unit like 'days since 1950-01-01'"
            )
        return raw * factors[units]
    import cftime

    calendar = calendar or "standard"
    try:
        dates = cftime.num2date(raw, units, calendar=calendar, only_use_cftime_datetimes=True)
        days = cftime.date2num(dates, f"days since {reference}", calendar=calendar)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{where}: cannot convert the time axis {units!r} ({exc})") from exc
    return np.asarray(days, dtype=np.float64) / DAYS_PER_YEAR


def _metric_axis(da: xr.DataArray, dim: str, where: str) -> np.ndarray:
    """A 1-D projected coordinate in metres (m or km in the file; degrees refused)."""
    if dim not in da.coords:
        raise InputError(f"{where}: dimension {dim!r} has no coordinate values")
    coord = da[dim]
    units = str(coord.attrs.get("units", "m")).strip() or "m"
    if units.lower().startswith("degree"):
        raise InputError(
            f"{where}: coordinate {dim!r} is in {units!r}; an ice history must be on a "
            "projected grid in metres (project it first)"
        )
    values = np.asarray(coord.values, dtype=np.float64)
    return values * unit_factor(units, "length", f"{where}: coordinate {dim!r}")


def _open(path: Path, variable: str) -> tuple[xr.DataArray, xr.Dataset]:
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    try:
        ds = xr.open_dataset(path, engine="netcdf4", decode_times=False)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc})") from exc
    if variable not in ds.variables:
        names = ", ".join(sorted(str(v) for v in ds.data_vars)) or "none"
        ds.close()
        raise InputError(f"{path}: no variable {variable!r}; variables are {names}")
    return ds[variable].load(), ds


def _time_years(da: xr.DataArray, ds: xr.Dataset, reference: str, where: str) -> np.ndarray:
    tdim = str(da.dims[0])
    if tdim not in ds.variables:
        raise InputError(f"{where}: dimension {tdim!r} has no time values")
    tvar = ds[tdim]
    return years_from_cf(
        tvar.values, tvar.attrs.get("units"), tvar.attrs.get("calendar"), reference, where
    )


def _read_timed(
    path: Path, variable: str, reference: str, ndim: int, expected: str
) -> tuple[xr.DataArray, np.ndarray, str]:
    """*variable* of *path* (loaded), its times in years, and ``"file: variable"``.

    The variable must have *ndim* dims, time first; *expected* says so in messages.
    """
    where = f"{path}: variable {variable!r}"
    with NETCDF_LOCK:
        da, ds = _open(path, variable)
        with ds:
            if da.ndim != ndim:
                raise InputError(f"{where}: expected {expected}, got dims {da.dims!r}")
            times = _time_years(da, ds, reference, where)
    return da, times, where


def read_history(
    path: str | Path, variable: str, reference: str = DEFAULT_TIME_REFERENCE
) -> xr.DataArray:
    """Read a (time, y, x) variable, e.g. ice thickness (m), with time in years.

    The first dimension is time, the other two y and x (metres; converted from km).

    Returns
    -------
    xarray.DataArray
        dims ``("time", "y", "x")``, time in years after *reference*, float64.

    Raises
    ------
    InputError
        Missing file or variable, not 3-D, unknown units.
    """
    da, times, where = _read_timed(Path(path), variable, reference, 3, "(time, y, x)")
    ydim, xdim = (str(d) for d in da.dims[1:])
    y = _metric_axis(da, ydim, where)
    x = _metric_axis(da, xdim, where)
    try:  # exactly even cell centres, also for coordinates stored in float32
        y, x = GridGeometry.from_coords(y, x, None).coords()
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc
    out = xr.DataArray(
        np.asarray(da.values, dtype=np.float64),
        dims=("time", "y", "x"),
        coords={"time": times, "y": y, "x": x},
        name=variable,
    )
    out.attrs = {k: v for k, v in da.attrs.items() if k not in ("_FillValue",)}
    return out


def read_series(
    path: str | Path, variable: str, reference: str = DEFAULT_TIME_REFERENCE
) -> xr.DataArray:
    """Read a 1-D time series (e.g. sea level, m) with its time in years."""
    da, times, _ = _read_timed(Path(path), variable, reference, 1, "a series along time")
    return xr.DataArray(
        np.asarray(da.values, dtype=np.float64),
        dims=("time",),
        coords={"time": times},
        name=variable,
    )


def cf_time_axis(ds: xr.Dataset, reference: str = DEFAULT_TIME_REFERENCE) -> xr.Dataset:
    """*ds* with its ``time`` in years replaced by a CF time axis (see module notes)."""
    years = np.asarray(ds["time"].values, dtype=np.float64)
    out = ds.assign_coords(
        time=(
            "time",
            years * DAYS_PER_YEAR,
            {
                "units": f"days since {reference} 00:00:00",
                "calendar": CALENDAR,
                "standard_name": "time",
                "axis": "T",
                "long_name": "time",
            },
        ),
    )
    out = out.assign_coords(
        time_years=(
            "time",
            years,
            {
                "units": "yr",
                "long_name": f"time in Julian years (365.25 days) after {reference}",
            },
        )
    )
    for name in ("time", "time_years"):
        out[name].encoding["_FillValue"] = None  # coordinates carry no fill value (CF)
    return out
