"""Run a validated scenario: build the load, solve, write the outputs."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import xarray as xr

from ._version import __version__
from .errors import InputError
from .grid import check_same_grid
from .io.atomic import check_output_path
from .io.netcdf import read_grid, write_netcdf
from .plate import Plate
from .plots import plot_deflection_map
from .scenario import Scenario
from .solve import solve
from .summary import deflection_summary
from .synthetic import disc_height, empty_grid, gaussian_height, island_chain_height

__all__ = ["RunOutcome", "build_load", "plate_from_scenario", "run_scenario", "output_dataset"]

log = logging.getLogger(__name__)


@dataclass
class RunOutcome:
    """What a scenario run produced.

    Attributes
    ----------
    result : xarray.Dataset
        The solve result (as written).
    written : list of pathlib.Path
        Files written, in order.
    summary : dict
        :func:`gridflex.summary.deflection_summary` of the result.
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
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('plate')}: {exc}") from exc


def _synthetic_layer(scenario: Scenario, layer: dict[str, Any]) -> xr.DataArray:
    grid_table = scenario.table("grid")
    grid = empty_grid(grid_table["rows"], grid_table["columns"], grid_table["spacing"])
    shape = layer["synthetic"]
    if shape == "island-chain":
        return island_chain_height(grid)
    centre = (layer["center_x"], layer["center_y"])
    if shape == "disc":
        return disc_height(grid, layer["radius"], layer["height"], *centre)
    return gaussian_height(grid, layer["radius"], layer["height"], *centre)


def build_load(scenario: Scenario) -> xr.DataArray:
    """Total vertical stress (Pa, positive down) of the ``[[loads]]`` layers.

    A thickness layer presses with (density - displaced_density) g h; a stress
    layer is used as it is (Pa).
    """
    gravity = scenario.table("plate")["gravity"]
    total: xr.DataArray | None = None
    for index, layer in enumerate(scenario.table("loads")):
        where = scenario.where("loads", index=index)
        if layer["file"] is not None:
            dimension = "length" if layer["kind"] == "thickness" else "pressure"
            grid = read_grid(layer["file"], layer["variable"], dimension)
        else:
            grid = _synthetic_layer(scenario, layer)
        if layer["kind"] == "thickness":
            stress = grid * ((layer["density"] - layer["displaced_density"]) * gravity)
        else:
            stress = grid
        if total is None:
            total = stress
        else:
            try:
                check_same_grid(stress, total, f"{where} ({layer['name'] or 'layer'})")
            except InputError as exc:
                raise InputError(f"{exc}; every layer must be on the first layer's grid") from exc
            total = total + stress.values
    assert total is not None
    total = total.rename("load")
    total.attrs = {"units": "Pa", "long_name": "vertical stress of the load (positive downward)"}
    return total


def output_dataset(result: xr.Dataset, scenario: Scenario) -> xr.Dataset:
    """The result with GIS-friendly extras and provenance, as written to NetCDF."""
    out = result.copy()
    out["vertical_displacement"] = -result["deflection"]
    out["vertical_displacement"].attrs = {
        "units": "m", "long_name": "vertical displacement of the plate (positive upward)"}
    out["x"].attrs = {"units": "m", "axis": "X", "long_name": "x (projected)"}
    out["y"].attrs = {"units": "m", "axis": "Y", "long_name": "y (projected)"}
    out.attrs["history"] = f"gridflex {__version__} run {scenario.path.name}"
    out.attrs["scenario"] = scenario.text
    return out


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
    targets = [outputs["file"]] + ([outputs["map"]] if outputs["map"] else [])
    for target in targets:
        check_output_path(target, overwrite, inputs)
    plate = plate_from_scenario(scenario)
    load = build_load(scenario)
    solver = scenario.table("solver")
    log.info("solving %s load grid", load.shape)
    result = solve(
        load, plate, solver["method"], edges=solver["edges"],
        inplane_force_x=solver["inplane_force_x"], inplane_force_y=solver["inplane_force_y"],
        pad_factor=solver["pad_factor"],
    )
    outcome = RunOutcome(result=output_dataset(result, scenario))
    outcome.written.append(write_netcdf(outcome.result, outputs["file"], overwrite, inputs))
    if outputs["map"]:
        outcome.written.append(plot_deflection_map(result, outputs["map"], overwrite, inputs))
    outcome.summary = deflection_summary(result)
    return outcome
