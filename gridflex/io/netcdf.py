"""NetCDF grids in and out (CF-1.8 style)."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from ..errors import InputError
from ..units import DIMENSIONS, unit_factor
from .atomic import atomic_path
from .gridmapping import cf_grid_mapping

__all__ = ["read_grid", "read_result", "write_netcdf"]

_GEOGRAPHIC_UNITS = ("degree", "degrees", "degrees_east", "degrees_north", "degree_east",
                     "degree_north", "degrees_e", "degrees_n")


def _coordinate_metres(da: xr.DataArray, dim: str, where: str) -> np.ndarray:
    if dim not in da.coords:
        raise InputError(f"{where}: dimension {dim!r} has no coordinate values")
    coord = da[dim]
    units = str(coord.attrs.get("units", "m")).strip()
    if units.lower() in _GEOGRAPHIC_UNITS:
        raise InputError(
            f"{where}: coordinate {dim!r} is in {units!r}; project the grid to metres "
            "(a projected coordinate system) first"
        )
    factor = unit_factor(units, "length", f"{where}: coordinate {dim!r}")
    return np.asarray(coord.values, dtype=np.float64) * factor


def read_grid(path: str | Path, variable: str, dimension: str | None = None) -> xr.DataArray:
    """Read one 2-D grid from a NetCDF file into memory, on dims ``("y", "x")`` in metres.

    Parameters
    ----------
    path : str or pathlib.Path
        NetCDF file.
    variable : str
        Name of the 2-D variable; its first dim is taken as y, its second as x.
    dimension : str, optional
        Unit dimension the values must have (e.g. ``"length"``, ``"pressure"``,
        see :data:`gridflex.units.DIMENSIONS`); values are converted to SI. A
        variable without a ``units`` attribute is taken to be in SI.

    Returns
    -------
    xarray.DataArray
        float64 values, coordinates ``y`` and ``x`` in metres.

    Raises
    ------
    InputError
        Missing or unreadable file, missing variable, not 2-D, coordinates in
        degrees or an unknown unit.
    """
    path = Path(path)
    where = f"{path}: variable {variable!r}"
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    try:
        with xr.open_dataset(path, engine="netcdf4", decode_times=False) as ds:
            if variable not in ds.variables:
                names = ", ".join(sorted(str(v) for v in ds.data_vars)) or "none"
                raise InputError(f"{path}: no variable {variable!r}; variables are {names}")
            da = ds[variable].load()
    except InputError:
        raise
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc})") from exc
    if da.ndim != 2:
        raise InputError(f"{where}: expected a 2-D grid, got dims {da.dims!r}")
    ydim, xdim = (str(d) for d in da.dims)
    y = _coordinate_metres(da, ydim, where)
    x = _coordinate_metres(da, xdim, where)
    values = np.asarray(da.values, dtype=np.float64)
    if dimension is not None:
        default = next(iter(DIMENSIONS[dimension]))
        units = str(da.attrs.get("units", default))
        values = values * unit_factor(units, dimension, where)
    out = xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name=variable)
    out.attrs = {k: v for k, v in da.attrs.items() if k not in ("units", "_FillValue")}
    out["y"].attrs = {"units": "m", "axis": "Y"}
    out["x"].attrs = {"units": "m", "axis": "X"}
    return out


def read_result(path: str | Path) -> xr.Dataset:
    """Read a result written by :func:`write_netcdf` back into memory on ``("y", "x")``.

    ``lat``/``lon`` coordinates become ``y``/``x`` (in degrees); the grid-mapping
    variable is dropped and its WKT kept as ``attrs["crs_wkt"]``.

    Raises
    ------
    InputError
        Missing or unreadable file.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    try:
        with xr.open_dataset(path, engine="netcdf4") as ds:
            ds = ds.load()
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc})") from exc
    if "crs" in ds.variables:
        ds.attrs["crs_wkt"] = str(ds["crs"].attrs.get("crs_wkt", ""))
        ds = ds.drop_vars("crs")
    rename = {old: new for old, new in (("lat", "y"), ("lon", "x")) if old in ds.dims}
    ds = ds.rename(rename)
    if not {"y", "x"} <= set(ds.dims):
        raise InputError(f"{path}: not a gridflex result: no (y, x) or (lat, lon) grid")
    return ds


def _netcdf_attr(value: Any) -> Any:
    if isinstance(value, (bool, np.bool_)):
        return int(value)
    if value is None:
        return ""
    if isinstance(value, (str, int, float, np.integer, np.floating, np.ndarray)):
        return value
    if isinstance(value, (list, tuple)):
        return np.asarray(value)
    return str(value)


def _georeference(ds: xr.Dataset, crs: CRS) -> xr.Dataset:
    """Add a CF grid-mapping variable ``crs`` and CF coordinate attributes."""
    out = ds.copy(deep=False)
    out["crs"] = xr.DataArray(np.int32(0), attrs=cf_grid_mapping(crs))
    for name, var in out.data_vars.items():
        if name != "crs" and {"y", "x"} <= set(var.dims):
            var.attrs["grid_mapping"] = "crs"
    if crs.is_geographic:
        out = out.rename({"y": "lat", "x": "lon"})
        out["lat"].attrs = {"units": "degrees_north", "standard_name": "latitude",
                            "long_name": "latitude", "axis": "Y"}
        out["lon"].attrs = {"units": "degrees_east", "standard_name": "longitude",
                            "long_name": "longitude", "axis": "X"}
    else:
        units = "m"
        out["y"].attrs = {"units": units, "standard_name": "projection_y_coordinate",
                          "long_name": "y (northing)", "axis": "Y"}
        out["x"].attrs = {"units": units, "standard_name": "projection_x_coordinate",
                          "long_name": "x (easting)", "axis": "X"}
    return out


def write_netcdf(
    ds: xr.Dataset,
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    crs: CRS | None = None,
) -> Path:
    """Write *ds* to a compressed NetCDF-4 file atomically, CF-1.8 style.

    Parameters
    ----------
    ds : xarray.Dataset
        Data on dims ``("y", "x")`` (and others); attributes that NetCDF cannot
        store (bool, None, dict) are converted to numbers or strings.
    path : str or pathlib.Path
        Output file.
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files that must never be overwritten.
    crs : rasterio.crs.CRS, optional
        Coordinate reference system of ``x`` and ``y``: adds the CF grid-mapping
        variable ``crs`` (with ``crs_wkt``) and, for a geographic CRS, writes the
        coordinates as ``lat``/``lon`` in degrees.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    out = ds if crs is None else _georeference(ds, crs)
    out = out.copy(deep=False)
    out.attrs = {k: _netcdf_attr(v) for k, v in out.attrs.items()}
    out.attrs.setdefault("Conventions", "CF-1.8")
    for name in out.variables:
        out[name].attrs = {k: _netcdf_attr(v) for k, v in out[name].attrs.items()}
    encoding = {
        name: {"zlib": True, "complevel": 4}
        for name, var in out.data_vars.items()
        if np.issubdtype(var.dtype, np.number) and var.ndim >= 1
    }
    with atomic_path(path, overwrite, inputs) as tmp:
        out.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
    return Path(path)
