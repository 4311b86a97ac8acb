"""Run a basin scenario: staged loading with compaction, or a flexural backstrip."""

from __future__ import annotations

import logging
from collections.abc import Callable
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex._version import __version__
from gridflex.basin.compaction import LITHOLOGIES, Lithology
from gridflex.basin.staging import Stage, backstrip, backstrip_layers, stage_loading
from gridflex.errors import InputError
from gridflex.grid import check_same_grid
from gridflex.io.atomic import check_output_path
from gridflex.io.netcdf import write_netcdf
from gridflex.io.rasters import read_raster
from gridflex.scenario.schema import Scenario
from gridflex.units import unit_factor
from gridflex.workflows.run import RunOutcome, plate_from_scenario

__all__ = ["run_basin"]

log = logging.getLogger(__name__)


def _grid(path: Any, variable: str, where: str, reference: xr.DataArray | None) -> xr.DataArray:
    """A metric length grid (m) read from a GeoTIFF or NetCDF file."""
    where = f"{where} ({path.name})"
    grid = read_raster(path, variable)
    if grid.attrs.get("crs_wkt") and CRS.from_wkt(grid.attrs["crs_wkt"]).is_geographic:
        raise InputError(
            f"{where}: the grid is in longitude/latitude; a basin run needs a "
            "grid in a metric projection"
        )
    if not np.all(np.isfinite(grid.values)):
        raise InputError(
            f"{where}: {int((~np.isfinite(grid.values)).sum())} nodata or NaN "
            "cell(s); fill them first"
        )
    units = str(grid.attrs.get("units", "") or "m")
    grid = grid * unit_factor(units, "length", f"{where}: variable {grid.name!r}")
    if reference is not None:
        try:
            check_same_grid(grid, reference, where)
        except InputError as exc:
            raise InputError(f"{exc}; every grid must be on the first grid's grid") from exc
    return grid


def _lithology(row: dict[str, Any], where: str) -> Lithology:
    base = LITHOLOGIES[row["lithology"]]
    overrides = {
        k: row[k]
        for k in ("surface_porosity", "decay_length", "grain_density")
        if row[k] is not None
    }
    if not overrides:
        return base
    try:
        return Lithology(
            name=f"{base.name} (modified)",
            surface_porosity=overrides.get("surface_porosity", base.surface_porosity),
            decay_length=overrides.get("decay_length", base.decay_length),
            grain_density=overrides.get("grain_density", base.grain_density),
            source=f"{base.source}; overridden in the scenario",
        )
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc


def _stages(scenario: Scenario, surface: xr.DataArray) -> list[Stage]:
    stages = []
    for i, row in enumerate(scenario.table("stages")):
        where = scenario.where("stages", index=i)
        thickness = _grid(row["file"], row["variable"], where, surface)
        te: Any = row["elastic_thickness"]
        if row["te_file"] is not None:
            te = _grid(row["te_file"], row["te_variable"], f"{where} te_file", surface)
        try:
            stages.append(
                Stage(
                    thickness,
                    row["age"],
                    _lithology(row, where),
                    base_level=row["base_level"],
                    sea_level=row["sea_level"],
                    te=te,
                )
            )
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
    return stages


def _run_stages(scenario: Scenario, progress: Callable[[int, int], Any] | None) -> xr.Dataset:
    table, solver = scenario.table("basin"), scenario.table("solver")
    surface = _grid(
        table["surface_file"],
        table["surface_variable"],
        scenario.where("basin", "surface_file"),
        None,
    )
    stages = _stages(scenario, surface)
    try:
        result = stage_loading(
            stages,
            surface,
            plate_from_scenario(scenario),
            sea_level=table["sea_level"],
            water_density=table["water_density"],
            compaction=table["compaction"],
            isopachs=table["isopachs"],
            tolerance=table["tolerance"],
            max_iterations=table["max_iterations"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
            progress=progress,
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('basin')}: {exc}") from exc
    result.attrs["crs_wkt"] = surface.attrs.get("crs_wkt", "")
    return result


def _run_backstrip_layers(scenario: Scenario) -> xr.Dataset:
    table, solver = scenario.table("backstrip"), scenario.table("solver")
    layers, depths, levels, ages = [], [], [], []
    reference = None
    for i, row in enumerate(scenario.table("backstrip_layers")):
        where = scenario.where("backstrip_layers", index=i)
        grid = _grid(row["file"], row["variable"], where, reference)
        reference = grid if reference is None else reference
        layers.append((grid, _lithology(row, where)))
        depth: Any = row["water_depth"]
        if row["water_depth_file"] is not None:
            depth = _grid(
                row["water_depth_file"],
                row["water_depth_variable"],
                f"{where} water_depth_file",
                reference,
            )
        depths.append(depth)
        levels.append(row["sea_level_change"])
        ages.append(row["age"])
    assert reference is not None
    try:
        result = backstrip_layers(
            layers,
            depths,
            plate_from_scenario(scenario),
            sea_level_changes=levels,
            ages=None if ages[0] is None else ages,
            water_density=table["water_density"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('backstrip')}: {exc}") from exc
    result.attrs["crs_wkt"] = reference.attrs.get("crs_wkt", "")
    return result


def _run_backstrip(scenario: Scenario) -> xr.Dataset:
    table, solver = scenario.table("backstrip"), scenario.table("solver")
    if scenario.table("backstrip_layers"):
        return _run_backstrip_layers(scenario)
    grids: dict[str, xr.DataArray | None] = {}
    reference = None
    for part in ("basement", "sediment", "water"):
        if table[f"{part}_file"] is None:
            grids[part] = None
            continue
        grid = _grid(
            table[f"{part}_file"],
            table[f"{part}_variable"],
            scenario.where("backstrip", f"{part}_file"),
            reference,
        )
        reference = grid if reference is None else reference
        grids[part] = grid
    try:
        result = backstrip(
            grids["basement"],
            grids["sediment"],
            grids["water"],
            plate_from_scenario(scenario),
            lithology=table["lithology"],
            sediment_density=table["sediment_density"],
            sea_level_change=table["sea_level_change"],
            water_density=table["water_density"],
            max_mismatch=table["max_mismatch"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('backstrip')}: {exc}") from exc
    assert reference is not None
    result.attrs["crs_wkt"] = reference.attrs.get("crs_wkt", "")
    return result


def run_basin(
    scenario: Scenario,
    overwrite: bool = False,
    progress: Callable[[int, int], Any] | None = None,
) -> RunOutcome:
    """Solve a basin scenario and write its NetCDF file.

    Raises
    ------
    InputError
        Not a basin scenario, bad inputs or output path.
    ConvergenceError
        If an infill solve of a stage does not converge.
    """
    if scenario.tables.get("basin") is None and scenario.tables.get("backstrip") is None:
        raise InputError(
            f"{scenario.path}: not a basin scenario (no [basin] or [backstrip] "
            "table); run it with 'gridflex run'"
        )
    output = scenario.table("output")["file"]
    inputs = scenario.input_files
    check_output_path(output, overwrite, inputs)
    if scenario.tables.get("basin") is not None:
        result = _run_stages(scenario, progress)
        last = result.isel(stage=-1)
        summary = {
            "stages": int(result.sizes["stage"]),
            "max_deflection": float(last["deflection"].max()),
            "max_sediment_thickness": float(last["sediment_thickness"].max()),
        }
    else:
        result = _run_backstrip(scenario)
        present = result.isel(step=0) if "step" in result.dims else result
        summary = {
            "max_tectonic_subsidence": float(present["tectonic_subsidence"].max()),
            "max_local_tectonic_subsidence": float(present["local_tectonic_subsidence"].max()),
        }
    result.attrs["history"] = f"gridflex {__version__} basin {scenario.path.name}"
    result.attrs["scenario"] = scenario.text
    for name in ("x", "y"):
        result[name].attrs = {
            "units": "m",
            "axis": name.upper(),
            "long_name": f"{name} (projected)",
        }
    outcome = RunOutcome(result=result, summary=summary)
    wkt = str(result.attrs.pop("crs_wkt", "") or "")
    crs = CRS.from_wkt(wkt) if wkt else None
    outcome.written.append(write_netcdf(result, output, overwrite, inputs, crs=crs))
    return outcome
