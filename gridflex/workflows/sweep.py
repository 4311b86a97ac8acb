"""Run the ``[sweep]`` table of a scenario: one solve per combination of values."""

from __future__ import annotations

import logging
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from gridflex.errors import InputError
from gridflex.io.netcdf import write_netcdf
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
from gridflex.scenario.tables import SCHEMA
from gridflex.sweeps.parameter_sweep import LoadLike, check_scheduler, sweep
from gridflex.units import parse_quantity
from gridflex.workflows.layers import working_load
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result
from gridflex.workflows.run import plate_from_scenario
from gridflex.workflows.scenario_tables import array_table, refuse_tables

__all__ = ["run_sweep", "sweep_parameters", "sweep_scenario"]

log = logging.getLogger(__name__)


def sweep_parameters(scenario: Scenario) -> dict[str, list[float]]:
    """The swept values of the ``[sweep]`` table in SI, in the order written."""
    table: Mapping[str, Any] = present(scenario.table("sweep"), scenario.where("sweep"))
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


def run_sweep(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Sweep the ``[sweep]`` values of *scenario* and write one NetCDF (``[output] file``).

    The in-plane forces of ``[solver]`` apply unless swept.

    Returns
    -------
    RunOutcome
        ``result`` is the sweep as written (one deflection per combination of values),
        ``summary`` the swept parameters and their counts.

    Raises
    ------
    InputError
        Empty or invalid ``[sweep]`` table, bad values, unreachable scheduler or
        output path.
    """
    if scenario.tables.get("sweep") is None:
        raise InputError(f"{scenario.path}: 'gridflex sweep' needs a [sweep] table")
    parameters = sweep_parameters(scenario)
    scheduler = check_scheduler(
        scenario.where("sweep", "scheduler"),
        present(scenario.table("sweep"), scenario.where("sweep"))["scheduler"],
    )
    refuse_tables(scenario, ("infill", "gravity"), "sweeps use the plain solve")
    plan = OutputPlan(scenario, overwrite)
    plan.add({"file": scenario.table("output")["file"]})
    plate = plate_from_scenario(scenario)
    parts, grid = working_load(scenario)  # every file read once, here, before any task
    load: LoadLike = parts()
    if "load_density" in parameters:
        if not any(layer["kind"] == "thickness" for layer in array_table(scenario, "loads")):
            raise InputError(
                f"{scenario.where('sweep', 'load_density')}: no [[loads]] layer "
                "of kind 'thickness' to give a density"
            )
        load = parts  # rebuilt per density from the arrays, no file read in a task
    solver = scenario.table("solver")
    if solver["method"] == "finite-difference":
        raise InputError(f"{scenario.where('solver', 'method')}: sweeps use the spectral solver")
    with error_context(scenario.where("sweep")):
        result = sweep(
            load,
            plate,
            parameters,
            scheduler=scheduler,
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
            inplane_force_x=solver["inplane_force_x"],
            inplane_force_y=solver["inplane_force_y"],
            progress=progress,
        )
    result = stamp_result(result, scenario, "sweep", projected_axes=True)
    summary = {name: len(values) for name, values in parameters.items()}
    outcome = RunOutcome(result=result, summary=summary)
    with plan.writing():
        outcome.written.append(
            write_netcdf(result, plan["file"], plan.overwrite, plan.inputs, crs=grid.working.crs)
        )
    log.info("sweep written to %s", plan["file"])
    return outcome


def sweep_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> Path:
    """:func:`run_sweep`, returning only the path written (``[output] file``)."""
    return run_sweep(scenario, overwrite, progress).written[0]
