"""The one way a workflow reads a grid file and puts it on its working grid.

Every grid a scenario names (load layers, Te grids, break masks, observations,
basin surfaces and layers, the bed of an ice history) comes through
:func:`read_grid_input`, so one rule set holds for all of them:

- **Units.** The CF ``units`` attribute of the variable (the band unit of a
  GeoTIFF) is honoured through :mod:`gridflex.units` (lengths m, km, cm, mm, ft;
  densities kg m-3, g cm-3; stresses Pa, kPa, MPa); a grid without one is taken in
  the SI unit of its quantity (m, Pa); a unit of another kind (``Pa`` on a
  thickness) or an unknown one is refused, naming the file and variable.
- **Missing cells.** Nodata, ``_FillValue``, ``missing_value``, values outside
  ``valid_range`` and netCDF's default fill values are missing
  (:func:`gridflex.io.rasters.netcdf_missing`); they follow one explicit policy
  (:func:`apply_missing_policy`): ``"error"`` refuses them, ``"zero"`` fills them
  (with a :class:`~gridflex.errors.NodataWarning`), ``"keep"`` leaves them as NaN
  for the caller (an observation with gaps). Nothing is zeroed silently.
- **Physical range.** A *role* (:data:`gridflex.validation.GRID_ROLES`) gives the
  quantity and its range, checked after the unit conversion
  (:func:`gridflex.validation.check_grid_range`): thicknesses not negative,
  elevations and depths within 11 km of sea level, ice at most 5000 m thick.
- **Coordinates.** An axis within 1 % of a step of a regular one is snapped onto
  it; a truly irregular axis is resampled linearly onto a regular one, except for
  masks and classes, which are refused (:func:`gridflex.io.rasters.regular_axis`).
- **Row order.** Grids come back with both coordinates increasing (rows south to
  north, as most NetCDF files store them), whatever the file's order
  (:func:`gridflex.io.rasters.increasing_axes`); a grid checked against a
  reference grid comes back in the reference's order. A north-up GeoTIFF and a
  south-up NetCDF of the same cells are the same grid.
- **Geographic grids** are recognised from the CRS only (a longitude/latitude
  CRS), never from the wording of coordinate units.
- **Grid placement.** A grid on another geometry than the working grid is
  resampled onto it; otherwise it must lie on the reference grid, checked with one
  message that names the file.
"""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import numpy as np
import xarray as xr

from gridflex.errors import InputError, NodataWarning
from gridflex.gis.geometry import GridGeometry, geometry_of, reproject_values, same_crs
from gridflex.grid import check_same_grid
from gridflex.io.rasters import MISSING_POLICIES, increasing_axes, read_raster
from gridflex.scenario.context import error_context
from gridflex.units import si_unit, unit_factor
from gridflex.validation import GRID_ROLES, check_grid_range

__all__ = [
    "GRID_ROLES",
    "MISSING_POLICIES",
    "apply_missing_policy",
    "in_si_units",
    "read_grid_input",
    "si_unit",
]

log = logging.getLogger(__name__)


def apply_missing_policy(
    da: xr.DataArray,
    policy: str,
    where: str,
    elevation: bool = False,
    hint: str = "",
    keep_nan: bool = False,
) -> xr.DataArray:
    """*da* with its nodata/NaN cells handled by *policy*.

    Parameters
    ----------
    da : xarray.DataArray
        A grid (any dims) with missing cells as NaN.
    policy : {"error", "zero", "keep"}
        ``"error"``: refuse missing cells; ``"zero"``: fill them with 0 (no load) and
        warn, or, for an *elevation*, warn and leave them NaN for the load to set to
        its regional surface (no edifice there); ``"keep"``: leave them NaN.
    where : str
        The file and scenario key, for messages.
    elevation : bool, default False
        The grid is a surface elevation (m): ``"zero"`` leaves missing cells NaN.
    hint : str, optional
        What else the user may do, added to the ``"error"`` message.
    keep_nan : bool, default False
        With ``"zero"``: warn but leave the cells NaN, for a caller that loads them as
        zero and writes them back as nodata.

    Raises
    ------
    InputError
        Every cell missing (any policy), or any cell missing with ``"error"``.
    """
    if policy not in MISSING_POLICIES:
        raise InputError(
            f"{where}: missing policy must be one of {MISSING_POLICIES}, got {policy!r}"
        )
    missing = ~np.isfinite(np.asarray(da.values, dtype=np.float64))
    count = int(missing.sum())
    if count == 0 or policy == "keep" and count < missing.size:
        return da
    if count == missing.size:
        raise InputError(f"{where}: the layer has no valid value (all nodata)")
    if policy == "error":
        raise InputError(
            f"{where}: {count} nodata or NaN cell(s); fill them" + (f", or {hint}" if hint else "")
        )
    if elevation:  # no load there: the load sets them to its regional surface
        warnings.warn(
            f"{where}: {count} nodata or NaN cell(s) taken as no edifice (they get the "
            "regional surface: no load)",
            NodataWarning,
            stacklevel=4,
        )
        return da
    written = " (written as nodata)" if keep_nan else ""
    warnings.warn(
        f"{where}: {count} nodata or NaN cell(s) taken as zero load{written}",
        NodataWarning,
        stacklevel=4,
    )
    return da if keep_nan else da.fillna(0.0)


def in_si_units(da: xr.DataArray, dimension: str | None, where: str) -> xr.DataArray:
    """*da* converted to the SI unit of *dimension* by its CF ``units`` attribute.

    A grid without ``units`` is taken in SI already; ``dimension=None`` (no unit,
    e.g. a mask) returns *da* unchanged. ``attrs["units"]`` of the result is the SI unit.

    Raises
    ------
    InputError
        A unit that is not one of *dimension* (naming *where* and the variable).
    """
    if dimension is None:
        return da
    si = si_unit(dimension)
    units = str(da.attrs.get("units", "") or "").strip() or si
    factor = unit_factor(units, dimension, f"{where}: variable {da.name!r}")
    out = da.copy(data=np.asarray(da.values, dtype=np.float64) * factor)
    out.attrs["units"] = si
    return out


def _onto(
    da: xr.DataArray,
    where: str,
    reference: xr.DataArray,
    working: GridGeometry | None,
    resampling: str,
    missing: str,
) -> xr.DataArray:
    """*da* resampled onto *working*, or checked to lie on *reference*'s grid (rows and
    columns put in *reference*'s order first)."""
    flips = {
        dim: slice(None, None, -1)
        for dim in ("y", "x")
        if da.sizes[dim] > 1
        and reference.sizes.get(dim, 0) > 1
        and (float(da[dim][-1] - da[dim][0]) > 0)
        != (float(reference[dim][-1] - reference[dim][0]) > 0)
    }
    da = da.isel(flips) if flips else da
    geometry = geometry_of(da)
    if working is not None and geometry != working:
        values = reproject_values(
            np.asarray(da.values, dtype=np.float64), geometry, working, resampling
        )
        outside = int((~np.isfinite(values)).sum())
        if outside and missing != "keep":
            raise InputError(
                f"{where}: variable {da.name!r} leaves {outside} cell(s) of the working "
                "grid without a value; it must cover the load grid"
            )
    else:
        check_same_grid(da, reference, f"{where}: variable {da.name!r}")
        theirs = geometry_of(reference).crs
        if geometry.crs is not None and theirs is not None and not same_crs(geometry.crs, theirs):
            raise InputError(
                f"{where}: variable {da.name!r} has the grid's coordinates but another "
                "coordinate reference system; give it the grid's CRS"
            )
        values = np.asarray(da.values, dtype=np.float64)
    return xr.DataArray(
        values,
        dims=reference.dims,
        coords={name: reference[name].values for name in reference.dims},
        name=da.name,
        attrs={k: v for k, v in da.attrs.items() if k != "crs_wkt"}
        | {"crs_wkt": reference.attrs.get("crs_wkt", "")},
    )


def read_grid_input(
    path: str | Path,
    variable: str | None,
    where: str,
    *,
    dimension: str | None = "length",
    missing: str = "error",
    missing_hint: str = "",
    elevation: bool = False,
    metric: bool = False,
    reference: xr.DataArray | None = None,
    working: GridGeometry | None = None,
    resampling: str = "bilinear",
    role: str | None = None,
    keep_nan: bool = False,
) -> xr.DataArray:
    """A grid file (GeoTIFF or NetCDF) read as a scenario input, in SI, on the working grid.

    See the module's rules: units, missing cells, physical range, coordinates, row
    order, placement.

    Parameters
    ----------
    path : str or pathlib.Path
        The file.
    variable : str or None
        NetCDF variable or band (see :func:`gridflex.io.rasters.read_raster`).
    where : str
        The scenario key that names the file (``scenario.where(...)``), for messages;
        the file name is added.
    dimension : str or None, default "length"
        Quantity of the values (a :data:`gridflex.units.DIMENSIONS` key); ``None`` for
        values without a unit (masks), whose ``units`` attribute is not read.
    missing : {"error", "zero", "keep"}, default "error"
        Policy for nodata/NaN cells (:func:`apply_missing_policy`); with a
        *working* grid it also decides the cells the file does not cover.
    missing_hint : str, optional
        What else the user may do about missing cells (e.g. a policy key to set).
    elevation : bool, default False
        The values are a surface elevation (``"zero"`` keeps missing cells NaN, for
        :func:`gridflex.workflows.layers.elevation_stress` to set to the regional
        surface).
    metric : bool, default False
        Refuse a grid in a geographic (longitude/latitude) CRS: the caller cannot
        resample it.
    reference : xarray.DataArray, optional
        The grid the result must lie on (dims ``("y", "x")``, metres of the working
        CRS). Without it the grid is returned as read (converted to SI).
    working : GridGeometry, optional
        Geometry of *reference*. When given and the file's geometry differs, the
        grid is resampled onto it with *resampling*; otherwise it must have
        *reference*'s coordinates.
    resampling : str, default "bilinear"
        ``"bilinear"`` for continuous values, ``"nearest"`` for masks and classes
        (which are then never interpolated along an irregular file axis either).
    role : str, optional
        What the grid is, a :data:`gridflex.validation.GRID_ROLES` key
        (``"thickness"``, ``"elevation"``, ``"depth"``, ``"ice_thickness"``,
        ``"elastic_thickness"``, ``"stress"``, ...): its quantity replaces
        *dimension*, and values outside its physical range are refused. Default:
        ``"elevation"`` when *elevation* is set, else no range check.

    keep_nan : bool, default False
        With ``missing="zero"``: warn but leave missing cells NaN (the caller loads them
        as zero and writes them back as nodata).

    Returns
    -------
    xarray.DataArray
        float64 on dims ``("y", "x")``, ``y`` and ``x`` increasing (rows south
        to north), or in *reference*'s order; ``attrs["units"]`` is the SI unit
        when *dimension* is given, ``attrs["crs_wkt"]`` the CRS of the grid returned.

    Raises
    ------
    InputError
        Unreadable file, unknown unit or one of another quantity, refused missing
        cells, values out of the role's range (count and worst value), irregular
        coordinates of a mask, geographic grid where a metric one is needed, a grid
        not on the reference grid; the message names *where* and the file.
    """
    path = Path(path)
    label = f"{where}: {path.name}"
    if role is None and elevation:
        role = "elevation"
    if role is not None:
        if role not in GRID_ROLES:
            raise ValueError(f"role must be one of {', '.join(GRID_ROLES)}, got {role!r}")
        dimension = GRID_ROLES[role].dimension
        elevation = elevation or role == "elevation"
    classes = dimension is None or resampling == "nearest"
    with error_context(where):
        da = read_raster(path, variable, irregular="refuse" if classes else "resample")
    if metric and geometry_of(da).is_geographic:
        raise InputError(
            f"{label}: variable {da.name!r} is in longitude/latitude (geographic CRS); "
            "this run needs a grid in a metric projection"
        )
    da = increasing_axes(da)
    da = apply_missing_policy(da, missing, label, elevation, missing_hint, keep_nan)
    da = in_si_units(da, dimension, label)
    if role is not None:
        check_grid_range(da.values, role, f"{label}: variable {da.name!r}")
    if reference is None:
        return da
    return _onto(da, label, reference, working, resampling, missing)
