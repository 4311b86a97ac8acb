"""Run a validated scenario: build the load, solve, write the outputs."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
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
from .solvers.conjugate_gradient import Progress
from .summary import deflection_summary
from .synthetic import disc_height, empty_grid, gaussian_height, island_chain_height
from .te_maps import break_mask, broken_te, margin_te

__all__ = [
    "RunOutcome",
    "build_load",
    "elastic_thickness_from_scenario",
    "plate_from_scenario",
    "run_scenario",
    "output_dataset",
]

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


def elastic_thickness_from_scenario(
    scenario: Scenario, like: xr.DataArray | None = None
) -> float | xr.DataArray:
    """Te of the scenario: a number, or a grid on *like*'s grid (m).

    A grid comes from ``[plate] elastic_thickness_file`` or from the ``[margin]`` profile;
    every ``[[breaks]]`` entry then sets Te = 0 on its cells (a constant Te with breaks
    becomes a grid too).

    Raises
    ------
    InputError
        A Te grid or mask not on the load grid, a bad line; the message names the table.
    """
    table = scenario.table("plate")
    breaks = scenario.table("breaks")
    te: float | xr.DataArray
    if table["elastic_thickness"] is not None:
        te = float(table["elastic_thickness"])
        if not breaks:
            return te
    if like is None:
        raise InputError(f"{scenario.where('plate')}: a Te grid needs the load grid")
    if table["elastic_thickness_file"] is not None:
        where = scenario.where("plate", "elastic_thickness_file")
        te = read_grid(table["elastic_thickness_file"], table["elastic_thickness_variable"],
                       "length")
        try:
            check_same_grid(te, like, "te grid")
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
    elif scenario.tables["margin"] is not None:
        margin = scenario.table("margin")
        try:
            te = margin_te(like, margin["te_left"], margin["te_right"], margin["line"],
                           margin["width"])
        except InputError as exc:
            raise InputError(f"{scenario.where('margin')}: {exc}") from exc
    else:
        te = xr.full_like(like, float(table["elastic_thickness"]), dtype=np.float64)
    assert isinstance(te, xr.DataArray)
    for index, item in enumerate(breaks):
        where = scenario.where("breaks", index=index)
        try:
            if item["file"] is not None:
                mask = read_grid(item["file"], item["variable"]) != 0
            else:
                mask = break_mask(like, [item["line"]], item["width"])
            te = broken_te(te, mask)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from exc
    return te


def plate_from_scenario(scenario: Scenario, like: xr.DataArray | None = None) -> Plate:
    """The :class:`Plate` of the ``[plate]`` table (Te grids on *like*'s grid)."""
    table = scenario.table("plate")
    te = elastic_thickness_from_scenario(scenario, like)
    try:
        return Plate(
            te,
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
    targets = [outputs["file"]] + ([outputs["map"]] if outputs["map"] else [])
    for target in targets:
        check_output_path(target, overwrite, inputs)
    load = build_load(scenario)
    plate = plate_from_scenario(scenario, load)
    solver = scenario.table("solver")
    log.info("solving %s load grid", load.shape)
    result = solve(
        load, plate, solver["method"], edges=solver["edges"],
        inplane_force_x=solver["inplane_force_x"], inplane_force_y=solver["inplane_force_y"],
        pad_factor=solver["pad_factor"], tolerance=solver["tolerance"],
        max_iterations=solver["max_iterations"], progress=progress,
    )
    outcome = RunOutcome(result=output_dataset(result, scenario))
    outcome.written.append(write_netcdf(outcome.result, outputs["file"], overwrite, inputs))
    if outputs["map"]:
        outcome.written.append(plot_deflection_map(result, outputs["map"], overwrite, inputs))
    outcome.summary = deflection_summary(result)
    return outcome
