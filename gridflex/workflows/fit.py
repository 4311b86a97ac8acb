"""Run the ``[fit]`` table of a scenario: estimate te from an observed grid."""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex._version import __version__
from gridflex.errors import InputError
from gridflex.estimation.misfit import TeFit, fit_te
from gridflex.gis.geometry import reproject_values
from gridflex.gravity.first_order import CrustLayers
from gridflex.grid import check_same_grid
from gridflex.io.atomic import atomic_path, check_output_path
from gridflex.io.netcdf import write_netcdf
from gridflex.io.plots import plot_deflection_map, plot_misfit
from gridflex.io.rasters import geometry_of, read_raster
from gridflex.scenario.schema import Scenario
from gridflex.units import unit_factor
from gridflex.workflows.layers import WorkingGrid, build_working_load
from gridflex.workflows.run import output_dataset, plate_from_scenario

__all__ = ["FitOutcome", "fit_outputs", "fit_scenario"]

log = logging.getLogger(__name__)

_OBSERVED_DIMENSION = {"deflection": "length", "surface": "length", "free_air_anomaly": None}


@dataclass
class FitOutcome:
    """What ``gridflex fit`` produced: the fit and the files written, in order."""

    fit: TeFit
    written: list[Path] = field(default_factory=list)


def fit_outputs(scenario: Scenario) -> dict[str, Path | None]:
    """Paths of the best-model NetCDF, map, JSON summary and misfit plot.

    The summary and plot default to ``<output file stem>_fit.json`` and
    ``<output file stem>_misfit.png`` beside the output file.
    """
    output, table = scenario.table("output"), scenario.table("fit")
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
    for name in ("infill", "gravity"):
        if scenario.tables.get(name) is not None:
            raise InputError(
                f"{scenario.where(name)}: 'gridflex fit' uses the plain solve; "
                f"remove the [{name}] table"
            )
    return table


def _on_working_grid(
    path: Path,
    variable: str,
    dimension: str | None,
    load: xr.DataArray,
    grid: WorkingGrid,
    where: str,
) -> xr.DataArray:
    """A grid read from *path*, in SI (or mGal), on the working grid of the load."""
    da = read_raster(path, variable)
    if dimension is not None:
        units = str(da.attrs.get("units", "") or "m")
        da = da * unit_factor(units, dimension, f"{where} ({path.name}): variable {da.name!r}")
    if grid.resampled:
        values = reproject_values(da.values, geometry_of(da), grid.working, "bilinear")
        return load.copy(data=values)
    try:
        check_same_grid(da.assign_coords(y=da["y"].values, x=da["x"].values), load, where)
    except InputError as exc:
        raise InputError(f"{exc}; it must be on the grid of the first [[loads]] layer") from exc
    return load.copy(data=np.asarray(da.values, dtype=np.float64))


def fit_scenario(scenario: Scenario, overwrite: bool = False, progress: Any = None) -> FitOutcome:
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
    targets = fit_outputs(scenario)
    inputs = scenario.input_files
    for target in targets.values():
        if target is not None:
            check_output_path(target, overwrite, inputs)
    plate = plate_from_scenario(scenario)
    load, grid = build_working_load(scenario)
    quantity = table["quantity"]
    observed = _on_working_grid(
        table["observed_file"],
        table["observed_variable"],
        _OBSERVED_DIMENSION[quantity],
        load,
        grid,
        scenario.where("fit", "observed_file"),
    )
    mask = None
    if table["mask_file"] is not None:
        raw = _on_working_grid(
            table["mask_file"],
            table["mask_variable"],
            None,
            load,
            grid,
            scenario.where("fit", "mask_file"),
        )
        mask = raw.copy(data=np.nan_to_num(raw.values) != 0)
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
    outcome = FitOutcome(fit=fit)
    model = output_dataset(fit.model, scenario, grid)
    model.attrs["history"] = f"gridflex {__version__} fit {scenario.path.name}"
    outcome.written.append(
        write_netcdf(model, targets["file"], overwrite, inputs, crs=grid.input.crs)
    )
    if targets["map"] is not None:
        outcome.written.append(
            plot_deflection_map(
                model,
                targets["map"],
                overwrite,
                inputs,
                title=f"Best-fitting deflection, Te = {fit.te / 1e3:.2f} km",
            )
        )
    summary = {"scenario": str(scenario.path), "gridflex_version": __version__, **fit.summary()}
    with atomic_path(targets["summary"], overwrite, inputs) as tmp:
        Path(tmp).write_text(json.dumps(summary, indent=2) + "\n", encoding="utf-8")
    outcome.written.append(Path(targets["summary"]))
    outcome.written.append(plot_misfit(fit, targets["plot"], overwrite, inputs))
    log.info("fit written: %s", ", ".join(map(str, outcome.written)))
    return outcome
