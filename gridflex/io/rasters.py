"""Georeferenced raster files: GeoTIFF (and whatever GDAL reads) and CF NetCDF in, GeoTIFF out.

Every reader returns the same thing: a float64 :class:`xarray.DataArray` on dims
``("y", "x")`` with 1-D cell-centre coordinates in the units of its CRS (degrees
for geographic grids, metres for projected ones), missing values as NaN, and the
CRS as WKT in ``attrs["crs_wkt"]`` (``""`` when unknown).
:func:`gridflex.gis.geometry.geometry_of`
turns that back into a :class:`gridflex.gis.geometry.GridGeometry`.

Missing values: nodata (GeoTIFF) and ``_FillValue``/``missing_value``, values
outside ``valid_min``/``valid_max``/``valid_range`` and, when no ``_FillValue`` is
declared, netCDF's default fill value of the variable's type (NetCDF,
:func:`netcdf_missing`) become NaN here; what NaN means for a given layer (a load
of zero, or an error) is decided by the caller. A layer with no valid value at all
is an error here, and so is a value of magnitude :data:`FILL_LIKE` or more (a fill
value the file does not declare).

Coordinates (NetCDF): an axis within :data:`SNAP_TOLERANCE` of a step of a regular
one is snapped onto it; an irregular axis is resampled linearly onto a regular one
(:func:`regular_axis`), or refused.
"""

from __future__ import annotations

import logging
import math
import re
from collections.abc import Iterable
from pathlib import Path
from typing import Any
from xml.etree import ElementTree

import netCDF4
import numpy as np
import rasterio
import xarray as xr
from affine import Affine
from rasterio.crs import CRS
from rasterio.errors import RasterioError

from gridflex.errors import InputError
from gridflex.gis.geometry import GridGeometry, check_on_earth, even_step, parse_crs
from gridflex.io.atomic import atomic_path
from gridflex.io.netcdf import NETCDF_LOCK, input_file
from gridflex.memory import check_memory
from gridflex.units import unit_factor

__all__ = [
    "FILL_LIKE",
    "IRREGULAR_POLICIES",
    "LAYER_MISSING_POLICIES",
    "MISSING_POLICIES",
    "NETCDF_SUFFIXES",
    "GDAL_INPUT_OPTIONS",
    "SNAP_TOLERANCE",
    "check_local_input",
    "grid_mapping_crs",
    "increasing_axes",
    "netcdf_missing",
    "read_raster",
    "refuse_fill_like",
    "regular_axis",
    "write_geotiff",
]

log = logging.getLogger(__name__)

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
"""File name endings read through xarray/netCDF4 rather than GDAL."""

MISSING_POLICIES = ("error", "zero", "keep")
"""What nodata/NaN cells of an input grid mean: an error, no load (0), or no data (NaN)."""
LAYER_MISSING_POLICIES = MISSING_POLICIES[:2]
"""The policies a scenario offers for a load layer or an ice grid (``"keep"`` is internal)."""

FILL_LIKE = 1.0e30
"""Values of this magnitude or more are taken for a fill value the file does not declare
(no grid gridflex reads holds such numbers in any accepted unit) and refused."""

SNAP_TOLERANCE = 0.01
"""Coordinates whose cell centres lie within this fraction of a step of a regular axis (e.g.
values rounded to a few decimals in the file) are snapped onto that axis."""

IRREGULAR_POLICIES = ("resample", "refuse")
"""What :func:`read_raster` does with an irregular NetCDF axis: resample it, or refuse it."""

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


def refuse_fill_like(values: np.ndarray, where: str) -> None:
    """Refuse values of magnitude :data:`FILL_LIKE` or more (infinities included): an
    undeclared fill value, never data.

    Raises
    ------
    InputError
        Naming *where* (file and variable), the number of cells and the first value.
    """
    with np.errstate(invalid="ignore"):
        huge = np.abs(values) >= FILL_LIKE
    if huge.any():
        raise InputError(
            f"{where} has {int(huge.sum())} cell(s) holding "
            f"{float(values[huge][0]):.7g}, which looks like a fill value the file does not "
            "declare; declare it (_FillValue or missing_value in NetCDF, nodata in a GeoTIFF)"
        )


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
    refuse_fill_like(values, f"{path}: {name!r}")
    if crs is not None and crs.is_geographic and y.size > 1 and x.size > 1:
        dy, dx = (y[-1] - y[0]) / (y.size - 1), (x[-1] - x[0]) / (x.size - 1)
        cells = Affine(dx, 0.0, x[0] - dx / 2, 0.0, dy, y[0] - dy / 2)
        check_on_earth(GridGeometry(crs, cells, (y.size, x.size)), f"{path}: {name!r}")
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


GDAL_INPUT_OPTIONS = {
    "GDAL_VRT_ENABLE_PYTHON": "NO",
    "CPL_VSIL_CURL_ALLOWED_EXTENSIONS": ".gridflex-no-network",
    "GDAL_HTTP_MAX_RETRY": "0",
}
"""GDAL configuration of every input opened by :func:`read_raster`: no Python in VRT
pixel functions, and no file of the HTTP-based virtual file systems (/vsicurl/ and those
built on it) seen to exist. The inputs are also checked before GDAL opens them
(:func:`check_local_input`)."""

_REMOTE = re.compile(r"(?i)(^|[\s\"'(,])([a-z][a-z0-9+.-]*://|/vsi[a-z0-9_]+)")
"""A URL (``scheme://``) or a GDAL virtual file system path (``/vsicurl/``,
``/vsis3/``, ``/vsizip/``, ...) anywhere in a file name or source string."""

_XML_LIMIT = 64 * 2**20
"""Largest XML raster description (a VRT) read to check its sources (bytes)."""


def _refuse_remote(text: str, where: str) -> None:
    match = _REMOTE.search(text)
    if match is not None:
        raise InputError(
            f"{where}: {text!r} is a URL or a GDAL virtual file system path "
            f"({match.group(2)!r}); gridflex reads local files only, never over the "
            "network; download the file and name the local copy"
        )


def check_local_input(path: str | Path, _seen: frozenset[Path] = frozenset()) -> None:
    """Refuse an input that would make GDAL reach the network or run code.

    A path that is a URL or a GDAL virtual file system (``/vsicurl/``, ``/vsis3/``,
    ...); an XML description other than a VRT (a web map or coverage service); a JSON
    description; a VRT with a Python pixel function (``PixelFunctionLanguage`` Python,
    ``PixelFunctionCode``) or a source that is a URL or a virtual file system path, or a
    local VRT with such a source (followed down).

    Raises
    ------
    InputError
        Naming the file and what was refused.
    """
    _refuse_remote(str(path), f"{path}")
    path = Path(path)
    try:
        with open(path, "rb") as handle:
            head = handle.read(_XML_LIMIT + 1)
    except OSError:
        return  # reported by the reader
    text = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if text.startswith(b"{"):
        raise InputError(
            f"{path}: a JSON description, not a raster file; gridflex reads local raster "
            "files (GeoTIFF, NetCDF, a VRT of local files)"
        )
    if not text.startswith(b"<"):
        return
    if len(head) > _XML_LIMIT:
        raise InputError(f"{path}: XML raster description larger than {_XML_LIMIT} bytes")
    try:
        root = ElementTree.fromstring(text)
    except ElementTree.ParseError as exc:
        raise InputError(f"{path}: cannot read as XML ({exc})") from exc
    _check_vrt(root, path, _seen | {path.resolve()})


def _check_vrt(root: ElementTree.Element, path: Path, seen: frozenset[Path]) -> None:
    """Check the XML *root* read from *path* (see :func:`check_local_input`)."""
    if root.tag != "VRTDataset":
        raise InputError(
            f"{path}: an XML <{root.tag}> description (a web service or another "
            "connection) would make GDAL reach the network; gridflex reads local files only"
        )
    for element in root.iter():
        value = (element.text or "").strip()
        if element.tag == "PixelFunctionCode" or (
            element.tag == "PixelFunctionLanguage" and value.lower() != "c"
        ):
            raise InputError(
                f"{path}: the VRT has a pixel function in {value or 'Python'!r} "
                "(<PixelFunctionLanguage>/<PixelFunctionCode>); gridflex runs no code "
                "from input files"
            )
        if element.tag not in ("SourceFilename", "SourceDataset") or not value:
            continue
        where = f"{path}: VRT source <{element.tag}>"
        _refuse_remote(value, where)
        if value.startswith("<"):  # an inline description
            try:
                inline = ElementTree.fromstring(value)
            except ElementTree.ParseError as exc:
                raise InputError(f"{where}: cannot read as XML ({exc})") from exc
            _check_vrt(inline, path, seen)
            continue
        source = Path(value)
        if element.get("relativeToVRT", "0").strip() == "1" and not source.is_absolute():
            source = path.parent / source
        if source.resolve() in seen:
            raise InputError(f"{where}: {value!r} refers back to a VRT that uses it")
        if source.is_file():
            check_local_input(source, seen)


def _read_gdal(path: Path, variable: str | None) -> xr.DataArray:
    try:
        with rasterio.Env(**GDAL_INPUT_OPTIONS), rasterio.open(path) as src:
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


def grid_mapping_crs(ds: xr.Dataset, da: xr.DataArray, where: str) -> CRS | None:
    """The CRS of *da* from its CF ``grid_mapping`` variable in *ds* (``crs_wkt`` or
    ``spatial_ref``, or a latitude_longitude mapping); None when it names none."""
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


def netcdf_missing(raw: np.ndarray, attrs: dict[str, Any]) -> np.ndarray:
    """Values of a NetCDF variable as stored (not decoded) as float64, missing cells NaN.

    Missing, by the CF conventions 1.8, section 2.5.1: cells equal to ``_FillValue``
    or to any ``missing_value``, and cells outside ``valid_range`` (or below
    ``valid_min``, above ``valid_max``). When the variable declares no
    ``_FillValue``, cells equal to netCDF's default fill value of its type
    (:data:`netCDF4.default_fillvals`, e.g. 9.969209968386869e36 for float and double)
    are missing too: that is what netCDF writes into cells never written. One-byte
    types have no default fill check (netCDF User Guide, from memory). Then
    ``scale_factor`` and ``add_offset`` are applied, and ``_Unsigned = "true"`` is
    honoured.

    Parameters
    ----------
    raw : numpy.ndarray
        The variable's values in their stored type.
    attrs : dict
        The variable's attributes.

    Returns
    -------
    numpy.ndarray
        float64 values, NaN where missing.
    """
    data = np.asarray(raw)
    if str(attrs.get("_Unsigned", "")).lower() == "true" and data.dtype.kind == "i":
        data = data.view(data.dtype.str.replace("i", "u"))
    missing = np.isnan(data) if data.dtype.kind == "f" else np.zeros(data.shape, dtype=bool)

    def stored(value: Any) -> np.ndarray:
        return np.atleast_1d(np.asarray(value)).astype(data.dtype)

    for key in ("_FillValue", "missing_value"):
        if key in attrs:
            for value in stored(attrs[key]):
                missing |= data == value
    if "_FillValue" not in attrs and data.dtype.kind in "iuf" and data.dtype.itemsize > 1:
        default = netCDF4.default_fillvals[data.dtype.str[1:]]
        missing |= data == stored(default)[0]
    low, high = attrs.get("valid_min"), attrs.get("valid_max")
    if "valid_range" in attrs:
        low, high = stored(attrs["valid_range"])[:2]
    with np.errstate(invalid="ignore"):
        if low is not None:
            missing |= data < stored(low)[0]
        if high is not None:
            missing |= data > stored(high)[0]
    values = data.astype(np.float64)
    scale, offset = attrs.get("scale_factor"), attrs.get("add_offset")
    if scale is not None:
        values = values * float(np.asarray(scale).ravel()[0])
    if offset is not None:
        values = values + float(np.asarray(offset).ravel()[0])
    values[missing] = np.nan
    return values


def regular_axis(
    coord: np.ndarray, values: np.ndarray, axis: int, where: str, irregular: str = "resample"
) -> tuple[np.ndarray, np.ndarray]:
    """A coordinate made exactly regular, and *values* on it.

    Rules (the tolerance is :data:`SNAP_TOLERANCE`, 1 % of a step):

    - evenly spaced (to 1e-5 of the step, or float32 round-off): kept;
    - every centre within 1 % of a step of the regular axis through the first and
      last centre (coordinates rounded in the file): snapped onto that axis, values
      unchanged (logged);
    - otherwise (truly irregular, e.g. latitudes of a Mercator grid): with
      ``irregular="resample"`` the values are interpolated linearly along this axis
      onto a regular axis over the same extent (first to last centre) whose step is
      the median step, rounded so that a whole number of steps spans the extent
      (logged as a warning); NaN spreads to the cells next to it. With
      ``"refuse"`` (masks and classes, which must not be interpolated) an
      InputError says how to fix the file.

    Parameters
    ----------
    coord : numpy.ndarray
        1-D cell centres (CRS units), strictly increasing or decreasing.
    values : numpy.ndarray
        float64 grid; its *axis* runs along *coord*.
    axis : int
        Axis of *values* along *coord*.
    where : str
        File, variable and coordinate, for messages.
    irregular : {"resample", "refuse"}, default "resample"

    Returns
    -------
    coord : numpy.ndarray
        Exactly regular float64 centres, in the direction of the input.
    values : numpy.ndarray
        *values*, resampled along *axis* if the axis was irregular.

    Raises
    ------
    InputError
        A coordinate that is not strictly monotonic, or irregular with ``"refuse"``.
    """
    if irregular not in IRREGULAR_POLICIES:
        raise InputError(f"irregular must be one of {IRREGULAR_POLICIES}, got {irregular!r}")
    try:
        first, step, n = even_step(coord, "")
        return first + step * np.arange(n), values
    except InputError:
        pass
    given = np.asarray(coord, dtype=np.float64)
    diffs = np.diff(given)
    if not (np.all(diffs > 0) or np.all(diffs < 0)):
        raise InputError(
            f"{where}: values are not strictly increasing or decreasing; "
            "sort the file along this axis and remove repeated values"
        )
    try:
        first, step, n = even_step(given, "", tolerance=SNAP_TOLERANCE)
    except InputError:
        pass
    else:
        regular = first + step * np.arange(n)
        shift = float(np.max(np.abs(given - regular))) / abs(step)
        log.info(
            "%s: coordinates snapped onto a regular axis (moved by <= %.2g of a step)", where, shift
        )
        return regular, values
    if irregular == "refuse":
        raise InputError(
            f"{where}: not evenly spaced (steps from {float(diffs.min()):.6g} "
            f"to {float(diffs.max()):.6g}), and this grid (a mask or classes) is not "
            "interpolated; write it on a regular grid (e.g. gdalwarp or cdo remapnn)"
        )
    median = float(np.median(np.abs(diffs)))
    extent = float(given[-1] - given[0])
    n = max(2, round(abs(extent) / median) + 1)
    regular = given[0] + extent / (n - 1) * np.arange(n)
    check_memory(24.0 * values.size * n / given.size, f"{where}: resampling onto {n} cells")
    ascending = diffs[0] > 0
    source = given if ascending else given[::-1]
    target = regular if ascending else regular[::-1]
    moved = np.moveaxis(values, axis, -1)
    moved = moved if ascending else moved[..., ::-1]
    upper = np.clip(np.searchsorted(source, target), 1, source.size - 1)
    weight = (target - source[upper - 1]) / (source[upper] - source[upper - 1])
    out = moved[..., upper - 1] * (1.0 - weight) + moved[..., upper] * weight
    out = out if ascending else out[..., ::-1]
    log.warning(
        "%s: not evenly spaced (steps from %.6g to %.6g); the grid was "
        "resampled linearly along it onto %d cells of %.6g",
        where,
        float(diffs.min()),
        float(diffs.max()),
        n,
        abs(extent) / (n - 1),
    )
    return regular, np.moveaxis(out, -1, axis)


def _read_netcdf(path: Path, variable: str | None, irregular: str) -> xr.DataArray:
    try:
        with (
            NETCDF_LOCK,
            xr.open_dataset(path, engine="netcdf4", decode_times=False, mask_and_scale=False) as ds,
        ):
            name = _netcdf_variable(ds, path, variable)
            da = ds[name]
            where = f"{path}: variable {name!r}"
            squeezed = da.squeeze(drop=True) if da.ndim > 2 else da
            if squeezed.ndim != 2:
                raise InputError(f"{where}: expected a 2-D grid, got dims {da.dims!r}")
            crs = grid_mapping_crs(ds, da, where)
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
    data = netcdf_missing(da.values, da.attrs)
    degrees = [_in_degrees(da[d], d) for d in (ydim, xdim)]
    if crs is None and all(degrees):
        crs = CRS.from_epsg(4326)
    coords = []
    for axis, (dim, is_degree) in enumerate(zip((ydim, xdim), degrees, strict=True)):
        values = np.asarray(da[dim].values)
        if not np.issubdtype(values.dtype, np.number):
            raise InputError(f"{where}: coordinate {dim!r} is not numeric ({values.dtype})")
        if any(k in da[dim].attrs for k in ("scale_factor", "add_offset", "_Unsigned")):
            values = netcdf_missing(values, da[dim].attrs)  # packed coordinates
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
            even_step(values[:2], str(dim))  # 1-D, at least 2 finite numbers
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
        if not np.all(np.isfinite(np.asarray(values, dtype=np.float64))):
            raise InputError(f"{where}: coordinate {dim!r} has NaN or infinite values")
        regular, data = regular_axis(values, data, axis, f"{where}: coordinate {dim!r}", irregular)
        coords.append(regular)
    geometry = GridGeometry.from_coords(coords[0], coords[1], crs)
    y, x = geometry.coords()  # exactly even, also for coordinates stored in float32
    extra = {k: da.attrs[k] for k in ("long_name", "standard_name") if k in da.attrs}
    return _finish(path, name, data, y, x, crs, da.attrs.get("units"), extra)


def read_raster(
    path: str | Path, variable: str | None = None, *, irregular: str = "resample"
) -> xr.DataArray:
    """Read one georeferenced 2-D grid.

    Parameters
    ----------
    path : str or pathlib.Path
        A GeoTIFF or any raster GDAL reads, or a NetCDF file (by its name ending
        or its first bytes).
    variable : str, optional
        NetCDF variable, or band (description, ``"band2"`` or ``"2"``). Needed
        only when the file holds more than one grid.
    irregular : {"resample", "refuse"}, default "resample"
        A NetCDF axis that is not regular (beyond :data:`SNAP_TOLERANCE`) is
        resampled linearly onto a regular one, or refused (masks, classes); see
        :func:`regular_axis`.

    Returns
    -------
    xarray.DataArray
        float64 on dims ``("y", "x")`` with cell-centre coordinates in CRS units
        (degrees or metres), rows in the file's order, nodata as NaN;
        ``attrs["crs_wkt"]`` (``""`` when the CRS is unknown) and ``attrs["units"]``
        when the file gives one. NetCDF CRS: the CF ``grid_mapping`` variable's
        ``crs_wkt`` or ``spatial_ref``; else coordinates in degrees mean
        EPSG:4326; else metric x/y with an unknown CRS.

    Raises
    ------
    InputError
        A URL, a GDAL virtual file system path, or a file that would make GDAL reach
        the network or run code (:func:`check_local_input`); missing, corrupt or
        unreadable file; unknown variable or band (the valid
        ones are listed); not 2-D; rotated or sheared grid; unknown CRS; coordinates
        not monotonic, or irregular with ``irregular="refuse"``; no valid value; a
        value of magnitude :data:`FILL_LIKE` or more.
    """
    _refuse_remote(str(path), f"{path}")
    path = input_file(path)
    try:
        netcdf = _is_netcdf(path)
    except OSError as exc:
        raise InputError(f"{path}: cannot open ({exc})") from exc
    if not netcdf:
        check_local_input(path)
    da = _read_netcdf(path, variable, irregular) if netcdf else _read_gdal(path, variable)
    log.info("read %s %r: %s cells", path, da.name, da.shape)
    return da


def increasing_axes(da: xr.DataArray) -> xr.DataArray:
    """*da* with both coordinates increasing: rows south to north (``y`` increasing,
    as most NetCDF files store them) and columns west to east; the same cells and values.

    A north-up GeoTIFF (``y`` decreasing) and a NetCDF of the same cells come back
    identical. Returns *da* itself when it is already in that order.

    Examples
    --------
    >>> da = xr.DataArray([[1.0, 2.0], [3.0, 4.0]], dims=("y", "x"),
    ...                   coords={"y": [1.0, 0.0], "x": [0.0, 1.0]})
    >>> increasing_axes(da).values.tolist()
    [[3.0, 4.0], [1.0, 2.0]]
    """
    flips = {}
    for dim in ("y", "x"):
        coord = np.asarray(da[dim].values, dtype=np.float64)
        if coord.size > 1 and coord[-1] < coord[0]:
            flips[dim] = slice(None, None, -1)
    return da.isel(flips) if flips else da


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
        "num_threads": "all_cpus",  # GDAL compresses blocks on every core
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
