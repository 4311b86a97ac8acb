"""Georeferenced raster files: GeoTIFF (and whatever GDAL reads) and CF NetCDF in, GeoTIFF out.

Every reader returns the same thing: a float64 :class:`xarray.DataArray` on dims
``("y", "x")`` with 1-D cell-centre coordinates in the units of its CRS (degrees
for geographic grids, metres for projected ones), missing values as NaN, and the
CRS as WKT in ``attrs["crs_wkt"]`` (``""`` when unknown).
:func:`gridflex.gis.geometry.geometry_of`
turns that back into a :class:`gridflex.gis.geometry.GridGeometry`.

Missing values: nodata (GeoTIFF) and ``_FillValue``/``missing_value`` (NetCDF)
become NaN here; what NaN means for a given layer (a load of zero, or an error)
is decided by the caller. A layer with no valid value at all is an error here.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import rasterio
import xarray as xr
from rasterio.crs import CRS
from rasterio.errors import RasterioError

from gridflex.errors import InputError
from gridflex.gis.geometry import GridGeometry, even_step, parse_crs
from gridflex.io.atomic import atomic_path
from gridflex.io.netcdf import NETCDF_LOCK
from gridflex.memory import check_memory
from gridflex.units import unit_factor

__all__ = [
    "LAYER_MISSING_POLICIES",
    "MISSING_POLICIES",
    "NETCDF_SUFFIXES",
    "read_raster",
    "write_geotiff",
]

log = logging.getLogger(__name__)

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
"""File name endings read through xarray/netCDF4 rather than GDAL."""

MISSING_POLICIES = ("error", "zero", "keep")
"""What nodata/NaN cells of an input grid mean: an error, no load (0), or no data (NaN)."""
LAYER_MISSING_POLICIES = MISSING_POLICIES[:2]
"""The policies a scenario offers for a load layer or an ice grid (``"keep"`` is internal)."""

_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")
_TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")
_DEGREE_UNITS = {
    "degree",
    "degrees",
    "degrees_east",
    "degrees_north",
    "degree_east",
    "degree_north",
    "degrees_e",
    "degrees_n",
    "degree_e",
    "degree_n",
    "deg",
}
_X_NAMES = {"x", "lon", "longitude", "easting", "projection_x_coordinate"}
_Y_NAMES = {"y", "lat", "latitude", "northing", "projection_y_coordinate"}


def _is_netcdf(path: Path) -> bool:
    """NetCDF by its first bytes; a TIFF by its first bytes is not; else by the name ending."""
    with open(path, "rb") as handle:
        head = handle.read(8)
    if any(head.startswith(magic) for magic in _NETCDF_MAGIC):
        return True
    if head[:4] in _TIFF_MAGIC:
        return False
    return path.suffix.lower() in NETCDF_SUFFIXES


def _axis_coords(y: np.ndarray, x: np.ndarray, crs: CRS | None) -> dict[str, Any]:
    if crs is not None and crs.is_geographic:
        yattrs = {"units": "degrees_north", "standard_name": "latitude"}
        xattrs = {"units": "degrees_east", "standard_name": "longitude"}
    else:
        unit = "m"
        if crs is not None:
            name, factor = crs.linear_units_factor
            unit = "m" if factor == 1.0 else name
        yattrs = {"units": unit, "standard_name": "projection_y_coordinate"}
        xattrs = {"units": unit, "standard_name": "projection_x_coordinate"}
    return {"y": ("y", y, yattrs), "x": ("x", x, xattrs)}


def _finish(
    path: Path,
    name: str,
    values: np.ndarray,
    y: np.ndarray,
    x: np.ndarray,
    crs: CRS | None,
    units: str | None,
    extra: dict[str, Any] | None = None,
) -> xr.DataArray:
    values = np.asarray(values, dtype=np.float64)
    if not np.any(np.isfinite(values)):
        raise InputError(f"{path}: {name!r} has no valid values (every cell is nodata or NaN)")
    attrs: dict[str, Any] = {"crs_wkt": "" if crs is None else crs.to_wkt()}
    if units:
        attrs["units"] = str(units)
    attrs.update(extra or {})
    attrs["source_file"] = str(path)
    return xr.DataArray(
        values, dims=("y", "x"), coords=_axis_coords(y, x, crs), name=name, attrs=attrs
    )


# --- GDAL ------------------------------------------------------------------------------------


def _band_index(src: Any, path: Path, variable: str | None) -> tuple[int, str]:
    names = [d or f"band{i + 1}" for i, d in enumerate(src.descriptions)]
    if variable is None:
        if src.count != 1:
            raise InputError(
                f"{path}: has {src.count} bands; choose one with variable= "
                f"({', '.join(map(repr, names))})"
            )
        return 1, names[0]
    for i, name in enumerate(names):
        if variable in (name, f"band{i + 1}", str(i + 1)):
            return i + 1, name
    raise InputError(f"{path}: no band {variable!r}; bands are {', '.join(map(repr, names))}")


def _read_gdal(path: Path, variable: str | None) -> xr.DataArray:
    try:
        with rasterio.Env(), rasterio.open(path) as src:
            band, name = _band_index(src, path, variable)
            t = src.transform
            if t.b != 0.0 or t.d != 0.0:
                raise InputError(
                    f"{path}: the grid is rotated or sheared (transform {tuple(t)[:6]}); "
                    "warp it to a north-up grid first (e.g. gdalwarp)"
                )
            if src.crs is None and t.is_identity:
                raise InputError(f"{path}: has no georeferencing (no CRS and no geotransform)")
            crs = None
            if src.crs is not None:
                crs = parse_crs(src.crs, f"{path}: CRS")
            # the band as read, its float64 copy and the mask
            check_memory(src.height * src.width * 17.0, f"{path}: reading band {band}")
            data = src.read(band, masked=True)
            values = np.ma.filled(data.astype(np.float64), np.nan)
            scale, offset = src.scales[band - 1], src.offsets[band - 1]
            if scale != 1.0 or offset != 0.0:
                values = values * scale + offset
            units = src.units[band - 1] or src.tags(band).get("units")
            long_name = src.tags(band).get("long_name")
    except InputError:
        raise
    except (RasterioError, OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read as a raster ({exc})") from exc
    geometry = GridGeometry(crs, t, values.shape)
    y, x = geometry.coords()
    extra = {"long_name": long_name} if long_name else {}
    return _finish(path, name, values, y, x, crs, units, extra)


# --- NetCDF ----------------------------------------------------------------------------------


def _role(coord: xr.DataArray, dim: str) -> str | None:
    """'x', 'y' or None from CF attributes and the name."""
    attrs = coord.attrs
    axis = str(attrs.get("axis", "")).upper()
    std = str(attrs.get("standard_name", "")).lower()
    units = str(attrs.get("units", "")).lower()
    if (
        axis == "X"
        or std in ("longitude", "projection_x_coordinate", "grid_longitude")
        or units in ("degrees_east", "degree_east", "degrees_e", "degree_e")
    ):
        return "x"
    if (
        axis == "Y"
        or std in ("latitude", "projection_y_coordinate", "grid_latitude")
        or units in ("degrees_north", "degree_north", "degrees_n", "degree_n")
    ):
        return "y"
    if dim.lower() in _X_NAMES:
        return "x"
    if dim.lower() in _Y_NAMES:
        return "y"
    return None


def _in_degrees(coord: xr.DataArray, dim: str) -> bool:
    """Coordinate in degrees: by its units, its standard name, or a lat/lon name without units."""
    units = str(coord.attrs.get("units", "")).strip().lower()
    if units:
        return units in _DEGREE_UNITS
    std = str(coord.attrs.get("standard_name", "")).lower()
    return std in ("latitude", "longitude") or dim.lower() in (
        "lat",
        "lon",
        "latitude",
        "longitude",
    )


def _grid_mapping_crs(ds: xr.Dataset, da: xr.DataArray, where: str) -> CRS | None:
    text = da.attrs.get("grid_mapping") or da.encoding.get("grid_mapping")
    if not text:
        return None
    gm_name = str(text).split(":")[0].split()[0]
    if gm_name not in ds.variables:
        raise InputError(f"{where}: grid_mapping variable {gm_name!r} is not in the file")
    gm = ds[gm_name].attrs
    wkt = gm.get("crs_wkt") or gm.get("spatial_ref")
    if wkt:
        return parse_crs(str(wkt), f"{where}: grid mapping {gm_name!r}")
    if gm.get("grid_mapping_name") == "latitude_longitude":
        return CRS.from_epsg(4326)
    raise InputError(
        f"{where}: grid mapping {gm_name!r} ({gm.get('grid_mapping_name', 'no name')!r}) has "
        "no crs_wkt or spatial_ref attribute; add the CRS as WKT in crs_wkt"
    )


def _netcdf_variable(ds: xr.Dataset, path: Path, variable: str | None) -> str:
    helpers = {str(ds[v].attrs.get("grid_mapping", "")).split(":")[0] for v in ds.data_vars}
    helpers |= {str(ds[v].attrs.get("bounds", "")) for v in ds.variables}  # cell bounds
    candidates = [str(v) for v in ds.data_vars if ds[v].ndim >= 2 and str(v) not in helpers]
    if variable is None:
        if len(candidates) != 1:
            listed = ", ".join(map(repr, candidates)) or "none"
            raise InputError(
                f"{path}: choose a variable with variable=; the gridded variables are {listed}"
            )
        return candidates[0]
    if variable not in ds.data_vars:
        listed = ", ".join(map(repr, candidates or [str(v) for v in ds.data_vars])) or "none"
        raise InputError(f"{path}: no variable {variable!r}; variables are {listed}")
    return variable


def _read_netcdf(path: Path, variable: str | None) -> xr.DataArray:
    try:
        with NETCDF_LOCK, xr.open_dataset(path, engine="netcdf4", decode_times=False) as ds:
            name = _netcdf_variable(ds, path, variable)
            da = ds[name]
            where = f"{path}: variable {name!r}"
            squeezed = da.squeeze(drop=True) if da.ndim > 2 else da
            if squeezed.ndim != 2:
                raise InputError(f"{where}: expected a 2-D grid, got dims {da.dims!r}")
            crs = _grid_mapping_crs(ds, da, where)
            check_memory(squeezed.size * 16.0, f"{where}: reading")
            da = squeezed.load()
    except InputError:
        raise
    except (OSError, ValueError, RuntimeError, KeyError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc})") from exc
    roles = {}
    for dim in da.dims:
        coord = da[dim] if dim in da.coords else None
        if coord is None:
            raise InputError(f"{where}: dimension {dim!r} has no coordinate values")
        if coord.ndim != 1:
            raise InputError(f"{where}: coordinate {dim!r} is not 1-D (curvilinear grid)")
        roles[str(dim)] = _role(coord, str(dim))
    if sorted(r for r in roles.values() if r) != ["x", "y"]:
        ydim, xdim = (str(d) for d in da.dims)  # CF order (..., y, x)
    else:
        ydim = next(d for d, r in roles.items() if r == "y")
        xdim = next(d for d, r in roles.items() if r == "x")
    da = da.transpose(ydim, xdim)
    degrees = [_in_degrees(da[d], d) for d in (ydim, xdim)]
    if crs is None and all(degrees):
        crs = CRS.from_epsg(4326)
    coords = []
    for dim, is_degree in zip((ydim, xdim), degrees, strict=True):
        values = np.asarray(da[dim].values)
        if not np.issubdtype(values.dtype, np.number):
            raise InputError(f"{where}: coordinate {dim!r} is not numeric ({values.dtype})")
        if crs is not None and crs.is_geographic:
            if not is_degree and str(da[dim].attrs.get("units", "")).strip():
                raise InputError(
                    f"{where}: coordinate {dim!r} is in {da[dim].attrs['units']!r} but the "
                    "CRS is geographic (degrees)"
                )
        elif is_degree:
            raise InputError(f"{where}: coordinate {dim!r} is in degrees but the CRS is projected")
        elif crs is None or crs.linear_units_factor[1] == 1.0:
            units = str(da[dim].attrs.get("units", "m")).strip() or "m"
            values = values * unit_factor(units, "length", f"{where}: coordinate {dim!r}")
        try:
            even_step(values, str(dim))
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
        coords.append(values)
    geometry = GridGeometry.from_coords(coords[0], coords[1], crs)
    y, x = geometry.coords()  # exactly even, also for coordinates stored in float32
    extra = {k: da.attrs[k] for k in ("long_name", "standard_name") if k in da.attrs}
    return _finish(path, name, da.values, y, x, crs, da.attrs.get("units"), extra)


def read_raster(path: str | Path, variable: str | None = None) -> xr.DataArray:
    """Read one georeferenced 2-D grid.

    Parameters
    ----------
    path : str or pathlib.Path
        A GeoTIFF or any raster GDAL reads, or a NetCDF file (by its name ending
        or its first bytes).
    variable : str, optional
        NetCDF variable, or band (description, ``"band2"`` or ``"2"``). Needed
        only when the file holds more than one grid.

    Returns
    -------
    xarray.DataArray
        float64 on dims ``("y", "x")`` with cell-centre coordinates in CRS units
        (degrees or metres), nodata as NaN; ``attrs["crs_wkt"]`` (``""`` when the
        CRS is unknown) and ``attrs["units"]`` when the file gives one. NetCDF
        CRS: the CF ``grid_mapping`` variable's ``crs_wkt`` or ``spatial_ref``;
        else coordinates in degrees mean EPSG:4326; else metric x/y with an
        unknown CRS.

    Raises
    ------
    InputError
        Missing, corrupt or unreadable file; unknown variable or band (the valid
        ones are listed); not 2-D; rotated or sheared grid; unknown CRS; uneven
        coordinates; no valid value.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    try:
        netcdf = _is_netcdf(path)
    except OSError as exc:
        raise InputError(f"{path}: cannot open ({exc})") from exc
    da = _read_netcdf(path, variable) if netcdf else _read_gdal(path, variable)
    log.info("read %s %r: %s cells", path, da.name, da.shape)
    return da


def write_geotiff(
    da: xr.DataArray,
    path: str | Path,
    crs: CRS | str | None,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
    nodata: float = float("nan"),
) -> Path:
    """Write one grid as a single-band, north-up, compressed GeoTIFF, atomically.

    Parameters
    ----------
    da : xarray.DataArray
        Values on dims ``("y", "x")`` with evenly spaced cell-centre coordinates
        in *crs* units. float32 stays float32; anything else is written float64.
    path : str or pathlib.Path
        Output file.
    crs : CRS, str or None
        Its CRS (``None``: written without one).
    overwrite : bool, default False
        Replace an existing file.
    inputs : iterable of path
        Files that must never be written over.
    nodata : float, default NaN
        Nodata value; NaN cells are written as it.

    Returns
    -------
    pathlib.Path
        *path*. Band description: the variable name; tags ``units`` and
        ``long_name`` from the attributes.
    """
    if not isinstance(da, xr.DataArray) or da.ndim != 2 or set(da.dims) != {"y", "x"}:
        raise InputError(f"{path}: write_geotiff needs a 2-D DataArray on dims ('y', 'x')")
    da = da.transpose("y", "x")
    if crs is not None and not isinstance(crs, CRS):
        crs = parse_crs(crs, f"{path}: crs")
    geometry = GridGeometry.from_coords(da["y"].values, da["x"].values, crs)
    dtype = np.float32 if da.dtype == np.float32 else np.float64
    values = np.asarray(da.values, dtype=dtype)
    up = geometry.north_up()
    if up is not geometry:
        values = values[::-1]
    if not math.isnan(nodata):
        values = np.where(np.isnan(values), dtype(nodata), values)
    ny, nx = values.shape
    profile: dict[str, Any] = {
        "driver": "GTiff",
        "width": nx,
        "height": ny,
        "count": 1,
        "dtype": np.dtype(dtype).name,
        "crs": crs,
        "transform": up.transform,
        "nodata": nodata,
        "compress": "deflate",
        "predictor": 3,
    }
    if nx >= 256 and ny >= 256:
        profile.update(tiled=True, blockxsize=256, blockysize=256)
    tags = {k: str(da.attrs[k]) for k in ("units", "long_name") if da.attrs.get(k)}
    with atomic_path(path, overwrite, inputs) as tmp:
        try:
            with rasterio.Env(), rasterio.open(tmp, "w", **profile) as dst:
                dst.write(values, 1)
                if da.name is not None:
                    dst.set_band_description(1, str(da.name))
                if "units" in tags:
                    dst.set_band_unit(1, tags["units"])
                dst.update_tags(1, **tags)
        except (RasterioError, OSError) as exc:
            raise InputError(f"{path}: cannot write GeoTIFF ({exc})") from exc
    log.debug("wrote %s", path)
    return Path(path)
