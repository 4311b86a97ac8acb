"""Run the ``[sweep]`` table of a scenario: one solve per combination of values."""

from __future__ import annotations

import copy
import functools
import logging
import tomllib
from dataclasses import replace
from pathlib import Path
from typing import Any

import xarray as xr

from gridflex.errors import InputError
from gridflex.io.atomic import check_output_path
from gridflex.io.netcdf import write_netcdf
from gridflex.scenario.schema import Scenario
from gridflex.scenario.tables import SCHEMA
from gridflex.sweeps.parameter_sweep import sweep
from gridflex.units import parse_quantity
from gridflex.workflows.layers import build_working_load
from gridflex.workflows.run import plate_from_scenario

__all__ = ["load_with_density", "sweep_parameters", "sweep_scenario"]

log = logging.getLogger(__name__)


def sweep_parameters(scenario: Scenario) -> dict[str, list[float]]:
    """The swept values of the ``[sweep]`` table in SI, in the order written."""
    table = scenario.table("sweep")
    spec = SCHEMA["sweep"]
    written = tomllib.loads(scenario.text).get("sweep", {}) if scenario.text else table
    out: dict[str, list[float]] = {}
    for name in written:
        values = table.get(name)
        if values is None or name == "scheduler":
            continue
        where = scenario.where("sweep", name)
        if not values:
            raise InputError(f"{where}: the list of values is empty")
        dimension = spec[name].dimension
        parsed = []
        for i, value in enumerate(values):
            if not dimension and not isinstance(value, (int, float)) or isinstance(value, bool):
                raise InputError(f"{where}[{i}]: expected a number, got {value!r}")
            parsed.append(parse_quantity(value, dimension or "length", f"{where}[{i}]"))
        out[name] = parsed
    if not out:
        raise InputError(
            f'{scenario.path}: [sweep] lists no values to sweep; give e.g. te = ["10 km", "20 km"]'
        )
    return out


def sweep_scenario(scenario: Scenario, overwrite: bool = False, progress: Any = None) -> Path:
    """Sweep the ``[sweep]`` values of *scenario* and write one NetCDF (``[output] file``).

    The in-plane forces of ``[solver]`` apply unless swept. Returns the path written.

    Raises
    ------
    InputError
        Empty or invalid ``[sweep]`` table, bad values, unreachable scheduler or
        output path.
    """
    if scenario.tables.get("sweep") is None:
        raise InputError(f"{scenario.path}: 'gridflex sweep' needs a [sweep] table")
    parameters = sweep_parameters(scenario)
    for name in ("infill", "gravity"):
        if scenario.tables.get(name) is not None:
            raise InputError(
                f"{scenario.where(name)}: sweeps use the plain solve; remove the [{name}] table"
            )
    output = scenario.table("output")
    inputs = scenario.input_files
    check_output_path(output["file"], overwrite, inputs)
    plate = plate_from_scenario(scenario)
    load: Any
    load, grid = build_working_load(scenario)  # also checks the layers before any task runs
    if "load_density" in parameters:
        if not any(layer["kind"] == "thickness" for layer in scenario.table("loads")):
            raise InputError(
                f"{scenario.where('sweep', 'load_density')}: no [[loads]] layer "
                "of kind 'thickness' to give a density"
            )
        load = functools.partial(load_with_density, scenario)
    solver = scenario.table("solver")
    if solver["method"] == "finite-difference":
        raise InputError(f"{scenario.where('solver', 'method')}: sweeps use the spectral solver")
    try:
        result = sweep(
            load,
            plate,
            parameters,
            scheduler=scenario.table("sweep")["scheduler"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
            inplane_force_x=solver["inplane_force_x"],
            inplane_force_y=solver["inplane_force_y"],
            progress=progress,
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('sweep')}: {exc}") from exc
    result = _with_provenance(result, scenario)
    path = write_netcdf(result, output["file"], overwrite, inputs, crs=grid.working.crs)
    log.info("sweep written to %s", path)
    return path


def load_with_density(scenario: Scenario, load_density: float) -> xr.DataArray:
    """The scenario's load with every thickness layer given *load_density* (kg m⁻³).

    Module-level (picklable), so dask workers can build the load themselves.
    """
    tables = copy.deepcopy(scenario.tables)
    for layer in tables["loads"]:
        if layer["kind"] == "thickness":
            layer["density"] = float(load_density)
    return build_working_load(replace(scenario, tables=tables))[0]


def _with_provenance(result: xr.Dataset, scenario: Scenario) -> xr.Dataset:
    from gridflex._version import __version__

    out = result.copy()
    out["x"].attrs = {"units": "m", "axis": "X", "long_name": "x (projected)"}
    out["y"].attrs = {"units": "m", "axis": "Y", "long_name": "y (projected)"}
    out.attrs["history"] = f"gridflex {__version__} sweep {scenario.path.name}"
    out.attrs["scenario"] = scenario.text
    return out
