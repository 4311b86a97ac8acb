"""Run a basin scenario: staged loading with compaction, or a flexural backstrip."""

from __future__ import annotations

import logging
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.basin.backstrip import backstrip, backstrip_layers
from gridflex.basin.compaction import LITHOLOGIES, Lithology
from gridflex.basin.staging import Stage, stage_loading
from gridflex.basin.stretching import Stretching, StretchingModel
from gridflex.errors import InputError
from gridflex.gis.geometry import geometry_of
from gridflex.glacial.ice import sea_level_at
from gridflex.io.netcdf import write_netcdf
from gridflex.io.tables import read_csv_quantities
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.workflows.basin_outputs import (
    check_basin_outputs,
    plan_basin_outputs,
    write_basin_outputs,
)
from gridflex.workflows.basin_tables import BasinScenario
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result
from gridflex.workflows.run import plate_from_scenario, with_breaks
from gridflex.workflows.scenario_tables import array_table

__all__ = ["format_basin_summary", "run_basin"]

log = logging.getLogger(__name__)


def _grid(
    path: Path, variable: str, where: str, reference: xr.DataArray | None, role: str
) -> xr.DataArray:
    """A metric length grid (m) from a GeoTIFF or NetCDF file, on *reference*'s grid.

    *role* (a :data:`gridflex.validation.GRID_ROLES` key) sets the physical range.
    Rows come back south to north, or in *reference*'s order, whatever the file's order."""
    return read_grid_input(path, variable, where, metric=True, reference=reference, role=role)


def _lithology(row: dict[str, Any], where: str) -> Lithology:
    base = LITHOLOGIES[row["lithology"]]
    overrides = {
        k: row[k]
        for k in ("surface_porosity", "decay_length", "grain_density")
        if row[k] is not None
    }
    if not overrides:
        return base
    with error_context(where):
        return Lithology(
            name=f"{base.name} (modified)",
            surface_porosity=overrides.get("surface_porosity", base.surface_porosity),
            decay_length=overrides.get("decay_length", base.decay_length),
            grain_density=overrides.get("grain_density", base.grain_density),
            source=f"{base.source}; overridden in the scenario",
        )


def _stage_te(
    scenario: BasinScenario, row: dict[str, Any], where: str, surface: xr.DataArray
) -> float | xr.DataArray | None:
    """The te of a stage (m): its ``elastic_thickness`` or ``te_file``, with the
    ``[[breaks]]`` of the plate cut into it (breaks are the plate's structure, so they
    hold in every stage); None when the stage has neither (the ``[plate]`` te)."""
    te: float | xr.DataArray | None = row["elastic_thickness"]
    if row["te_file"] is not None:
        te = _grid(
            row["te_file"],
            row["te_variable"],
            f"{where} te_file",
            surface,
            "elastic_thickness",
        )
    if te is None or not array_table(scenario, "breaks"):
        return te
    if not isinstance(te, xr.DataArray):
        te = xr.full_like(surface, float(te), dtype=np.float64)
    return with_breaks(scenario, te, surface)


def _sea_levels(scenario: BasinScenario) -> list[float | None]:
    """Each stage's sea level (m): its own ``sea_level``, else the ``[basin]
    sea_level_file`` at its age (linear in time, never extrapolated), else None."""
    rows = array_table(scenario, "stages")
    own: list[float | None] = [row["sea_level"] for row in rows]
    path = scenario.table("basin")["sea_level_file"]
    if path is None:
        return own
    where = scenario.where("basin", "sea_level_file")
    table = read_csv_quantities(path, {"age": "time", "level": "length"}, where)
    order = np.argsort(-table["age"], kind="stable")  # oldest first: time = -age increasing
    series = xr.DataArray(table["level"][order], dims="time", coords={"time": -table["age"][order]})
    ages = np.array([row["age"] for row in rows], dtype=np.float64)
    levels = sea_level_at(series, -ages, f"{where} ({path}; time = -age in years)")
    return [float(level) if mine is None else mine for mine, level in zip(own, levels, strict=True)]


def _stages(scenario: BasinScenario, surface: xr.DataArray) -> list[Stage]:
    stages = []
    sea_levels = _sea_levels(scenario)
    for i, row in enumerate(array_table(scenario, "stages")):
        where = scenario.where("stages", index=i)
        # an erosion stage's isopach may be negative (any length); otherwise a thickness
        role = "length" if row["erosion"] else "thickness"
        thickness = _grid(row["file"], row["variable"], where, surface, role)
        te = _stage_te(scenario, row, where, surface)
        with error_context(where):
            stages.append(
                Stage(
                    thickness,
                    row["age"],
                    _lithology(row, where),
                    base_level=row["base_level"],
                    sea_level=sea_levels[i],
                    te=te,
                )
            )
    return stages


def _run_stages(
    scenario: BasinScenario,
    progress: Progress | None,
    check: Callable[[xr.DataArray], None] | None = None,
) -> tuple[xr.Dataset, xr.DataArray]:
    """The staged loading of ``[basin]`` and ``[[stages]]``, and the surface grid;
    *check* is called with the surface before any stage is read or solved."""
    table, solver = scenario.table("basin"), scenario.table("solver")
    surface = _grid(
        table["surface_file"],
        table["surface_variable"],
        scenario.where("basin", "surface_file"),
        None,
        "elevation",
    )
    if check is not None:
        check(surface)
    stages = _stages(scenario, surface)
    # te from a number, a grid file, [margin] and [[breaks]], on the surface's grid, as
    # gridflex run builds it (its messages name [plate], [margin] or [[breaks]])
    plate = plate_from_scenario(scenario, surface)
    with error_context(scenario.where("basin")):
        result = stage_loading(
            stages,
            surface,
            plate,
            sea_level=table["sea_level"],
            water_density=table["water_density"],
            compaction=table["compaction"],
            isopachs=table["isopachs"],
            tolerance=table["tolerance"],
            max_iterations=table["max_iterations"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
            progress=progress,
            stretching=_stretching(scenario, surface),
        )
    return result, surface


def _run_backstrip_layers(scenario: BasinScenario) -> tuple[xr.Dataset, xr.DataArray]:
    """The backstrip of ``[[backstrip_layers]]``, and the first layer's grid."""
    table, solver = scenario.table("backstrip"), scenario.table("solver")
    layers: list[tuple[xr.DataArray, Lithology]] = []
    depths: list[float | xr.DataArray] = []
    levels: list[float] = []
    ages: list[float] = []  # every layer has an age, or none (checked on loading)
    reference: xr.DataArray | None = None
    for i, row in enumerate(array_table(scenario, "backstrip_layers")):
        where = scenario.where("backstrip_layers", index=i)
        grid = _grid(row["file"], row["variable"], where, reference, "thickness")
        reference = grid if reference is None else reference
        layers.append((grid, _lithology(row, where)))
        depth: float | xr.DataArray = row["water_depth"]
        if row["water_depth_file"] is not None:
            depth = _grid(
                row["water_depth_file"],
                row["water_depth_variable"],
                f"{where} water_depth_file",
                reference,
                "depth",
            )
        depths.append(depth)
        levels.append(row["sea_level_change"])
        if row["age"] is not None:
            ages.append(float(row["age"]))
    assert reference is not None  # the schema requires at least one layer
    plate = plate_from_scenario(scenario, reference)
    with error_context(scenario.where("backstrip")):
        result = backstrip_layers(
            layers,
            depths,
            plate,
            sea_level_changes=levels,
            ages=ages or None,
            water_density=table["water_density"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
        )
    return result, reference


def _run_backstrip(scenario: BasinScenario) -> tuple[xr.Dataset, xr.DataArray]:
    """The backstrip of ``[backstrip]`` (or its layers), and the first grid read."""
    table, solver = scenario.table("backstrip"), scenario.table("solver")
    if array_table(scenario, "backstrip_layers"):
        return _run_backstrip_layers(scenario)
    grids: dict[str, xr.DataArray | None] = {}
    reference: xr.DataArray | None = None
    for part in ("basement", "sediment", "water"):
        if table[f"{part}_file"] is None:
            grids[part] = None
            continue
        grid = _grid(
            table[f"{part}_file"],
            table[f"{part}_variable"],
            scenario.where("backstrip", f"{part}_file"),
            reference,
            "thickness" if part == "sediment" else "depth",
        )
        reference = grid if reference is None else reference
        grids[part] = grid
    assert reference is not None  # backstrip() refuses a run without grids
    plate = plate_from_scenario(scenario, reference)
    with error_context(scenario.where("backstrip")):
        result = backstrip(
            grids["basement"],
            grids["sediment"],
            grids["water"],
            plate,
            lithology=table["lithology"],
            sediment_density=table["sediment_density"],
            sea_level_change=table["sea_level_change"],
            water_density=table["water_density"],
            max_mismatch=table["max_mismatch"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
        )
    return result, reference


def _summary(result: xr.Dataset) -> dict[str, float]:
    """Key numbers (m) of a staged-loading or backstrip result."""
    if "stage" in result.dims:
        last = result.isel(stage=-1)
        return {
            "stages": int(result.sizes["stage"]),
            "max_deflection": float(last["deflection"].max()),
            "max_sediment_thickness": float(last["sediment_thickness"].max()),
        }
    present = result.isel(step=0) if "step" in result.dims else result
    return {
        "max_tectonic_subsidence": float(present["tectonic_subsidence"].max()),
        "max_local_tectonic_subsidence": float(present["local_tectonic_subsidence"].max()),
    }


def format_basin_summary(summary: dict[str, float]) -> str:
    """The summary of :func:`run_basin` as ``key: value`` lines."""
    return "\n".join(f"{key.replace('_', ' ')}: {value:.6g}" for key, value in summary.items())


def run_basin(
    scenario: BasinScenario,
    overwrite: bool = False,
    progress: Progress | None = None,
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
    plan = OutputPlan(scenario, overwrite)
    plan.add({"file": scenario.table("output")["file"]})
    extra = plan_basin_outputs(scenario, plan)  # grids, maps, wells, section
    if scenario.tables.get("basin") is not None:
        result, reference = _run_stages(
            scenario, progress, lambda surface: check_basin_outputs(scenario, extra, surface)
        )
    else:
        result, reference = _run_backstrip(scenario)
    result = stamp_result(result, scenario, "basin", projected_axes=True)
    summary = _summary(result)
    outcome = RunOutcome(result=result, summary=summary, text=format_basin_summary(summary))
    crs = geometry_of(reference).crs
    with plan.writing():
        outcome.written.append(
            write_netcdf(result, plan["file"], plan.overwrite, plan.inputs, crs=crs)
        )
        write_basin_outputs(extra, result, crs, plan, outcome.written)
    return outcome


def _stretching(scenario: BasinScenario, surface: xr.DataArray) -> Stretching | None:
    """The rift of ``[stretching]`` (beta a number or a grid on the surface's grid)."""
    table = scenario.tables.get("stretching")
    if table is None:
        return None
    beta: float | xr.DataArray = table["stretching_factor"]
    if table["stretching_factor_file"] is not None:
        beta = read_grid_input(
            table["stretching_factor_file"],
            table["stretching_factor_variable"],
            scenario.where("stretching", "stretching_factor_file"),
            dimension=None,
            metric=True,
            reference=surface,
            role="stretching_factor",
        )
    parameters = (
        "lithosphere_thickness",
        "crust_thickness",
        "mantle_temperature",
        "thermal_expansion",
        "thermal_diffusivity",
        "crust_density",
        "isostasy",
    )
    with error_context(scenario.where("stretching")):
        model = StretchingModel(**{name: table[name] for name in parameters})
        return Stretching(beta, table["rift_age"], model)
