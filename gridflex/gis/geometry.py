"""Georeferencing and reprojection of regular grids (rasterio and GDAL/PROJ underneath).

A grid is placed on the Earth by a :class:`GridGeometry`: a coordinate reference
system (CRS), an affine transform from cell indices to CRS coordinates and a shape.
Geographic grids (longitude/latitude in degrees) cannot be solved directly, so
they are resampled onto a local equal-area projection centred on the domain
(:func:`local_projection`, :func:`working_geometry`, :func:`reproject_values`);
results go back the same way.

A CRS of ``None`` means "projected, in metres, but unknown" (a NetCDF file with
plain ``x``/``y`` coordinates): such grids can be resampled onto each other but
not placed in longitude/latitude.
"""

from __future__ import annotations

import logging
import math
import os
import re
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

import numpy as np
import rasterio
import rasterio.warp
import xarray as xr
from affine import Affine
from rasterio.crs import CRS
from rasterio.enums import Resampling
from rasterio.errors import CRSError, RasterioError

from gridflex.errors import InputError
from gridflex.memory import check_memory

try:  # GDAL and PROJ errors (e.g. "PROJ: laea: Invalid latitude")
    from rasterio._err import CPLE_BaseError
except ImportError:  # pragma: no cover - rasterio moved it
    CPLE_BaseError = RasterioError

__all__ = [
    "GridGeometry",
    "LONLAT",
    "RESAMPLING",
    "cell_areas",
    "check_alignable",
    "check_on_earth",
    "even_step",
    "from_lonlat",
    "geometry_of",
    "local_projection",
    "parse_crs",
    "reproject_values",
    "same_crs",
    "to_lonlat",
    "working_geometry",
]

log = logging.getLogger(__name__)

LONLAT = CRS.from_epsg(4326)
"""WGS84 longitude/latitude (EPSG:4326), the CRS of GeoJSON."""

RESAMPLING = ("bilinear", "average", "nearest", "cubic")
"""Resampling methods accepted by :func:`reproject_values`."""

_WGS84 = (6378137.0, 298.257223563)  # semi-major axis (m), inverse flattening (EPSG:7030)
_ELLIPSOID = re.compile(r'(?:SPHEROID|ELLIPSOID)\["[^"]*",\s*([0-9.eE+-]+),\s*([0-9.eE+-]+)')
_SPACING_RTOL = 1e-5


def parse_crs(text: Any, where: str) -> CRS:
    """A :class:`rasterio.crs.CRS` from an EPSG code, ``"EPSG:n"``, PROJ string or WKT.

    Parameters
    ----------
    text : str, int or CRS
        The CRS as written by the user or found in a file.
    where : str
        What the value is (file, variable, key), for the message.

    Raises
    ------
    InputError
        Empty or unknown CRS, or one that is neither geographic nor projected.

    Examples
    --------
    >>> parse_crs("EPSG:4326", "crs").is_geographic
    True
    """
    if isinstance(text, CRS):
        crs = text
    else:
        if text is None or (isinstance(text, str) and not text.strip()):
            raise InputError(f"{where}: no coordinate reference system given")
        try:
            with rasterio.Env():  # GDAL messages go to logging, not to stderr
                crs = CRS.from_user_input(text.strip() if isinstance(text, str) else text)
        except (CRSError, ValueError, TypeError) as exc:
            shown = text if len(str(text)) < 80 else str(text)[:77] + "..."
            raise InputError(
                f"{where}: unknown coordinate reference system {shown!r}; give an EPSG code "
                "such as 'EPSG:4326', a PROJ string or WKT"
            ) from exc
    if not (crs.is_geographic or crs.is_projected):
        raise InputError(
            f"{where}: coordinate reference system {crs.to_string()[:80]!r} is neither "
            "geographic nor projected; it cannot be placed on the Earth"
        )
    return crs


def _ellipsoid(crs: CRS) -> tuple[float, float]:
    """Semi-major axis a (m) and squared eccentricity e² of *crs*'s ellipsoid (WGS84 if unknown)."""
    match = _ELLIPSOID.search(crs.to_wkt())
    a, rf = (float(match.group(1)), float(match.group(2))) if match else _WGS84
    if not match:
        log.debug("no ellipsoid found in %s; using WGS84", crs)
    f = 0.0 if rf == 0.0 else 1.0 / rf
    return a, f * (2.0 - f)


def _metres_per_degree(crs: CRS, latitude: np.ndarray | float) -> tuple[Any, Any]:
    """Metres per degree of latitude and of longitude at *latitude* (degrees) on *crs*'s ellipsoid.

    Meridional radius M = a (1 - e²) / W³ and prime-vertical radius N = a / W with
    W = sqrt(1 - e² sin² φ) (common practice; any geodesy text, e.g. Snyder 1987,
    *Map Projections: A Working Manual*, USGS PP 1395, eqs. 4-18, 4-20).
    """
    a, e2 = _ellipsoid(crs)
    phi = np.radians(latitude)
    w = np.sqrt(1.0 - e2 * np.sin(phi) ** 2)
    per_lat = a * (1.0 - e2) / w**3 * (math.pi / 180.0)
    per_lon = a / w * np.cos(phi) * (math.pi / 180.0)
    return per_lat, per_lon


def _linear_factor(crs: CRS) -> float:
    """Metres per unit of a projected *crs*."""
    try:
        return float(crs.linear_units_factor[1])
    except CRSError:
        return 1.0


def even_step(coord: Any, name: str, tolerance: float | None = None) -> tuple[float, float, int]:
    """First value, step and length of evenly spaced 1-D cell centres *coord*.

    The step is taken from the end points; coordinates stored in float32 are
    checked only to float32 precision.

    Parameters
    ----------
    coord : array_like
        Cell centres, increasing or decreasing.
    name : str
        The coordinate's name, for messages.
    tolerance : float, optional
        Accept centres up to this fraction of the step away from the regular axis
        through the first and last centre (e.g. coordinates rounded in the file);
        they must still be strictly monotonic. Default: every step equals the mean
        step to a relative 1e-5 (or float32 round-off).

    Raises
    ------
    InputError
        Not 1-D, fewer than 2 values, not finite, or not evenly spaced; the
        message names coordinate *name*.
    """
    given = np.asarray(coord)
    if given.ndim != 1 or given.size < 2 or not np.issubdtype(given.dtype, np.number):
        raise InputError(
            f"coordinate {name!r} must be 1-D with at least 2 numbers, got shape {given.shape}"
        )
    values = given.astype(np.float64)
    if not np.all(np.isfinite(values)):
        raise InputError(f"coordinate {name!r} has NaN or infinite values")
    step = (values[-1] - values[0]) / (values.size - 1)
    diffs = np.diff(values)
    if tolerance is not None:
        regular = values[0] + step * np.arange(values.size)
        uneven = not np.all(diffs * step > 0.0) or bool(
            np.max(np.abs(values - regular)) > tolerance * abs(step)
        )
    else:
        eps = np.finfo(given.dtype).eps if np.issubdtype(given.dtype, np.floating) else 0.0
        tol = max(_SPACING_RTOL * abs(step), 8.0 * eps * float(np.max(np.abs(values))))
        uneven = bool(np.max(np.abs(diffs - step)) > tol)
    if not np.any(diffs):
        raise InputError(
            f"coordinate {name!r} has a spacing of 0 (every value is {float(values[0])!r}); "
            "the cells must have a positive size"
        )
    if step == 0.0 or uneven:
        raise InputError(
            f"coordinate {name!r} is not evenly spaced (steps from {float(diffs.min())!r} "
            f"to {float(diffs.max())!r}); resample onto a regular grid first"
        )
    return float(values[0]), float(step), int(values.size)


@dataclass(frozen=True)
class GridGeometry:
    """Where a regular grid lies: CRS, affine transform and shape.

    Attributes
    ----------
    crs : rasterio.crs.CRS or None
        Coordinate reference system; ``None`` means unknown, projected, metres.
    transform : affine.Affine
        Maps (column, row) of cell corners to CRS coordinates; no rotation.
    shape : tuple of int
        ``(ny, nx)``.
    """

    crs: CRS | None
    transform: Affine
    shape: tuple[int, int]

    @property
    def is_geographic(self) -> bool:
        """True for longitude/latitude coordinates (degrees)."""
        return self.crs is not None and bool(self.crs.is_geographic)

    def coords(self) -> tuple[np.ndarray, np.ndarray]:
        """1-D cell-centre coordinates ``(y, x)`` in CRS units."""
        t = self.transform
        ny, nx = self.shape
        x = t.c + t.a * (np.arange(nx) + 0.5)
        y = t.f + t.e * (np.arange(ny) + 0.5)
        return y, x

    @classmethod
    def from_coords(cls, y: Any, x: Any, crs: CRS | None) -> GridGeometry:
        """Geometry of a grid with 1-D, evenly spaced cell-centre coordinates.

        Parameters
        ----------
        y, x : array_like
            Cell centres in CRS units; either may decrease. At least 2 values each.
        crs : CRS or None

        Raises
        ------
        InputError
            Coordinates not 1-D, too short, not finite or not evenly spaced.
        """
        steps = [even_step(y, "y"), even_step(x, "x")]
        (y0, dy, ny), (x0, dx, nx) = steps
        transform = Affine(dx, 0.0, x0 - dx / 2, 0.0, dy, y0 - dy / 2)
        return cls(crs, transform, (ny, nx))

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """``(left, bottom, right, top)`` outer cell edges in CRS units."""
        t = self.transform
        ny, nx = self.shape
        xs = sorted((t.c, t.c + t.a * nx))
        ys = sorted((t.f, t.f + t.e * ny))
        return (xs[0], ys[0], xs[1], ys[1])

    @property
    def centre(self) -> tuple[float, float]:
        """``(x, y)`` of the domain centre in CRS units."""
        left, bottom, right, top = self.bounds
        return (0.5 * (left + right), 0.5 * (bottom + top))

    def cell_size_metres(self) -> tuple[float, float]:
        """Cell size ``(dy, dx)`` in metres at the domain centre.

        For a geographic CRS, the metres per degree of latitude and longitude at
        the centre latitude on the CRS's ellipsoid.
        """
        t = self.transform
        if self.is_geographic:
            per_lat, per_lon = _metres_per_degree(self.crs, self.centre[1])
            return (abs(t.e) * float(per_lat), abs(t.a) * float(per_lon))
        factor = 1.0 if self.crs is None else _linear_factor(self.crs)
        return (abs(t.e) * factor, abs(t.a) * factor)

    def north_up(self) -> GridGeometry:
        """The same cells with rows ordered north to south (negative y step)."""
        t = self.transform
        if t.e < 0:
            return self
        ny = self.shape[0]
        return GridGeometry(self.crs, Affine(t.a, 0.0, t.c, 0.0, -t.e, t.f + t.e * ny), self.shape)


def cell_areas(geometry: GridGeometry) -> np.ndarray:
    """Area of every cell (m², shape ``geometry.shape``).

    Geographic cells use the ellipsoidal area element M N cos φ dφ dλ at each cell
    centre (common practice); projected cells are ``|dx dy|`` in metres (exact
    for equal-area projections only).
    """
    if not geometry.is_geographic:
        dy, dx = geometry.cell_size_metres()
        return np.full(geometry.shape, dy * dx)
    t = geometry.transform
    lat, _ = geometry.coords()
    per_lat, per_lon = _metres_per_degree(geometry.crs, lat)
    row = abs(t.e) * per_lat * abs(t.a) * per_lon
    return np.repeat(row[:, None], geometry.shape[1], axis=1)


def _centre_lonlat(geometry: GridGeometry) -> tuple[float, float]:
    cx, cy = geometry.centre
    lon, lat = to_lonlat(np.array([cx]), np.array([cy]), geometry.crs)
    return float(lon[0]), float(lat[0])


def local_projection(geometry: GridGeometry) -> CRS | None:
    """A metric CRS in which to solve a grid.

    Geographic grids (and projected grids whose unit is not the metre) get a
    Lambert azimuthal equal-area projection on WGS84, in metres, centred on the
    domain's centre longitude/latitude: equal-area, so a load integrates to the
    same total force (Snyder 1987, *Map Projections: A Working Manual*, USGS PP
    1395, ch. 24). A projected grid in metres keeps its own CRS; an unknown CRS
    (``None``, metres) stays ``None``.

    Examples
    --------
    >>> g = GridGeometry(LONLAT, Affine(0.1, 0, -30.0, 0, -0.1, 20.0), (50, 60))
    >>> local_projection(g).to_dict()["proj"]
    'laea'
    """
    if geometry.crs is None:
        return None
    if geometry.crs.is_projected and _linear_factor(geometry.crs) == 1.0:
        return geometry.crs
    lon, lat = _centre_lonlat(geometry)
    lon = (lon + 180.0) % 360.0 - 180.0
    return CRS.from_proj4(
        f"+proj=laea +lat_0={lat:.6f} +lon_0={lon:.6f} +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"
    )


def same_crs(a: CRS | None, b: CRS | None) -> bool:
    """Both CRSs unknown, or both known and equal."""
    if a is None or b is None:
        return a is None and b is None
    return a == b


def check_alignable(src: CRS | None, dst: CRS | None) -> None:
    """Refuse to align a grid without a CRS with one that has a CRS."""
    if (src is None) != (dst is None):
        known = dst if src is None else src
        assert known is not None  # exactly one of the two is None
        raise InputError(
            "cannot align a grid with no coordinate reference system to one in "
            f"{known.to_string()[:60]!r}; give both grids a CRS (or neither)"
        )


def working_geometry(
    geometry: GridGeometry, crs: CRS | None, spacing: float | None = None
) -> GridGeometry:
    """A regular north-up grid in *crs* covering the footprint of *geometry*.

    Parameters
    ----------
    geometry : GridGeometry
        Source grid.
    crs : CRS or None
        Target CRS, in metres (see :func:`local_projection`).
    spacing : float, optional
        Cell size (m). Default: the smaller of the source's centre cell sizes in
        metres (:meth:`GridGeometry.cell_size_metres`).

    Returns
    -------
    GridGeometry
        Square cells of *spacing*, centred on the footprint's bounding box and
        covering it entirely (cells outside the source are filled with NaN by
        :func:`reproject_values`). If the source is already in *crs* with that
        cell size, its own cells (north-up).
    """
    check_alignable(geometry.crs, crs)
    if crs is not None and not crs.is_projected:
        raise InputError(f"working CRS must be projected (metres), got {crs.to_string()!r}")
    if spacing is None:
        spacing = min(geometry.cell_size_metres())
    spacing = float(spacing)
    if not (math.isfinite(spacing) and spacing > 0):
        raise InputError(f"spacing must be a positive number of metres, got {spacing!r}")
    t = geometry.transform
    if same_crs(geometry.crs, crs):
        factor = 1.0 if crs is None else _linear_factor(crs)
        if math.isclose(abs(t.a) * factor, spacing, rel_tol=1e-9) and math.isclose(
            abs(t.e) * factor, spacing, rel_tol=1e-9
        ):
            return geometry.north_up()
        left, bottom, right, top = geometry.bounds
    else:
        check_on_earth(geometry, "working grid")
        with rasterio.Env(), _proj_errors("working grid"):
            left, bottom, right, top = rasterio.warp.transform_bounds(
                geometry.crs, crs, *geometry.bounds, densify_pts=101
            )
    unit = spacing / (1.0 if crs is None else _linear_factor(crs))
    if not all(math.isfinite(v) for v in (left, bottom, right, top, (right - left) / unit)):
        raise InputError(
            f"working grid: the footprint ({left:.6g}, {bottom:.6g}, {right:.6g}, {top:.6g}) "
            f"cannot be covered with cells of {spacing:.6g} m; use a smaller domain"
        )
    nx = max(1, math.ceil((right - left) / unit - 1e-9))
    ny = max(1, math.ceil((top - bottom) / unit - 1e-9))
    cx, cy = 0.5 * (left + right), 0.5 * (bottom + top)
    transform = Affine(unit, 0.0, cx - 0.5 * nx * unit, 0.0, -unit, cy + 0.5 * ny * unit)
    return GridGeometry(crs, transform, (ny, nx))


_PROJ_ERRORS = (CPLE_BaseError, CRSError, RasterioError)


@contextmanager
def _proj_errors(what: str) -> Iterator[None]:
    """Turn a PROJ or GDAL failure while doing *what* into one :class:`InputError`."""
    try:
        yield
    except _PROJ_ERRORS as exc:
        raise InputError(
            f"{what}: the coordinates cannot be transformed ({exc}); a grid that reaches a "
            "pole or spans too much of the globe cannot be projected, use a smaller domain"
        ) from exc


_POLE_TOLERANCE = 1e-9  # degrees


def check_on_earth(geometry: GridGeometry, where: str, advice: str = "") -> None:
    """Refuse a geographic grid whose cells reach beyond a pole or wrap the globe.

    Parameters
    ----------
    geometry : GridGeometry
        The grid; grids in a projected CRS or without one are not checked.
    where : str
        File, table or key, for the message.
    advice : str, optional
        What to change (e.g. ``"use fewer rows or a smaller spacing"``).

    Raises
    ------
    InputError
        Cell edges beyond latitude ±90 or a longitude span over 360 degrees.
    """
    if not geometry.is_geographic:
        return
    left, bottom, right, top = geometry.bounds
    hint = f"; {advice}" if advice else ""
    if bottom < -90.0 - _POLE_TOLERANCE or top > 90.0 + _POLE_TOLERANCE:
        raise InputError(
            f"{where}: the grid spans latitudes {bottom:.6g} to {top:.6g}, beyond a pole "
            f"(latitudes lie within -90 to 90){hint}"
        )
    if right - left > 360.0 + _POLE_TOLERANCE:
        raise InputError(
            f"{where}: the grid spans {right - left:.6g} degrees of longitude, more than the "
            f"globe's 360{hint}"
        )


def _resampling(name: str) -> Resampling:
    try:
        return Resampling[name]
    except KeyError:
        raise InputError(
            f"resampling must be one of {', '.join(map(repr, RESAMPLING))}; got {name!r}"
        ) from None


def _same_cells(a: GridGeometry, b: GridGeometry) -> bool:
    """Same CRS, shape and (to 1e-6 of a cell) transform."""
    if not same_crs(a.crs, b.crs) or tuple(a.shape) != tuple(b.shape):
        return False
    cell = min(abs(a.transform.a), abs(a.transform.e))
    return all(
        abs(p - q) <= 1e-6 * cell for p, q in zip(a.transform[:6], b.transform[:6], strict=True)
    )


_STAND_IN = CRS.from_proj4("+proj=laea +lat_0=0 +lon_0=0 +datum=WGS84 +units=m +no_defs")


def reproject_values(
    values: np.ndarray, src: GridGeometry, dst: GridGeometry, resampling: str = "bilinear"
) -> np.ndarray:
    """Resample *values* from grid *src* onto grid *dst* (rasterio.warp.reproject).

    Parameters
    ----------
    values : numpy.ndarray
        Shape ``src.shape``; NaN marks missing values.
    src, dst : GridGeometry
        Source and destination grids (rows in either order).
    resampling : {"bilinear", "average", "nearest", "cubic"}, default "bilinear"
        GDAL resampling method. ``"average"`` suits coarsening a load.

    Returns
    -------
    numpy.ndarray
        float64, shape ``dst.shape``; NaN where *dst* lies outside *src* or on
        missing values.
    """
    method = _resampling(resampling)
    values = np.asarray(values, dtype=np.float64)
    if values.shape != tuple(src.shape):
        raise InputError(f"values have shape {values.shape}, the source grid {tuple(src.shape)}")
    check_alignable(src.crs, dst.crs)
    s_up, d_up = src.north_up(), dst.north_up()
    s_vals = values if s_up is src else values[::-1]
    if _same_cells(s_up, d_up):
        out = s_vals.copy()  # the same cells: no resampling error
    else:
        s_crs = src.crs if src.crs is not None else _STAND_IN
        d_crs = dst.crs if dst.crs is not None else _STAND_IN
        check_memory(
            8.0 * (2 * dst.shape[0] * dst.shape[1] + values.size),
            f"resampling onto a {dst.shape[0]} x {dst.shape[1]} grid",
        )
        out = np.full(dst.shape, np.nan)
        with rasterio.Env(), _proj_errors("resampling onto the working grid"):
            rasterio.warp.reproject(
                np.ascontiguousarray(s_vals),
                out,
                src_transform=s_up.transform,
                src_crs=s_crs,
                src_nodata=np.nan,
                dst_transform=d_up.transform,
                dst_crs=d_crs,
                dst_nodata=np.nan,
                resampling=method,
                num_threads=min(2, os.cpu_count() or 1),
            )
    return out if d_up is dst else out[::-1].copy()


def to_lonlat(x: Any, y: Any, crs: CRS | None) -> tuple[np.ndarray, np.ndarray]:
    """Longitude and latitude (degrees, WGS84, EPSG:4326) of points ``(x, y)`` in *crs*.

    Longitudes are wrapped into [-180, 180].

    Raises
    ------
    InputError
        If *crs* is None (an unknown CRS cannot be placed on the Earth).

    Examples
    --------
    >>> lon, lat = to_lonlat([200.0], [10.0], LONLAT)
    >>> float(lon[0]), float(lat[0])
    (-160.0, 10.0)
    """
    if crs is None:
        raise InputError(
            "the grid has no coordinate reference system, so it cannot be placed in "
            "longitude/latitude; give the input a CRS"
        )
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    shape = np.broadcast_shapes(x.shape, y.shape)
    xf = np.broadcast_to(x, shape).ravel()
    yf = np.broadcast_to(y, shape).ravel()
    if xf.size == 0:
        return xf.reshape(shape), yf.reshape(shape)
    if crs == LONLAT:
        lon, lat = xf.copy(), yf.copy()
    else:
        with rasterio.Env(), _proj_errors("longitude/latitude of the grid"):
            lon, lat = rasterio.warp.transform(crs, LONLAT, xf, yf)
        lon, lat = np.asarray(lon), np.asarray(lat)
    lon = np.where((lon > 180.0) | (lon < -180.0), (lon + 180.0) % 360.0 - 180.0, lon)
    return lon.reshape(shape), lat.reshape(shape)


def from_lonlat(lon: Any, lat: Any, crs: CRS) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates ``(x, y)`` in *crs* of points given in WGS84 longitude/latitude (degrees)."""
    lon = np.asarray(lon, dtype=np.float64)
    lat = np.asarray(lat, dtype=np.float64)
    shape = np.broadcast_shapes(lon.shape, lat.shape)
    with rasterio.Env(), _proj_errors("projecting longitude/latitude"):
        x, y = rasterio.warp.transform(
            LONLAT, crs, np.broadcast_to(lon, shape).ravel(), np.broadcast_to(lat, shape).ravel()
        )
    return np.asarray(x).reshape(shape), np.asarray(y).reshape(shape)


def geometry_of(da: xr.DataArray) -> GridGeometry:
    """The :class:`GridGeometry` of a grid (e.g. from :func:`gridflex.io.rasters.read_raster`).

    Uses the ``y``/``x`` coordinates and ``attrs["crs_wkt"]`` (missing or empty:
    unknown CRS in metres).
    """
    if not isinstance(da, xr.DataArray) or da.dims != ("y", "x"):
        raise InputError("expected a DataArray on dims ('y', 'x')")
    wkt = da.attrs.get("crs_wkt", "")
    label = da.name or "grid"
    crs = parse_crs(wkt, f"{label}: crs_wkt") if wkt else None
    try:
        return GridGeometry.from_coords(da["y"].values, da["x"].values, crs)
    except InputError as exc:
        raise InputError(f"{label}: {exc}") from exc
