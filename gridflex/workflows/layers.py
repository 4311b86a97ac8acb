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
    from_lonlat,
    geometry_of,
    local_projection,
    parse_crs,
    reproject_values,
    working_geometry,
)
from gridflex.loads import load_from_elevation, regional_surface
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
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
    "build_working_layers",
    "build_working_load",
    "elevation_stress",
    "synthetic_grid",
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
    """

    input: GridGeometry
    working: GridGeometry
    resampled: bool
    resampling: str

    def describe(self) -> dict[str, Any]:
        """Attributes recording the working grid (for output metadata)."""
        dy, dx = self.working.cell_size_metres()
        return {
            "working_grid_crs": self.working.crs.to_wkt() if self.working.crs else "",
            "working_grid_shape": np.array(self.working.shape, dtype=np.int64),
            "working_grid_spacing": float(min(dy, dx)),
            "working_grid_resampled": int(self.resampled),
            "working_grid_resampling": self.resampling if self.resampled else "none",
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
        dimension="pressure" if layer["kind"] == "stress" else "length",
        missing=layer["missing"],
        missing_hint='set missing = "zero" to treat them as no load',
        elevation=layer["kind"] == "elevation",
    )


def elevation_stress(scenario: Scenario, index: int, elevation: xr.DataArray) -> xr.Dataset:
    """Load of an elevation layer on the working grid (see :func:`load_from_elevation`):
    the rock above the regional surface, buoyed by sea water below sea level."""
    layer = array_table(scenario, "loads")[index]
    infill: Mapping[str, Any] = scenario.table("infill") or {}
    regional: Any = layer["regional_elevation"]
    with error_context(scenario.where("loads", index=index)):
        if regional is None:
            regional = regional_surface(elevation, layer["regional_radius"])
        return load_from_elevation(
            elevation,
            layer["density"],
            regional,
            sea_level=infill.get("sea_level", 0.0),
            water_density=infill.get("water_density", SEA_WATER_DENSITY),
            gravity=scenario.table("plate")["gravity"],
        )


def build_working_layers(scenario: Scenario) -> tuple[list[xr.DataArray], WorkingGrid]:
    """Every ``[[loads]]`` layer on the working grid, in its own quantity (SI).

    Returns
    -------
    layers : list of xarray.DataArray
        Per layer, in scenario order: thickness or elevation (m) or stress (Pa) on dims
        ``("y", "x")`` in metres of the working CRS. Outside a resampled layer a
        thickness or stress is 0 and an elevation is the layer's median.
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
    target = working_geometry(first, crs, options["spacing"])
    resampled = not (
        same
        and options["spacing"] is None
        and target == first.north_up()
        and (crs == first.crs or (crs is None and first.crs is None))
    )
    if not resampled:
        target = first
    out = []
    for layer, stress, geometry in zip(layers, stresses, geometries, strict=True):
        values = stress.values
        if resampled:
            values = reproject_values(values, geometry, target, options["resampling"])
            # outside a layer: no load, or the elevation model's typical level
            outside = float(np.nanmedian(values)) if layer["kind"] == "elevation" else 0.0
            values = np.nan_to_num(values, nan=outside)
        out.append(_as_dataarray(values, target, str(layer["name"] or "layer")))
    grid = WorkingGrid(first, target, resampled, options["resampling"])
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
    """

    fixed: np.ndarray
    thickness: tuple[tuple[np.ndarray, float, float], ...]
    gravity: float
    working: GridGeometry

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


def working_load(scenario: Scenario) -> tuple[WorkingLoad, WorkingGrid]:
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
    values, grid = build_working_layers(scenario)
    fixed = np.zeros(grid.working.shape)
    thickness = []
    for index, (layer, da) in enumerate(zip(array_table(scenario, "loads"), values, strict=True)):
        if layer["kind"] == "thickness":
            thickness.append((da.values, layer["density"], layer["displaced_density"]))
        elif layer["kind"] == "elevation":
            fixed += elevation_stress(scenario, index, da)["load"].values
        else:
            fixed += da.values
    return WorkingLoad(fixed, tuple(thickness), gravity, grid.working), grid


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


def to_input_grid(result: xr.Dataset, grid: WorkingGrid) -> xr.Dataset:
    """Resample every ``(y, x)`` variable of *result* back onto the input grid.

    Returns *result* unchanged when no resampling was needed. Variables are
    resampled bilinearly; the input grid's coordinates (degrees for a geographic
    input) replace the working ones.
    """
    if not grid.resampled:
        return result
    y, x = grid.input.coords()
    out = xr.Dataset(coords={"y": y, "x": x}, attrs=dict(result.attrs))
    for name, var in result.data_vars.items():
        if var.dims == ("y", "x"):
            values = reproject_values(var.values, grid.working, grid.input, "bilinear")
            out[name] = xr.DataArray(values, dims=("y", "x"), attrs=dict(var.attrs))
        else:
            out[name] = var
    if grid.input.is_geographic:
        out["x"].attrs = {"units": "degrees_east"}
        out["y"].attrs = {"units": "degrees_north"}
    else:
        out["x"].attrs = {"units": "m"}
        out["y"].attrs = {"units": "m"}
    return out
