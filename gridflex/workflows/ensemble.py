"""Run the ``[ensemble]`` table of a scenario: flexure under uncertain parameters.

Each drawn parameter of ``[ensemble]`` is either a list of samples (drawn with equal
probability) or an inline table naming a distribution and its arguments, with units::

    [ensemble]
    members = 400
    te = {distribution = "normal", mean = "30 km", std = "5 km"}
    mantle_density = ["3250 kg/m3", "3300 kg/m3", "3350 kg/m3"]
    load_scale = {distribution = "uniform", low = 0.8, high = 1.2}
    thresholds = ["500 m", "1 km"]

The distributions and their arguments are :data:`gridflex.sweeps.monte_carlo.DISTRIBUTIONS`;
every argument takes the parameter's unit except ``sigma`` of ``lognormal``. On a te
grid (a te file, ``[margin]`` or ``[[breaks]]``) ``te`` is a factor on the grid (no
unit).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.io.netcdf import write_netcdf
from gridflex.io.plots import plot_field_map
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
from gridflex.scenario.tables import SCHEMA
from gridflex.sweeps.monte_carlo import DEFAULT_QUANTILES, ENSEMBLE_PARAMETERS, distribution
from gridflex.sweeps.monte_carlo import ensemble as run_members
from gridflex.sweeps.parameter_sweep import check_scheduler
from gridflex.units import parse_quantity
from gridflex.validation import check_number
from gridflex.workflows.layers import build_working_layers, build_working_load
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result
from gridflex.workflows.run import plate_from_scenario
from gridflex.workflows.run_steps import infill_from_scenario, load_column

__all__ = ["ensemble_scenario", "ensemble_spread", "run_ensemble"]

log = logging.getLogger(__name__)

_UNITLESS_ARGUMENTS = ("sigma",)


def _value(value: Any, dimension: str, where: str) -> float:
    """A number, or a string with a unit of *dimension* (none: a plain number), in SI."""
    if not dimension:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"{where}: expected a number, got {value!r}")
        return check_number(where, value)
    return parse_quantity(value, dimension, where)


def ensemble_spread(scenario: Scenario, te_factor: bool = False) -> dict[str, Any]:
    """The drawn parameters of ``[ensemble]``: name to a frozen scipy.stats distribution
    or a list of samples, in SI (te a factor when *te_factor*)."""
    table: Mapping[str, Any] = present(scenario.table("ensemble"), scenario.where("ensemble"))
    spec = SCHEMA["ensemble"]
    out: dict[str, Any] = {}
    for name in ENSEMBLE_PARAMETERS:
        given = table.get(name)
        if given is None:
            continue
        where = scenario.where("ensemble", name)
        dimension = "" if name == "te" and te_factor else spec[name].dimension
        if isinstance(given, list):
            out[name] = [_value(v, dimension, f"{where}[{i}]") for i, v in enumerate(given)]
            continue
        arguments = {k: v for k, v in given.items() if k != "distribution"}
        if "distribution" not in given:
            raise InputError(f'{where}: name the distribution, e.g. distribution = "normal"')
        parsed = {
            k: _value(v, "" if k in _UNITLESS_ARGUMENTS else dimension, f"{where} {k}")
            for k, v in arguments.items()
        }
        out[name] = distribution(given["distribution"], where, **parsed)
    if not out:
        raise InputError(
            f"{scenario.path}: [ensemble] draws nothing; give e.g. "
            'te = {distribution = "normal", mean = "30 km", std = "5 km"}'
        )
    return out


def _numbers(scenario: Scenario, key: str, dimension: str) -> list[float] | None:
    table: Mapping[str, Any] = present(scenario.table("ensemble"), scenario.where("ensemble"))
    values = table[key]
    if values is None:
        return None
    where = scenario.where("ensemble", key)
    return [_value(v, dimension, f"{where}[{i}]") for i, v in enumerate(values)]


def _inputs(
    scenario: Scenario,
) -> tuple[xr.DataArray | xr.Dataset, xr.DataArray, Plate, Any]:
    """The load (a column Dataset with ``[infill]``), its grid, the plate and the grid
    geometry."""
    if scenario.tables.get("infill") is not None:
        layers, grid = build_working_layers(scenario)
        load: xr.DataArray | xr.Dataset = load_column(scenario, layers)
        like = load["load"]
    else:
        like, grid = build_working_load(scenario)
        load = like
    return load, like, plate_from_scenario(scenario, like, grid), grid


def run_ensemble(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Solve the ``[ensemble]`` members of *scenario*; write the NetCDF at ``[output]
    file`` and the maps of ``[output] std_map`` and ``exceedance_map``.

    With ``[infill]`` every member is a self-consistent infill solve (and ``[gravity]``
    adds the anomalies); otherwise the plain solve.

    Returns
    -------
    RunOutcome
        ``result`` the statistics as written, ``summary`` the members, seed and the
        drawn parameters.

    Raises
    ------
    InputError
        A missing or invalid ``[ensemble]`` table, bad values, an unreachable scheduler or
        output path.
    """
    table = scenario.table("ensemble")
    if table is None:
        raise InputError(f"{scenario.path}: 'gridflex ensemble' needs an [ensemble] table")
    scheduler = check_scheduler(scenario.where("ensemble", "scheduler"), table["scheduler"])
    thresholds = _numbers(scenario, "thresholds", "length")
    quantiles = _numbers(scenario, "quantiles", "")
    output = scenario.table("output")
    if output["exceedance_map"] is not None and not thresholds:
        raise InputError(
            f"{scenario.where('output', 'exceedance_map')}: needs [ensemble] thresholds"
        )
    plan = OutputPlan(scenario, overwrite)
    plan.add(
        {
            "file": output["file"],
            "std_map": output["std_map"],
            "exceedance_map": output["exceedance_map"],
        }
    )
    load, like, plate, grid = _inputs(scenario)
    spread = ensemble_spread(scenario, te_factor=plate.is_variable)
    solver = scenario.table("solver")
    for key in ("inplane_force_x", "inplane_force_y"):
        if solver[key]:
            raise InputError(
                f"{scenario.where('solver', key)}: ensembles take no in-plane force yet; "
                f"got {solver[key]!r} N/m"
            )
    infill = gravity = None
    if scenario.tables.get("infill") is not None:
        infill = infill_from_scenario(scenario)
    gravity_table = scenario.table("gravity")
    if gravity_table is not None:
        gravity = {
            "observation_height": gravity_table["observation_height"],
            "terms": gravity_table["terms"],
            "bouguer_density": gravity_table["bouguer_density"],
            "edges": solver["edges"],
        }
    with error_context(scenario.where("ensemble")):
        result = run_members(
            load,
            plate,
            spread,
            members=table["members"],
            seed=table["seed"],
            thresholds=thresholds,
            scheduler=scheduler,
            quantiles=DEFAULT_QUANTILES if quantiles is None else quantiles,
            sampling=table["sampling"],
            infill=infill,
            gravity=gravity,
            method=solver["method"],
            edges=solver["edges"],
            pad_factor=solver["pad_factor"],
            tolerance=solver["tolerance"],
            max_iterations=solver["max_iterations"],
            progress=progress,
        )
    result = stamp_result(result, scenario, "ensemble", projected_axes=True)
    summary = {
        "members": table["members"],
        "seed": table["seed"],
        "parameters": list(spread),
    }
    outcome = RunOutcome(result=result, summary=summary)
    with plan.writing():
        outcome.written.append(
            write_netcdf(result, plan["file"], plan.overwrite, plan.inputs, crs=grid.working.crs)
        )
        outcome.written.extend(_maps(result, plan, like))
    log.info("ensemble written to %s", plan["file"])
    return outcome


def _maps(result: xr.Dataset, plan: OutputPlan, load: xr.DataArray) -> list[Path]:
    """The PNG maps asked for: the deflection's standard deviation, the first threshold's
    exceedance probability."""
    written = []
    std_path = plan.get("std_map")
    if std_path is not None:
        std = result["std"].sel(quantity="deflection")
        members = result.attrs["ensemble_members"]
        written.append(
            plot_field_map(
                std,
                std_path,
                f"spread of the deflection ({members} members)",
                "standard deviation of w (m)",
                plan.overwrite,
                plan.inputs,
                outline=load,
                signed=False,
            )
        )
    exceedance_path = plan.get("exceedance_map")
    if exceedance_path is not None:
        first = result["exceedance_probability"].isel(threshold=0)
        threshold = float(np.asarray(first["threshold"]))
        written.append(
            plot_field_map(
                first,
                exceedance_path,
                f"P(deflection > {threshold:g} m)",
                "probability",
                plan.overwrite,
                plan.inputs,
                outline=load,
                signed=False,
            )
        )
    return written


def ensemble_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> list[Path]:
    """:func:`run_ensemble`, returning only the paths written."""
    return run_ensemble(scenario, overwrite, progress).written
