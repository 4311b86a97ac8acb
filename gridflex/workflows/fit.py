"""Run the ``[fit]`` table of a scenario: estimate te from an observed grid."""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.engine import SPECTRAL_EDGES
from gridflex.errors import InputError
from gridflex.estimation.misfit import TE_BOUNDS, TE_SAMPLES, TeFit, fit_te
from gridflex.estimation.misfit_te_maps import (
    MAP_SAMPLES,
    SCALE_BOUNDS,
    MarginFit,
    ScaleFit,
    TeMapFit,
    check_shift_width,
    fit_te_margin,
    fit_te_scale,
)
from gridflex.gravity.first_order import CrustLayers
from gridflex.grid import check_grid
from gridflex.io.atomic import atomic_path
from gridflex.io.netcdf import as_output_dtype, write_netcdf
from gridflex.io.plots import plot_deflection_map, plot_misfit, plot_profiles
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
from gridflex.scenario.tables import SolverTable
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.layers import WorkingGrid, build_working_load
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan
from gridflex.workflows.run import (
    broken_cells,
    output_dataset,
    plate_from_scenario,
    written_crs,
)
from gridflex.workflows.scenario_tables import array_table, refuse_tables

__all__ = ["FIT_KINDS", "FitOutcome", "fit_kind", "fit_outputs", "fit_scenario", "format_fit"]

log = logging.getLogger(__name__)

_OBSERVED_ROLE = {"deflection": "deflection", "surface": "elevation", "free_air_anomaly": "anomaly"}

FIT_KINDS = ("constant", "margin", "scale")
"""What ``gridflex fit`` fits: one te, a ``[margin]``, or a factor on a te grid."""


@dataclass(kw_only=True)
class FitOutcome(RunOutcome):
    """What ``gridflex fit`` produced: a :class:`RunOutcome` with the fit itself.

    ``result`` is the best model as written, ``summary`` the fit's JSON summary and
    ``text`` :func:`format_fit` of the fit.
    """

    fit: TeFit | TeMapFit


def _km(value: float) -> str:
    return f"{value / 1e3:.3f}"


def format_fit(fit: TeFit | TeMapFit) -> str:
    """The fit as a few lines of text (km; the misfit in the units of the observation)."""
    if isinstance(fit, TeFit):
        closed = "" if all(fit.interval_closed) else " (open: reaches a search bound)"
        lines = [
            f"te = {_km(fit.te)} km, {fit.confidence:.0%} interval "
            f"[{_km(fit.te_low)}, {_km(fit.te_high)}] km{closed}"
        ]
    else:
        lines = []
        for name, estimate in fit.estimates.items():
            closed = "" if all(estimate.interval_closed) else " (open: reaches a search bound)"
            if estimate.unit == "m":
                numbers = [_km(v) for v in (estimate.value, estimate.low, estimate.high)]
                unit = " km"
            else:
                numbers = [f"{v:.4f}" for v in (estimate.value, estimate.low, estimate.high)]
                unit = ""
            lines.append(
                f"{name} = {numbers[0]}{unit}, {fit.confidence:.0%} interval "
                f"[{numbers[1]}, {numbers[2]}]{unit}{closed}"
            )
        if isinstance(fit, MarginFit) and fit.line_shift is not None:
            (x0, y0), (x1, y1) = fit.line
            lines.append(
                f"margin line now through ({_km(x0)}, {_km(y0)}) and ({_km(x1)}, {_km(y1)}) km"
            )
        if isinstance(fit, ScaleFit):
            te = fit.model["elastic_thickness"].values
            lines.append(f"best te grid from {_km(te.min())} to {_km(te.max())} km")
    if fit.load_scale != 1.0:
        lines.append(f"load scale = {fit.load_scale:.4f} (fitted / given load)")
    lines.append(
        f"offset = {fit.offset:.6g}, RMS misfit = {fit.rms:.6g} "
        f"({fit.n_data} cells, about {fit.n_effective:.0f} independent)"
    )
    if isinstance(fit, TeMapFit):
        lines.append(f"{fit.forward_models} finite-difference solves")
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


def fit_kind(scenario: Scenario) -> str:
    """What the scenario's plate makes ``gridflex fit`` fit (one of :data:`FIT_KINDS`).

    A ``[margin]`` table: te on each side (and optionally the line's position). A te grid
    (``[plate] elastic_thickness_file``, or a constant te cut by ``[[breaks]]``): a factor
    on it. Otherwise one constant te.
    """
    if scenario.tables.get("margin") is not None:
        return "margin"
    plate = scenario.table("plate")
    if plate["elastic_thickness_file"] is not None or array_table(scenario, "breaks"):
        return "scale"
    return "constant"


def _refuse_keys(
    scenario: Scenario, table: dict[str, Any], keys: tuple[str, ...], why: str
) -> None:
    """Refuse the first of *keys* the ``[fit]`` table gives (not None, not false)."""
    for key in keys:
        if table[key] is not None and table[key] is not False:
            raise InputError(f"{scenario.where('fit', key)}: {why}")


def _fit_table(scenario: Scenario, kind: str) -> dict[str, Any]:
    table = scenario.tables.get("fit")
    if table is None:
        raise InputError(
            f"{scenario.path}: 'gridflex fit' needs a [fit] table "
            "(observed_file, observed_variable, ...)"
        )
    if kind == "scale":
        _refuse_keys(
            scenario,
            table,
            ("te_min", "te_max"),
            "a te grid ([plate] elastic_thickness_file, or a te cut by [[breaks]]) is fitted "
            "by a factor on it: give scale_min and scale_max instead",
        )
    else:
        _refuse_keys(
            scenario,
            table,
            ("scale_min", "scale_max"),
            "only for a te grid ([plate] elastic_thickness_file, or a te cut by [[breaks]]); "
            "te_min and te_max bound the te searched",
        )
    if kind != "margin":
        _refuse_keys(
            scenario,
            table,
            ("fit_line_shift", "line_shift_min", "line_shift_max"),
            "needs a [margin] table (the line whose position is fitted)",
        )
    elif table["fit_line_shift"]:
        for key in ("line_shift_min", "line_shift_max"):
            if table[key] is None:
                raise InputError(
                    f"{scenario.where('fit', key)}: required with fit_line_shift = true "
                    "(the range of the line's shift, perpendicular to it)"
                )
    else:
        _refuse_keys(
            scenario,
            table,
            ("line_shift_min", "line_shift_max"),
            "only with fit_line_shift = true",
        )
    for low_key, high_key, defaults in (
        ("te_min", "te_max", TE_BOUNDS),
        ("scale_min", "scale_max", SCALE_BOUNDS),
        ("line_shift_min", "line_shift_max", None),
    ):
        low = table[low_key] if table[low_key] is not None or defaults is None else defaults[0]
        high = table[high_key] if table[high_key] is not None or defaults is None else defaults[1]
        if low is not None and high is not None and not low < high:
            raise InputError(
                f"{scenario.where('fit', low_key)}: must be less than {high_key} "
                f"({low!r} >= {high!r})"
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


def _check_solver(scenario: Scenario, kind: str) -> SolverTable:
    """The ``[solver]`` table, refused where the fit cannot honour it."""
    solver = scenario.table("solver")
    if solver["inplane_force_x"] or solver["inplane_force_y"]:
        raise InputError(
            f"{scenario.where('solver', 'inplane_force_x')}: fitting te with an "
            "in-plane force is not supported; set the forces to 0"
        )
    if kind == "constant":
        if solver["method"] == "finite-difference":
            raise InputError(
                f"{scenario.where('solver', 'method')}: a constant te is fitted with the "
                "spectral solver; leave method = 'auto' (a te grid or [margin] uses finite "
                "differences)"
            )
        if solver["edges"] not in SPECTRAL_EDGES:
            raise InputError(
                f"{scenario.where('solver', 'edges')}: a constant te is fitted with the "
                f"spectral solver, whose edges are {' or '.join(map(repr, SPECTRAL_EDGES))}; "
                f"got {solver['edges']!r}"
            )
    elif solver["method"] == "spectral":
        raise InputError(
            f"{scenario.where('solver', 'method')}: a te map is solved by finite "
            "differences; leave method = 'auto' or set 'finite-difference'"
        )
    return solver


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


def _bounds(table: dict[str, Any], low: str, high: str, default: tuple[float, float]) -> Any:
    """``(low, high)`` of the ``[fit]`` table, each defaulting to *default*'s."""
    return (
        default[0] if table[low] is None else table[low],
        default[1] if table[high] is None else table[high],
    )


def _run_fit(
    scenario: Scenario,
    kind: str,
    table: dict[str, Any],
    load: xr.DataArray,
    grid: WorkingGrid,
    observed: xr.DataArray,
    mask: xr.DataArray | None,
    progress: Progress | None,
) -> TeFit | TeMapFit:
    """The fit of *kind* with the scenario's keys."""
    solver = _check_solver(scenario, kind)
    quantity = table["quantity"]
    gravity = CrustLayers(table["seafloor_depth"]) if quantity == "free_air_anomaly" else None
    shared: dict[str, Any] = {
        "quantity": quantity,
        "mask": mask,
        "confidence": table["confidence"],
        "correlated_residuals": table["correlated_residuals"],
        "fit_load_scale": table["fit_load_scale"],
        "gravity": gravity,
        "edges": solver["edges"],
        "pad_factor": solver["pad_factor"],
        "progress": progress,
    }
    if kind == "constant":
        return fit_te(
            observed,
            load,
            plate_from_scenario(scenario),
            bounds=_bounds(table, "te_min", "te_max", TE_BOUNDS),
            samples=table["samples"] or TE_SAMPLES,
            **shared,
        )
    # the plate of the scenario on the working grid: checks its te map and every break
    plate = plate_from_scenario(scenario, load, grid)
    shared.update(
        samples=table["samples"] or MAP_SAMPLES,
        tolerance=solver["tolerance"],
        max_iterations=solver["max_iterations"],
    )
    if kind == "scale":
        bounds = _bounds(table, "scale_min", "scale_max", SCALE_BOUNDS)
        return fit_te_scale(observed, load, plate, bounds=bounds, **shared)
    margin = scenario.tables["margin"]
    shift = None
    if table["fit_line_shift"]:
        shift = (table["line_shift_min"], table["line_shift_max"])
        with error_context(scenario.where("margin", "width")):
            check_shift_width(margin["width"], check_grid(load))
    return fit_te_margin(
        observed,
        load,
        plate.with_te(0.0),
        margin["line"],
        margin["width"],
        bounds=_bounds(table, "te_min", "te_max", TE_BOUNDS),
        line_shift_bounds=shift,
        broken=broken_cells(scenario, load, grid),
        **shared,
    )


def _map_title(fit: TeFit | TeMapFit) -> str:
    """Title of the best model's deflection map."""
    if isinstance(fit, TeFit):
        return f"Best-fitting deflection, Te = {fit.te / 1e3:.2f} km"
    if isinstance(fit, MarginFit):
        return (
            f"Best-fitting deflection, te {fit.te_left.value / 1e3:.2f} km (left) | "
            f"{fit.te_right.value / 1e3:.2f} km (right)"
        )
    assert isinstance(fit, ScaleFit)
    return f"Best-fitting deflection, te grid x {fit.scale.value:.3f}"


def fit_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> FitOutcome:
    """Fit the scenario's plate to the ``[fit]`` observation and write the outputs.

    The plate decides what is fitted (:func:`fit_kind`): one constant te
    (:func:`gridflex.fit_te`), te on both sides of the ``[margin]`` line and optionally
    its position (:func:`gridflex.fit_te_margin`), or a factor on the te grid
    (:func:`gridflex.fit_te_scale`). Writes the best model (``[output] file``, NetCDF),
    optionally its deflection map (``[output] map``), a JSON summary and a PNG of the
    misfit curve (of the parameters' profiles for a te map). Output paths are checked
    before any work.

    Raises
    ------
    InputError
        Missing or invalid ``[fit]`` table, keys that do not go with the plate, files or
        output paths.
    """
    kind = fit_kind(scenario)
    table = _fit_table(scenario, kind)
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
    _check_solver(scenario, kind)
    plan = OutputPlan(scenario, overwrite)
    plan.add(fit_outputs(scenario))
    load, grid = build_working_load(scenario)
    observed, mask = _observed_grids(scenario, table, load, grid)
    fit = _run_fit(scenario, kind, table, load, grid, observed, mask, progress)
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
                plot_deflection_map(model, plan["map"], overwrite, inputs, title=_map_title(fit))
            )
        with atomic_path(plan["summary"], overwrite, inputs) as tmp:
            tmp.write_text(json.dumps(summary, indent=2) + "\n", encoding="utf-8")
        outcome.written.append(plan["summary"])
        if isinstance(fit, TeFit):
            outcome.written.append(plot_misfit(fit, plan["plot"], overwrite, inputs))
        else:
            outcome.written.append(plot_profiles(fit, plan["plot"], overwrite, inputs))
    log.info("fit written: %s", ", ".join(map(str, outcome.written)))
    return outcome
