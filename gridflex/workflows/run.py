"""Run a validated scenario: build the load, solve, write the outputs."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex._version import __version__
from gridflex.engine import solve
from gridflex.errors import InputError
from gridflex.gis.geometry import reproject_values
from gridflex.io.atomic import check_output_path
from gridflex.io.netcdf import write_netcdf
from gridflex.io.plots import plot_deflection_map, plot_field_map, plot_profile
from gridflex.io.rasters import geometry_of, read_raster, write_geotiff
from gridflex.io.tables import write_csv
from gridflex.io.vectors import outline_features, write_geojson
from gridflex.plate import Plate
from gridflex.results.profile import sample_profile
from gridflex.results.summary import deflection_summary
from gridflex.scenario.schema import Scenario
from gridflex.solvers.conjugate_gradient import Progress
from gridflex.te_maps import break_mask, broken_te, margin_te
from gridflex.units import unit_factor
from gridflex.workflows.layers import (
    WorkingGrid,
    build_working_layers,
    build_working_load,
    to_input_grid,
)
from gridflex.workflows.run_steps import gravity_step, infill_step, load_column

__all__ = [
    "RunOutcome",
    "elastic_thickness_from_scenario",
    "output_dataset",
    "plate_from_scenario",
    "run_scenario",
]

log = logging.getLogger(__name__)

GEOTIFF_VARIABLES = ("deflection", "vertical_displacement", "load")
"""Variables written as GeoTIFF bands when ``[output] geotiff = true`` (others follow as
later features add them to the result)."""


@dataclass
class RunOutcome:
    """What a scenario run produced.

    Attributes
    ----------
    result : xarray.Dataset
        The result as written (on the input grid).
    written : list of pathlib.Path
        Files written, in order.
    summary : dict
        :func:`gridflex.results.summary.deflection_summary` of the solve (on the metric
        working grid).
    """

    result: xr.Dataset
    written: list[Path] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)


def _on_working_grid(
    path: Path,
    variable: str,
    like: xr.DataArray,
    grid: WorkingGrid | None,
    dimension: str | None,
    resampling: str,
) -> xr.DataArray:
    """A raster (GeoTIFF or NetCDF) on *like*'s grid, resampled when *grid* says so."""
    da = read_raster(path, variable)
    values = np.asarray(da.values, dtype=np.float64)
    if dimension is not None:
        units = str(da.attrs.get("units", "") or "m")
        values = values * unit_factor(units, dimension, f"{path}: variable {variable!r}")
    geometry = geometry_of(da)
    if grid is not None and geometry != grid.working:
        values = reproject_values(values, geometry, grid.working, resampling)
    if values.shape != like.shape:
        raise InputError(
            f"{path}: variable {variable!r} has shape {values.shape}, the load "
            f"grid is {like.shape}; put it on the load grid"
        )
    if not np.all(np.isfinite(values)):
        raise InputError(f"{path}: variable {variable!r} has missing values on the load grid")
    return like.copy(data=values)


def elastic_thickness_from_scenario(
    scenario: Scenario, like: xr.DataArray | None = None, grid: WorkingGrid | None = None
) -> float | xr.DataArray:
    """Te of the scenario: a number, or a grid on *like*'s grid (m).

    *like* is the working grid of the load (and *grid* its geometry, when the layers were
    resampled): Te and mask rasters are resampled onto it like the load layers (bilinear for
    Te, nearest for masks), and margin and break lines are in its projected coordinates (m).

    A grid comes from ``[plate] elastic_thickness_file`` or from the ``[margin]`` profile;
    every ``[[breaks]]`` entry then sets Te = 0 on its cells (a constant Te with breaks
    becomes a grid too).

    Raises
    ------
    InputError
        A Te grid or mask not on the load grid, a bad line; the message names the table.
    """
    table = scenario.table("plate")
    breaks = scenario.tables.get("breaks") or []
    margin = scenario.tables.get("margin")
    te: float | xr.DataArray
    if (
        table["elastic_thickness"] is None
        and table.get("elastic_thickness_file") is None
        and margin is None
    ):
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: required key is "
            "missing (effective elastic thickness Te)"
        )
    if table["elastic_thickness"] is not None:
        te = float(table["elastic_thickness"])
        if not breaks:
            return te
    if like is None:
        raise InputError(f"{scenario.where('plate')}: a Te grid needs the load grid")
    if table["elastic_thickness_file"] is not None:
        where = scenario.where("plate", "elastic_thickness_file")
        try:
            te = _on_working_grid(
                table["elastic_thickness_file"],
                table["elastic_thickness_variable"],
                like,
                grid,
                "length",
                "bilinear",
            )
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
    elif margin is not None:
        try:
            te = margin_te(
                like, margin["te_left"], margin["te_right"], margin["line"], margin["width"]
            )
        except InputError as exc:
            raise InputError(f"{scenario.where('margin')}: {exc}") from exc
    else:
        te = xr.full_like(like, float(table["elastic_thickness"]), dtype=np.float64)
    assert isinstance(te, xr.DataArray)
    for index, item in enumerate(breaks):
        where = scenario.where("breaks", index=index)
        try:
            if item["file"] is not None:
                mask = (
                    _on_working_grid(item["file"], item["variable"], like, grid, None, "nearest")
                    != 0
                )
            else:
                mask = break_mask(like, [item["line"]], item["width"])
            te = broken_te(te, mask)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
    return te


def plate_from_scenario(
    scenario: Scenario, like: xr.DataArray | None = None, grid: WorkingGrid | None = None
) -> Plate:
    """The :class:`Plate` of the ``[plate]`` table (Te grids on *like*'s grid)."""
    table = scenario.table("plate")
    te = elastic_thickness_from_scenario(scenario, like, grid)
    try:
        return Plate(
            te,
            youngs_modulus=table["youngs_modulus"],
            poisson_ratio=table["poisson_ratio"],
            mantle_density=table["mantle_density"],
            infill_density=table["infill_density"],
            gravity=table["gravity"],
            crust_thickness=table["crust_thickness"],
            crust_density=table["crust_density"],
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('plate')}: {exc}") from exc


def output_dataset(result: xr.Dataset, scenario: Scenario, grid: WorkingGrid) -> xr.Dataset:
    """The result with GIS-friendly extras and provenance, on the input grid."""
    out = result.copy()
    out["vertical_displacement"] = -result["deflection"]
    out["vertical_displacement"].attrs = {
        "units": "m",
        "long_name": "vertical displacement of the plate (positive upward)",
    }
    out.attrs.update(grid.describe())
    out.attrs["history"] = f"gridflex {__version__} run {scenario.path.name}"
    out.attrs["scenario"] = scenario.text
    return to_input_grid(out, grid)


def _geotiff_paths(netcdf: Path, result: xr.Dataset) -> dict[str, Path]:
    names = [n for n in result.data_vars if result[n].dims == ("y", "x")]
    return {str(n): netcdf.with_name(f"{netcdf.stem}_{n}.tif") for n in names}


_FIELD_MAPS = {
    # output key: (variable, title, colour-bar label, signed colour map)
    "moat_fill_map": (
        "moat_fill",
        "Moat fill (sediment and water in the flexural depression); black: load outline",
        "moat fill (m)",
        False,
    ),
    "free_air_map": (
        "free_air_anomaly",
        "Free-air gravity anomaly of the flexure model; black: load outline",
        "free-air anomaly (mGal)",
        True,
    ),
    "bouguer_map": (
        "bouguer_anomaly",
        "Bouguer gravity anomaly of the flexure model; black: load outline",
        "Bouguer anomaly (mGal)",
        True,
    ),
}
"""PNG maps of single fields: ``[output]`` key -> what to draw."""


def _planned_outputs(scenario: Scenario) -> list[Path]:
    out = scenario.table("output")
    keys = ("file", "map", "outlines", "profile_csv", "profile_plot", *_FIELD_MAPS)
    return [out[k] for k in keys if out[k] is not None]


def _solve_working(
    scenario: Scenario, progress: Progress | None = None
) -> tuple[xr.Dataset, WorkingGrid]:
    """The solve on the working grid: plain, or with ``[infill]`` and ``[gravity]``.

    Te grids (files, margins, breaks) are put on the working grid of the load.
    """
    solver = scenario.table("solver")
    if scenario.table("infill") is not None:
        layers, grid = build_working_layers(scenario)
        column = load_column(scenario, layers)
        plate = plate_from_scenario(scenario, column["load"], grid)
        working = infill_step(scenario, plate, column, progress)
    else:
        load, grid = build_working_load(scenario)
        plate = plate_from_scenario(scenario, load, grid)
        log.info("solving %s load grid", load.shape)
        working = solve(
            load,
            plate,
            solver["method"],
            edges=solver["edges"],
            inplane_force_x=solver["inplane_force_x"],
            inplane_force_y=solver["inplane_force_y"],
            pad_factor=solver["pad_factor"],
            tolerance=solver["tolerance"],
            max_iterations=solver["max_iterations"],
            progress=progress,
        )
    if scenario.table("gravity") is not None:
        working = gravity_step(scenario, working)
    return working, grid


def run_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Build the load, solve and write the outputs of *scenario*.

    *progress* (optional) is called with (done, total) during an iterative solve.
    Output paths are checked before the solve, so a run that would fail to write
    fails before any work; files are written atomically and never over an input.

    Raises
    ------
    InputError
        Bad inputs or output paths.
    """
    outputs = scenario.table("output")
    inputs = scenario.input_files
    for target in _planned_outputs(scenario):
        check_output_path(target, overwrite, inputs)
    working, grid = _solve_working(scenario, progress)
    result = output_dataset(working, scenario, grid)
    outcome = RunOutcome(result=result, summary=deflection_summary(working))
    crs = grid.input.crs
    written = outcome.written
    if outputs["geotiff"]:
        tiffs = _geotiff_paths(outputs["file"], result)
        for path in tiffs.values():
            check_output_path(path, overwrite, inputs)
    written.append(write_netcdf(result, outputs["file"], overwrite, inputs, crs=crs))
    if outputs["geotiff"]:
        for name, path in tiffs.items():
            written.append(write_geotiff(result[name], path, crs, overwrite, inputs))
    if outputs["map"]:
        written.append(plot_deflection_map(result, outputs["map"], overwrite, inputs))
    for key, (variable, title, label, signed) in _FIELD_MAPS.items():
        if outputs[key]:
            written.append(
                plot_field_map(
                    result[variable],
                    outputs[key],
                    title,
                    label,
                    overwrite,
                    inputs,
                    outline=result["load"],
                    signed=signed,
                )
            )
    if outputs["outlines"]:
        depth = outputs["moat_depth"]
        if depth is None:
            depth = 0.1 * outcome.summary["max_deflection"]
        features = outline_features(working, grid.working.crs, depth)
        written.append(write_geojson(features, outputs["outlines"], overwrite, inputs))
    if outputs["profile_start"] is not None:
        profile = sample_profile(result, outputs["profile_start"], outputs["profile_end"])
        if outputs["profile_csv"]:
            written.append(write_csv(profile, outputs["profile_csv"], overwrite, inputs))
        if outputs["profile_plot"]:
            written.append(plot_profile(profile, outputs["profile_plot"], overwrite, inputs))
    return outcome
