"""Scenario load layers onto one metric working grid, and results back to the input grid.

Each ``[[loads]]`` layer is read (a raster or NetCDF file) or generated (a synthetic
shape on the ``[grid]`` table's grid), its missing values handled by its
``missing`` policy, and converted to vertical stress. The first layer's grid is the
*input grid*. If it is geographic, or the layers lie on different grids, or a
``[working_grid]`` spacing or projection is asked for, every layer is resampled onto
one regular grid in a metric projection (by default a Lambert azimuthal equal-area
projection centred on the domain), where the plate is solved; the results are then
resampled back onto the input grid.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from affine import Affine
from rasterio.crs import CRS

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.gis.geometry import (
    GridGeometry,
    check_on_earth,
    from_lonlat,
    geometry_of,
    local_projection,
    parse_crs,
    reproject_values,
    working_geometry,
)
from gridflex.gis.resampling import aggregate_values, sample_values
from gridflex.grid import GridSpec
from gridflex.loads import load_from_elevation, regional_surface
from gridflex.memory import check_memory
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
from gridflex.solvers.spectral import SpectralProblem
from gridflex.synthetic import (
    Points,
    disc_height,
    gaussian_height,
    grid_points,
    island_chain_height,
)
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.scenario_tables import array_table

__all__ = [
    "WorkingGrid",
    "WorkingLoad",
    "automatic_spacing",
    "build_working_layers",
    "build_working_load",
    "elevation_stress",
    "synthetic_grid",
    "input_grid_load",
    "restoring_stiffness",
    "to_input_grid",
    "working_load",
]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class WorkingGrid:
    """Where the solve happens and where its results go.

    Attributes
    ----------
    input : GridGeometry
        The first layer's grid; outputs are written on it.
    working : GridGeometry
        The metric grid of the solve.
    resampled : bool
        True when the working grid differs from the input grid.
    resampling : str
        Method used to resample the layers.
    input_layers : tuple of xarray.DataArray
        The layers as read, on the input grid (empty unless the working grid was
        resampled and every layer shares the input grid): what the load is on the
        input grid, for :func:`to_input_grid`.
    spacing_rule : str
        Where the working cell size came from: the input's cells, ``[working_grid]
        spacing``, or the smallest flexural parameter (:func:`automatic_spacing`).
    input_nodata : numpy.ndarray of bool or None
        Input cells without data in any layer on the input grid (carried no load; written
        back as nodata), or None when there are none.
    """

    input: GridGeometry
    working: GridGeometry
    resampled: bool
    resampling: str
    input_layers: tuple[xr.DataArray, ...] = ()
    spacing_rule: str = "input cells"
    input_nodata: np.ndarray | None = None

    def describe(self) -> dict[str, Any]:
        """Attributes recording the working grid (for output metadata)."""
        dy, dx = self.working.cell_size_metres()
        return {
            "working_grid_crs": self.working.crs.to_wkt() if self.working.crs else "",
            "working_grid_shape": np.array(self.working.shape, dtype=np.int64),
            "working_grid_spacing": float(min(dy, dx)),
            "working_grid_resampled": int(self.resampled),
            "working_grid_resampling": self.resampling if self.resampled else "none",
            "working_grid_spacing_rule": self.spacing_rule,
        }


def _as_dataarray(values: np.ndarray, geometry: GridGeometry, name: str) -> xr.DataArray:
    y, x = geometry.coords()
    da = xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name=name)
    da.attrs["crs_wkt"] = geometry.crs.to_wkt() if geometry.crs is not None else ""
    return da


def _crs_label(crs: CRS | None) -> str:
    """A short name of a CRS for messages: its EPSG code or its PROJ parameters."""
    if crs is None:
        return "plain metres"
    epsg = crs.to_epsg()
    if epsg is not None:
        return f"EPSG:{epsg}"
    params = crs.to_dict()
    return " ".join(f"+{k}={v}" for k, v in params.items() if k in ("proj", "lat_0", "lon_0"))


def synthetic_grid(table: Mapping[str, Any]) -> tuple[xr.DataArray, Points]:
    """The empty ``[grid]`` of a scenario and the metric positions of its cells.

    A grid without ``crs`` is metric, centred on (``center_x``, ``center_y``).
    A geographic ``crs`` gives a north-up longitude/latitude grid centred on
    (``center_x``, ``center_y``) degrees whose cells are ``spacing`` metres across
    at the centre; the cell positions are then those in a local equal-area
    projection centred on the grid, so shapes keep their size in metres.
    """
    rows, columns, spacing = table["rows"], table["columns"], float(table["spacing"])
    cx, cy = float(table["center_x"]), float(table["center_y"])
    crs = parse_crs(table["crs"], "[grid] crs") if table.get("crs") else None
    if crs is None or crs.is_projected:
        dx = dy = spacing
    else:
        probe = GridGeometry(crs, Affine(1.0, 0.0, cx - 0.5, 0.0, -1.0, cy + 0.5), (1, 1))
        per_lat, per_lon = probe.cell_size_metres()
        dy, dx = spacing / per_lat, spacing / per_lon
    transform = Affine(dx, 0.0, cx - 0.5 * columns * dx, 0.0, -dy, cy + 0.5 * rows * dy)
    geometry = GridGeometry(crs, transform, (rows, columns))
    check_on_earth(
        geometry,
        "[grid]",
        "use fewer rows or columns, a smaller spacing or a centre nearer the equator",
    )
    # the grid, the cell positions (x, y; lon, lat) and the shape generated on it
    check_memory(
        8 * rows * columns * SYNTHETIC_GRID_WORDS,
        f"a synthetic [grid] of {rows} x {columns} cells",
        advice="use fewer [grid] rows and columns (a coarser spacing)",
    )
    grid = _as_dataarray(np.zeros((rows, columns)), geometry, "grid")
    if crs is None or crs.is_projected:
        xx, yy, _, _ = grid_points(grid)
        return grid, (xx - cx, yy - cy, spacing, spacing)
    local = local_projection(geometry)
    lon, lat = np.meshgrid(grid["x"].values, grid["y"].values)
    xx, yy = from_lonlat(lon, lat, local)
    return grid, (xx, yy, spacing, spacing)


def _synthetic_layer(scenario: Scenario, layer: dict[str, Any]) -> xr.DataArray:
    grid, points = synthetic_grid(present(scenario.table("grid"), scenario.where("grid")))
    shape = layer["synthetic"]
    if shape == "island-chain":
        return island_chain_height(grid, points)
    centre = (layer["center_x"], layer["center_y"])
    if shape == "disc":
        return disc_height(grid, layer["radius"], layer["height"], *centre, points=points)
    return gaussian_height(grid, layer["radius"], layer["height"], *centre, points=points)


def _layer_values(scenario: Scenario, index: int) -> xr.DataArray:
    """A layer as read or generated, in SI: thickness or elevation (m), or stress (Pa)."""
    layer = array_table(scenario, "loads")[index]
    if layer["file"] is None:
        return _synthetic_layer(scenario, layer)
    return read_grid_input(
        layer["file"],
        layer["variable"],
        scenario.where("loads", index=index),
        role=layer["kind"],  # thickness >= 0, elevation within 11 km, stress in Pa
        missing=layer["missing"],
        missing_hint='set missing = "zero" to treat them as no load',
        elevation=layer["kind"] == "elevation",
        keep_nan=True,  # no load, and written back as nodata (build_working_layers)
    )


def elevation_stress(
    scenario: Scenario, index: int, elevation: xr.DataArray, regional: Any = None
) -> xr.Dataset:
    """Load of an elevation layer (see :func:`load_from_elevation`): the rock above the
    regional surface, buoyed by sea water below sea level; cells without data are the
    regional surface (no edifice).

    *regional* (m, a number or a grid like *elevation*) replaces the layer's own
    ``regional_elevation`` or ``regional_radius`` surface (the working grid's surface
    read back onto the input grid, :func:`input_grid_load`).
    """
    layer = array_table(scenario, "loads")[index]
    infill: Mapping[str, Any] = scenario.table("infill") or {}
    if regional is None:
        regional = layer["regional_elevation"]
    missing = np.isnan(elevation.values)
    with error_context(scenario.where("loads", index=index)):
        if regional is None:
            # the median smoothing sees the missing cells at the layer's median level
            known = elevation.fillna(float(np.nanmedian(elevation.values)))
            regional = regional_surface(known, layer["regional_radius"])
        if missing.any():  # no data: no edifice, the surface at the regional level
            level = regional.values if isinstance(regional, xr.DataArray) else regional
            elevation = elevation.copy(data=np.where(missing, level, elevation.values))
        return load_from_elevation(
            elevation,
            layer["density"],
            regional,
            sea_level=infill.get("sea_level", 0.0),
            water_density=infill.get("water_density", SEA_WATER_DENSITY),
            gravity=scenario.table("plate")["gravity"],
        )


def _onto_working(
    values: np.ndarray, src: GridGeometry, dst: GridGeometry, method: str, kind: str
) -> np.ndarray:
    """A layer moved onto the working grid.

    ``"average"`` aggregates by area (:func:`gridflex.gis.resampling.aggregate_values`):
    a thickness or stress keeps its integral (the total force), an elevation the mean
    of what covers each cell. The other methods interpolate (GDAL).
    """
    if method == "average":
        return aggregate_values(values, src, dst, "mean" if kind == "elevation" else "sum")
    return reproject_values(values, src, dst, method)


SYNTHETIC_GRID_WORDS = 8
"""float64 grids a synthetic ``[grid]`` layer holds while it is generated (the grid, cell
positions in metres and degrees, the shape and its sub-sampling)."""
WORKING_GRID_WORDS = 4
"""float64 grids besides the layers a working grid needs before the solve (the load by
part, the nodata mask, the load)."""

SPACING_PER_FLEXURAL_PARAMETER = 16
"""Automatic working cells are the smallest flexural parameter / this (see
:func:`automatic_spacing`)."""
COARSEN_BELOW = 4
"""Input cells are coarsened automatically only when this many times finer than needed."""


def _widened(geometry: GridGeometry, margin: float) -> GridGeometry:
    """*geometry* (north-up) with whole cells added on every side to reach *margin* (m)."""
    if not margin > 0:
        return geometry
    t = geometry.transform
    n = int(np.ceil(margin / abs(t.a)))
    ny, nx = geometry.shape
    widened = Affine(t.a, 0.0, t.c - n * t.a, 0.0, t.e, t.f - n * t.e)
    return GridGeometry(geometry.crs, widened, (ny + 2 * n, nx + 2 * n))


def automatic_spacing(input_cell: float, flexural_parameter: float | None) -> float | None:
    """The working cell size (m) for an input much finer than the flexure needs.

    The plate smooths the load over its flexural parameter alpha; cells of alpha / 16
    resolve the deflection to a few per mille of its peak (measured on rough loads, see
    DEVELOPERS.md), and the load detail finer than two working cells is added back on
    the input grid (:func:`to_input_grid`). Inputs are coarsened only when their cells
    are at least 4 times finer than alpha / 16; otherwise (and with no plate stiffness,
    alpha = 0) the input's own cells are used.

    Parameters
    ----------
    input_cell : float
        The input's smaller cell size (m).
    flexural_parameter : float or None
        The smallest flexural parameter of the plate (m); None when not known.

    Returns
    -------
    float or None
        The spacing (m), or None to keep the input's cells.
    """
    if flexural_parameter is None or not flexural_parameter > 0:
        return None
    spacing = flexural_parameter / SPACING_PER_FLEXURAL_PARAMETER
    return spacing if input_cell * COARSEN_BELOW <= spacing else None


def build_working_layers(
    scenario: Scenario, flexural_parameter: float | None = None, margin: float = 0.0
) -> tuple[list[xr.DataArray], WorkingGrid]:
    """Every ``[[loads]]`` layer on the working grid, in its own quantity (SI).

    Without ``[working_grid] spacing``, an input much finer than the plate needs is
    aggregated onto cells of *flexural_parameter* / 16 (:func:`automatic_spacing`).

    Returns
    -------
    layers : list of xarray.DataArray
        Per layer, in scenario order: thickness or elevation (m) or stress (Pa) on dims
        ``("y", "x")`` in metres of the working CRS. Outside a resampled layer a
        thickness or stress is 0 and an elevation is NaN (no data: set to the regional
        surface by :func:`elevation_stress`).
    grid : WorkingGrid
        Input and working geometries.

    Raises
    ------
    InputError
        Unreadable layers, wrong units, grids that cannot be aligned (one with a
        CRS and one without), all-nodata layers.
    """
    options = scenario.table("working_grid")
    layers = array_table(scenario, "loads")
    stresses = [_layer_values(scenario, i) for i in range(len(layers))]
    geometries = [geometry_of(s) for s in stresses]
    first = geometries[0]
    crs: CRS | None
    if options["projection"]:
        crs = parse_crs(options["projection"], f"{scenario.where('working_grid', 'projection')}")
    else:
        crs = local_projection(first)
    same = all(g == first for g in geometries[1:])
    spacing, method = options["spacing"], options["resampling"]
    rule = "input cells" if spacing is None else "[working_grid] spacing"
    if spacing is None:
        spacing = automatic_spacing(min(first.cell_size_metres()), flexural_parameter)
        if spacing is not None:
            method = "average"  # many input cells to one: aggregate, keeping the force
            rule = f"smallest flexural parameter / {SPACING_PER_FLEXURAL_PARAMETER}"
            log.info(
                "input cells %.4g m are much finer than the plate needs: working cells "
                "of %.4g m (flexural parameter %.4g m / %d)",
                min(first.cell_size_metres()),
                spacing,
                flexural_parameter,
                SPACING_PER_FLEXURAL_PARAMETER,
            )
    target = _widened(working_geometry(first, crs, spacing), margin)
    ny, nx = target.shape
    check_memory(  # each layer, the load by part and the solve's own grids (checked there)
        8 * ny * nx * (len(layers) + WORKING_GRID_WORDS),
        f"a working grid of {ny} x {nx} cells of {min(target.cell_size_metres()):.4g} m",
        advice=f"use a coarser [working_grid] spacing (the {rule} gave this grid)",
    )
    resampled = not (
        margin == 0.0
        and same
        and target == first.north_up()
        and (crs == first.crs or (crs is None and first.crs is None))
    )
    if not resampled:
        target = first
    out = []
    for layer, stress, geometry in zip(layers, stresses, geometries, strict=True):
        values = stress.values
        if resampled:
            values = _onto_working(values, geometry, target, method, layer["kind"])
        if layer["kind"] != "elevation":  # no data, or outside a layer: no load
            values = np.nan_to_num(values, nan=0.0)  # (elevations: see elevation_stress)
        out.append(_as_dataarray(values, target, str(layer["name"] or "layer")))
    nodata = [np.isnan(s.values) for s, g in zip(stresses, geometries, strict=True) if g == first]
    input_nodata = np.logical_or.reduce(nodata) if nodata else None
    if input_nodata is not None and not input_nodata.any():
        input_nodata = None
    kept = tuple(stresses) if resampled and same else ()
    grid = WorkingGrid(first, target, resampled, method, kept, rule, input_nodata)
    if resampled:
        log.info("layers resampled onto a %s working grid (%s)", target.shape, _crs_label(crs))
    return out, grid


@dataclass(frozen=True)
class WorkingLoad:
    """The load of a scenario's layers on the working grid, kept by part.

    Thickness layers are kept apart so the load can be rebuilt for another density
    without reading the files again (picklable: a sweep's tasks call it).

    Attributes
    ----------
    fixed : numpy.ndarray
        Stress of the stress and elevation layers (Pa, positive down), ``(ny, nx)``.
    thickness : tuple of (numpy.ndarray, float, float)
        Per thickness layer: its thickness (m), density and displaced density (kg m⁻³).
    gravity : float
        Gravitational acceleration (m s⁻²).
    working : GridGeometry
        The working grid.
    regional : tuple of numpy.ndarray or None
        Per layer, the regional surface (m) of an elevation layer on the working grid;
        None for the other kinds.
    """

    fixed: np.ndarray
    thickness: tuple[tuple[np.ndarray, float, float], ...]
    gravity: float
    working: GridGeometry
    regional: tuple[np.ndarray | None, ...] = ()

    def __call__(self, load_density: float | None = None) -> xr.DataArray:
        """Total vertical stress (Pa, positive down) on the working grid.

        Parameters
        ----------
        load_density : float, optional
            Density (kg m⁻³) given to every thickness layer instead of its own.
        """
        total = self.fixed.copy()
        for height, density, displaced in self.thickness:
            rho = density if load_density is None else float(load_density)
            total += height * ((rho - displaced) * self.gravity)
        load = _as_dataarray(total, self.working, "load")
        load.attrs.update(units="Pa", long_name="vertical stress of the load (positive downward)")
        return load


def working_load(
    scenario: Scenario, flexural_parameter: float | None = None, margin: float = 0.0
) -> tuple[WorkingLoad, WorkingGrid]:
    """The load of the ``[[loads]]`` layers on the working grid, by part.

    A thickness layer presses with (density - displaced_density) g h, a stress layer
    as it is, an elevation layer with its rock above the regional surface
    (:func:`elevation_stress`).

    Raises
    ------
    InputError
        As :func:`build_working_layers`.
    """
    gravity = scenario.table("plate")["gravity"]
    values, grid = build_working_layers(scenario, flexural_parameter, margin)
    fixed = np.zeros(grid.working.shape)
    thickness = []
    regional: list[np.ndarray | None] = []
    for index, (layer, da) in enumerate(zip(array_table(scenario, "loads"), values, strict=True)):
        surface = None
        if layer["kind"] == "thickness":
            thickness.append((da.values, layer["density"], layer["displaced_density"]))
        elif layer["kind"] == "elevation":
            column = elevation_stress(scenario, index, da)
            fixed += column["load"].values
            surface = column["reference_surface"].values
        else:
            fixed += da.values
        regional.append(surface)
    parts = WorkingLoad(fixed, tuple(thickness), gravity, grid.working, tuple(regional))
    return parts, grid


def build_working_load(scenario: Scenario) -> tuple[xr.DataArray, WorkingGrid]:
    """Total vertical stress (Pa, positive down) of the layers, on the working grid.

    See :func:`working_load`.

    Returns
    -------
    load : xarray.DataArray
        On dims ``("y", "x")`` in metres of the working CRS.
    grid : WorkingGrid
        Input and working geometries.

    Raises
    ------
    InputError
        As :func:`build_working_layers`.
    """
    parts, grid = working_load(scenario)
    return parts(), grid


def input_grid_load(scenario: Scenario, grid: WorkingGrid, parts: WorkingLoad) -> np.ndarray | None:
    """The load (Pa) of the ``[[loads]]`` layers on the input grid, cell by cell.

    Thickness and stress layers as read; an elevation layer through
    :func:`load_from_elevation` with its regional surface from the working grid (a
    smooth surface: sampled back). Missing cells carry no load. ``None`` when the
    layers were not kept (no resampling, or layers on different grids).
    """
    if not grid.input_layers:
        return None
    gravity = scenario.table("plate")["gravity"]
    total = np.zeros(grid.input.shape)
    specs = array_table(scenario, "loads")
    for index, (layer, da) in enumerate(zip(specs, grid.input_layers, strict=True)):
        values = np.asarray(da.values, dtype=np.float64)
        if layer["kind"] == "thickness":
            part = values * ((layer["density"] - layer["displaced_density"]) * gravity)
        elif layer["kind"] == "stress":
            part = values
        else:
            surface = parts.regional[index]
            if surface is None:
                return None
            regional = sample_values(surface, grid.working, grid.input)
            if not np.isfinite(regional).all():
                return None
            part = elevation_stress(scenario, index, da, da.copy(data=regional))["load"].values
        total += np.nan_to_num(part)
    return total


def restoring_stiffness(attrs: Mapping[str, Any]) -> float | None:
    """(rho_m - rho_infill) g (Pa/m) from a result's plate attributes (None when the
    infill density is not one number)."""
    try:
        contrast = float(attrs["plate_mantle_density"]) - float(attrs["plate_infill_density"])
        return contrast * float(attrs["plate_gravity"])
    except (KeyError, TypeError, ValueError):
        return None


_NEGLIGIBLE_SHARE = 1e-4
"""Below this share of the local response at the working grid's finest wavelength, the
unresolved load's response is taken as zero (no solve on the input grid)."""
_RIGIDITY_LEVELS = 8


def _share_at(rigidity: float, stiffness: float, spacing: float) -> float:
    """K / (K + D k⁴) at the Nyquist wavenumber k = π / spacing (PHYSICS.md 1.1)."""
    return stiffness / (stiffness + rigidity * (np.pi / spacing) ** 4)


def _rigidity_levels(rigidity: np.ndarray) -> np.ndarray:
    """Constant rigidities (N m) spanning a rigidity grid: 0 if present, then log-spaced."""
    positive = rigidity[rigidity > 0]
    if positive.size == 0:
        return np.zeros(1)
    low, high = float(positive.min()), float(positive.max())
    levels = np.geomspace(low, high, _RIGIDITY_LEVELS) if high > low else np.array([high])
    return np.concatenate([[0.0], levels]) if (rigidity <= 0).any() else levels


def _unresolved_response(
    unresolved: np.ndarray,
    grid: WorkingGrid,
    rigidity: float | np.ndarray,
    stiffness: float,
) -> np.ndarray:
    """Deflection (m) of the input grid under the load the working grid could not carry.

    The residual holds only wavelengths shorter than about two working cells, whose
    response is local: it is solved on the input grid, taken as metric with its cell
    size at the domain centre, by the spectral solver (infinite edges) for a constant
    rigidity, or for a few constant levels between which each cell interpolates in log
    rigidity. In-plane forces are left out of this small term.
    """
    spacing = max(grid.working.cell_size_metres())
    dy, dx = grid.input.cell_size_metres()
    spec = GridSpec(grid.input.shape[0], grid.input.shape[1], dy, dx)
    per_cell = np.asarray(rigidity, dtype=np.float64)
    levels = _rigidity_levels(per_cell.ravel()) if per_cell.ndim else per_cell.reshape(1)
    responses = []
    for level in levels:
        if _share_at(float(level), stiffness, spacing) < _NEGLIGIBLE_SHARE:
            responses.append(np.zeros(spec.shape))
            continue
        problem = SpectralProblem.build(spec, float(level), stiffness)
        responses.append(problem.deflection(unresolved)[0])
    if len(responses) == 1:
        return responses[0]
    floor = float(levels[levels > 0].min()) / 10.0
    scale = np.log10(levels + floor)
    position = np.interp(np.log10(per_cell + floor), scale, np.arange(scale.size))
    lower = np.clip(np.floor(position).astype(np.int64), 0, scale.size - 2)
    weight = position - lower
    stack = np.stack(responses)
    rows, cols = np.indices(spec.shape)
    return (1 - weight) * stack[lower, rows, cols] + weight * stack[lower + 1, rows, cols]


def to_input_grid(
    result: xr.Dataset,
    grid: WorkingGrid,
    input_load: np.ndarray | None = None,
    rigidity: float | np.ndarray | None = None,
) -> xr.Dataset:
    """Every ``(y, x)`` variable of *result* on the input grid.

    Returns *result* unchanged when no resampling was needed. Each value is read at
    the input cell's centre (bilinear between working cells,
    :func:`gridflex.gis.resampling.sample_values`), so nothing is widened. When the
    load on the input grid is known (*input_load*, Pa) it is written as the load,
    and the plate's response to the part of it the working grid could not carry,
    r = q_in - q_sampled (wavelengths below about two working cells), is added to
    the deflection (solved on the input grid, :func:`_unresolved_response`). With
    te = 0 this gives w = q / ((ρm - ρinfill) g) cell by cell (local isostasy) at any
    working spacing; on a plate stiff at the working cell's scale the added part is
    ~0 and w is the sampled one.

    Parameters
    ----------
    result : xarray.Dataset
        On the working grid.
    grid : WorkingGrid
        Its geometries.
    input_load : numpy.ndarray, optional
        The load (Pa) on the input grid (:func:`input_grid_load`).
    rigidity : float or numpy.ndarray, optional
        Flexural rigidity (N m), constant or on the working grid; default the
        result's ``plate_rigidity`` attribute. Without it no share is added.
    """
    if not grid.resampled:
        return result
    y, x = grid.input.coords()
    out = xr.Dataset(coords={"y": y, "x": x}, attrs=dict(result.attrs))
    plate = _plate_response(result, input_load, rigidity)
    spacing = max(grid.working.cell_size_metres())
    needs_residual = plate is not None and (
        _share_at(plate.smallest, plate.stiffness, spacing) >= _NEGLIGIBLE_SHARE
    )
    for name, var in result.data_vars.items():
        if name == "load" and plate is not None and not needs_residual:
            continue  # the input load itself is written: no need to read the working one back
        if var.dims == ("y", "x"):
            values = sample_values(var.values, grid.working, grid.input)
            out[name] = xr.DataArray(values, dims=("y", "x"), attrs=dict(var.attrs))
        else:
            out[name] = var
    if plate is not None and input_load is not None:
        if needs_residual:
            unresolved = np.nan_to_num(input_load - out["load"].values)
            rigidity_in = plate.rigidity
            if np.ndim(rigidity_in):
                rigidity_in = sample_values(np.asarray(rigidity_in), grid.working, grid.input)
            response = _unresolved_response(unresolved, grid, rigidity_in, plate.stiffness)
            out["deflection"] = out["deflection"].copy(data=out["deflection"].values + response)
        out["load"] = xr.DataArray(input_load, dims=("y", "x"), attrs=dict(result["load"].attrs))
    out = out[[name for name in result.data_vars if name in out.data_vars]]
    if grid.input.is_geographic:
        out["x"].attrs = {"units": "degrees_east"}
        out["y"].attrs = {"units": "degrees_north"}
    else:
        out["x"].attrs = {"units": "m"}
        out["y"].attrs = {"units": "m"}
    return out


@dataclass(frozen=True)
class _PlateResponse:
    """What the unresolved load's response needs: K (Pa/m), D (N m, constant or on the
    working grid) and the smallest D."""

    stiffness: float
    rigidity: float | np.ndarray
    smallest: float


def _plate_response(
    result: xr.Dataset, input_load: np.ndarray | None, rigidity: float | np.ndarray | None
) -> _PlateResponse | None:
    """The plate behind *result* when the input-grid load can be written and its
    unresolved part added (a plain solve, one infill density); else None."""
    stiffness = restoring_stiffness(result.attrs)
    if rigidity is None and "plate_rigidity" in result.attrs:
        rigidity = float(result.attrs["plate_rigidity"])
    if (
        input_load is None
        or rigidity is None
        or stiffness is None
        or stiffness <= 0
        or "moat_fill" in result
        or not {"load", "deflection"} <= set(result.data_vars)
    ):
        return None
    smallest = float(np.min(rigidity)) if np.ndim(rigidity) else float(rigidity)
    return _PlateResponse(stiffness, rigidity, max(smallest, 0.0))
