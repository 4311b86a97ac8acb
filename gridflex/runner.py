"""Run a validated scenario: build the load, solve, write the outputs."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import xarray as xr

from ._version import __version__
from .errors import InputError
from .io.atomic import check_output_path
from .io.netcdf import write_netcdf
from .io.rasters import write_geotiff
from .io.tables import write_csv
from .io.vectors import outline_features, write_geojson
from .layers import WorkingGrid, build_working_layers, build_working_load, to_input_grid
from .plate import Plate
from .plots import plot_deflection_map, plot_field_map, plot_profile
from .profile import sample_profile
from .runner_infill import gravity_step, infill_step, load_column
from .scenario import Scenario
from .solve import solve
from .summary import deflection_summary

__all__ = ["RunOutcome", "output_dataset", "plate_from_scenario", "run_scenario"]

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
        :func:`gridflex.summary.deflection_summary` of the solve (on the metric
        working grid).
    """

    result: xr.Dataset
    written: list[Path] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)


def plate_from_scenario(scenario: Scenario) -> Plate:
    """The :class:`Plate` of the ``[plate]`` table."""
    table = scenario.table("plate")
    try:
        return Plate(
            table["elastic_thickness"],
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
        "units": "m", "long_name": "vertical displacement of the plate (positive upward)"}
    out.attrs.update(grid.describe())
    out.attrs["history"] = f"gridflex {__version__} run {scenario.path.name}"
    out.attrs["scenario"] = scenario.text
    return to_input_grid(out, grid)


def _geotiff_paths(netcdf: Path, result: xr.Dataset) -> dict[str, Path]:
    names = [n for n in result.data_vars if result[n].dims == ("y", "x")]
    return {str(n): netcdf.with_name(f"{netcdf.stem}_{n}.tif") for n in names}


_FIELD_MAPS = {
    # output key: (variable, title, colour-bar label, signed colour map)
    "moat_fill_map": ("moat_fill", "Moat fill (sediment and water in the flexural "
                      "depression); black: load outline", "moat fill (m)", False),
    "free_air_map": ("free_air_anomaly", "Free-air gravity anomaly of the flexure model; "
                     "black: load outline", "free-air anomaly (mGal)", True),
    "bouguer_map": ("bouguer_anomaly", "Bouguer gravity anomaly of the flexure model; "
                    "black: load outline", "Bouguer anomaly (mGal)", True),
}
"""PNG maps of single fields: ``[output]`` key -> what to draw."""


def _planned_outputs(scenario: Scenario) -> list[Path]:
    out = scenario.table("output")
    keys = ("file", "map", "outlines", "profile_csv", "profile_plot", *_FIELD_MAPS)
    return [out[k] for k in keys if out[k] is not None]


def _solve_working(scenario: Scenario, plate: Plate) -> tuple[xr.Dataset, WorkingGrid]:
    """The solve on the working grid: plain, or with ``[infill]`` and ``[gravity]``."""
    solver = scenario.table("solver")
    if scenario.table("infill") is not None:
        layers, grid = build_working_layers(scenario)
        working = infill_step(scenario, plate, load_column(scenario, layers))
    else:
        load, grid = build_working_load(scenario)
        log.info("solving %s load grid", load.shape)
        working = solve(
            load, plate, solver["method"], edges=solver["edges"],
            inplane_force_x=solver["inplane_force_x"], inplane_force_y=solver["inplane_force_y"],
            pad_factor=solver["pad_factor"],
        )
    if scenario.table("gravity") is not None:
        working = gravity_step(scenario, working)
    return working, grid


def run_scenario(scenario: Scenario, overwrite: bool = False) -> RunOutcome:
    """Build the load, solve and write the outputs of *scenario*.

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
    plate = plate_from_scenario(scenario)
    working, grid = _solve_working(scenario, plate)
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
            written.append(plot_field_map(result[variable], outputs[key], title, label,
                                          overwrite, inputs, outline=result["load"],
                                          signed=signed))
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
