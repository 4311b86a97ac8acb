"""NetCDF grids in and out (CF-1.8 style)."""

from __future__ import annotations

import threading
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.errors import InputError
from gridflex.io.atomic import atomic_path
from gridflex.io.gridmapping import cf_grid_mapping
from gridflex.validation import check_path_text

__all__ = [
    "NETCDF_LOCK",
    "OUTPUT_DTYPES",
    "as_output_dtype",
    "input_file",
    "read_result",
    "write_netcdf",
]

OUTPUT_DTYPES = ("float64", "float32")
"""Precisions the grids of a result may be written in."""

NETCDF_LOCK = threading.RLock()
"""Held by every NetCDF read and write of gridflex: the netCDF-C and HDF5 libraries are
not safe to call from several threads at once (dask's threaded scheduler runs tasks in
threads), and a concurrent open/close has crashed the interpreter."""


def input_file(path: str | Path) -> Path:
    """*path* as a :class:`~pathlib.Path` if it names an existing file.

    Raises
    ------
    InputError
        A NUL character in the path, a folder instead of a file, or nothing there.
    """
    path = Path(check_path_text("input file", path))
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a file; give the grid file inside it")
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    return path


def read_result(path: str | Path) -> xr.Dataset:
    """Read a result written by :func:`write_netcdf` back into memory on ``("y", "x")``.

    ``lat``/``lon`` coordinates become ``y``/``x`` (in degrees); the grid-mapping
    variable is dropped and its WKT kept as ``attrs["crs_wkt"]``.

    Raises
    ------
    InputError
        Missing or unreadable file.
    """
    path = input_file(path)
    try:
        with NETCDF_LOCK, xr.open_dataset(path, engine="netcdf4") as ds:
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


def as_output_dtype(ds: xr.Dataset, dtype: str) -> xr.Dataset:
    """*ds* with every floating-point data variable in *dtype* (coordinates untouched).

    Raises
    ------
    InputError
        *dtype* is not one of :data:`OUTPUT_DTYPES`.
    """
    if dtype not in OUTPUT_DTYPES:
        raise InputError(f"dtype must be one of {OUTPUT_DTYPES}, got {dtype!r}")
    if dtype == "float64":
        return ds
    out = ds.copy()
    for name, var in ds.data_vars.items():
        if np.issubdtype(var.dtype, np.floating):
            out[name] = var.astype(dtype, keep_attrs=True)
    return out


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
        out["lat"].attrs = {
            "units": "degrees_north",
            "standard_name": "latitude",
            "long_name": "latitude",
            "axis": "Y",
        }
        out["lon"].attrs = {
            "units": "degrees_east",
            "standard_name": "longitude",
            "long_name": "longitude",
            "axis": "X",
        }
    else:
        units = "m"
        out["y"].attrs = {
            "units": units,
            "standard_name": "projection_y_coordinate",
            "long_name": "y (northing)",
            "axis": "Y",
        }
        out["x"].attrs = {
            "units": units,
            "standard_name": "projection_x_coordinate",
            "long_name": "x (easting)",
            "axis": "X",
        }
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
    with NETCDF_LOCK, atomic_path(path, overwrite, inputs) as tmp:
        out.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
    return Path(path)
