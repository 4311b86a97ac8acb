"""Run the ``[fit]`` table of a scenario: estimate te from an observed grid."""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.estimation.misfit import TeFit, fit_te
from gridflex.gravity.first_order import CrustLayers
from gridflex.io.atomic import atomic_path
from gridflex.io.netcdf import as_output_dtype, write_netcdf
from gridflex.io.plots import plot_deflection_map, plot_misfit
from gridflex.progress import Progress
from gridflex.scenario.schema import Scenario, present
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.layers import WorkingGrid, build_working_load
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan
from gridflex.workflows.run import output_dataset, plate_from_scenario, written_crs
from gridflex.workflows.scenario_tables import refuse_tables

__all__ = ["FitOutcome", "fit_outputs", "fit_scenario", "format_fit"]

log = logging.getLogger(__name__)

_OBSERVED_ROLE = {"deflection": "deflection", "surface": "elevation", "free_air_anomaly": "anomaly"}


@dataclass(kw_only=True)
class FitOutcome(RunOutcome):
    """What ``gridflex fit`` produced: a :class:`RunOutcome` with the fit itself.

    ``result`` is the best model as written, ``summary`` the fit's JSON summary and
    ``text`` :func:`format_fit` of the fit.
    """

    fit: TeFit


def format_fit(fit: TeFit) -> str:
    """The fit as a few lines of text (km; the misfit in the units of the observation)."""
    closed = "" if all(fit.interval_closed) else " (open: reaches a search bound)"
    lines = [
        f"te = {fit.te / 1e3:.3f} km, {fit.confidence:.0%} interval "
        f"[{fit.te_low / 1e3:.3f}, {fit.te_high / 1e3:.3f}] km{closed}"
    ]
    if fit.load_scale != 1.0:
        lines.append(f"load scale = {fit.load_scale:.4f} (fitted / given load)")
    lines.append(
        f"offset = {fit.offset:.6g}, RMS misfit = {fit.rms:.6g} "
        f"({fit.n_data} cells, about {fit.n_effective:.0f} independent)"
    )
    return "\n".join(lines)


def fit_outputs(scenario: Scenario) -> dict[str, Path | None]:
    """Paths of the best-model NetCDF, map, JSON summary and misfit plot.

    The summary and plot default to ``<output file stem>_fit.json`` and
    ``<output file stem>_misfit.png`` beside the output file.
    """
    output = scenario.table("output")
    table = present(scenario.table("fit"), scenario.where("fit"))
    stem = Path(output["file"]).with_suffix("")
    return {
        "file": output["file"],
        "map": output["map"],
        "summary": table["summary"] or stem.with_name(stem.name + "_fit.json"),
        "plot": table["plot"] or stem.with_name(stem.name + "_misfit.png"),
    }


def _fit_table(scenario: Scenario) -> dict[str, Any]:
    table = scenario.tables.get("fit")
    if table is None:
        raise InputError(
            f"{scenario.path}: 'gridflex fit' needs a [fit] table "
            "(observed_file, observed_variable, ...)"
        )
    if not table["te_min"] < table["te_max"]:
        raise InputError(
            f"{scenario.where('fit', 'te_min')}: must be less than te_max "
            f"({table['te_min']!r} >= {table['te_max']!r} m)"
        )
    if not 0.0 < table["confidence"] < 1.0:
        raise InputError(
            f"{scenario.where('fit', 'confidence')}: must lie in (0, 1), "
            f"got {table['confidence']!r}"
        )
    if (table["mask_file"] is None) != (table["mask_variable"] is None):
        raise InputError(
            f"{scenario.where('fit', 'mask_file')}: give mask_file and mask_variable together"
        )
    if table["quantity"] == "free_air_anomaly" and table["seafloor_depth"] is None:
        raise InputError(
            f"{scenario.where('fit', 'seafloor_depth')}: required for quantity 'free_air_anomaly'"
        )
    refuse_tables(scenario, ("infill", "gravity"), "'gridflex fit' uses the plain solve")
    return table


def _observed_grids(
    scenario: Scenario, table: dict[str, Any], load: xr.DataArray, grid: WorkingGrid
) -> tuple[xr.DataArray, xr.DataArray | None]:
    """The observation (SI, or mGal) and the optional mask on the working grid of the load.

    NaN cells of the observation (and cells outside it) are not compared; so are NaN
    cells of the mask.
    """
    observed = read_grid_input(
        table["observed_file"],
        table["observed_variable"],
        scenario.where("fit", "observed_file"),
        role=_OBSERVED_ROLE[table["quantity"]],
        missing="keep",
        reference=load,
        working=grid.working,
    )
    if table["mask_file"] is None:
        return observed, None
    raw = read_grid_input(
        table["mask_file"],
        table["mask_variable"],
        scenario.where("fit", "mask_file"),
        dimension=None,
        missing="keep",
        reference=load,
        working=grid.working,
        resampling="nearest",
    )
    values = np.asarray(raw.values)
    return observed, raw.copy(data=np.isfinite(values) & (values != 0))


def fit_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> FitOutcome:
    """Fit te to the ``[fit]`` observation of *scenario* and write the outputs.

    Writes the best model (``[output] file``, NetCDF), optionally its deflection
    map (``[output] map``), a JSON summary and a PNG of the misfit curve. Output
    paths are checked before any work.

    Raises
    ------
    InputError
        Missing or invalid ``[fit]`` table, files or output paths.
    """
    table = _fit_table(scenario)
    if scenario.table("output")["extent"] != "input":
        raise InputError(
            f"{scenario.where('output', 'extent')}: the fit's model covers the input grid; "
            'leave extent = "input"'
        )
    if scenario.table("output")["geotiff"] is not False:
        raise InputError(
            f"{scenario.where('output', 'geotiff')}: 'gridflex fit' writes its model as "
            "NetCDF only; leave geotiff out (or run the fitted te with 'gridflex run')"
        )
    plan = OutputPlan(scenario, overwrite)
    plan.add(fit_outputs(scenario))
    plate = plate_from_scenario(scenario)
    load, grid = build_working_load(scenario)
    quantity = table["quantity"]
    observed, mask = _observed_grids(scenario, table, load, grid)
    gravity = CrustLayers(table["seafloor_depth"]) if quantity == "free_air_anomaly" else None
    solver = scenario.table("solver")
    if solver["inplane_force_x"] or solver["inplane_force_y"]:
        raise InputError(
            f"{scenario.where('solver', 'inplane_force_x')}: fitting te with an "
            "in-plane force is not supported; set the forces to 0"
        )
    fit = fit_te(
        observed,
        load,
        plate,
        quantity,
        mask,
        (table["te_min"], table["te_max"]),
        confidence=table["confidence"],
        samples=table["samples"],
        correlated_residuals=table["correlated_residuals"],
        fit_load_scale=table["fit_load_scale"],
        gravity=gravity,
        edges=solver["edges"],
        pad_factor=solver["pad_factor"],
        progress=progress,
    )
    model = output_dataset(fit.model, scenario, grid, "fit")
    summary = {
        "scenario": str(scenario.path),
        "gridflex_version": model.attrs["gridflex_version"],
        **fit.summary(),
    }
    outcome = FitOutcome(result=model, summary=summary, text=format_fit(fit), fit=fit)
    overwrite, inputs = plan.overwrite, plan.inputs
    written = as_output_dtype(model, scenario.table("output")["dtype"])
    crs = written_crs(scenario, grid)
    with plan.writing():
        outcome.written.append(write_netcdf(written, plan["file"], overwrite, inputs, crs=crs))
        if plan.get("map") is not None:
            outcome.written.append(
                plot_deflection_map(
                    model,
                    plan["map"],
                    overwrite,
                    inputs,
                    title=f"Best-fitting deflection, Te = {fit.te / 1e3:.2f} km",
                )
            )
        with atomic_path(plan["summary"], overwrite, inputs) as tmp:
            tmp.write_text(json.dumps(summary, indent=2) + "\n", encoding="utf-8")
        outcome.written.append(plan["summary"])
        outcome.written.append(plot_misfit(fit, plan["plot"], overwrite, inputs))
    log.info("fit written: %s", ", ".join(map(str, outcome.written)))
    return outcome
