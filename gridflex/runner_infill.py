"""Scenario run steps for the ``[infill]`` and ``[gravity]`` tables.

The load layers become a column (load, surface before flexure, the surface
under the load, its height), the column is solved with the self-consistent
infill, and the anomalies are added to the result. :mod:`gridflex.runner` calls
these when the tables are present.
"""

from __future__ import annotations

import logging
from typing import Any

import xarray as xr

from .anomalies import model_gravity
from .errors import InputError
from .grid import check_same_grid
from .infill import Infill, solve_with_infill
from .io.netcdf import read_grid
from .loads import load_from_elevation, load_from_layers, regional_surface
from .plate import Plate
from .scenario import Scenario

__all__ = ["elevation_load", "gravity_step", "infill_from_scenario", "infill_step", "load_column"]

log = logging.getLogger(__name__)


def elevation_load(scenario: Scenario, index: int, layer: dict[str, Any]) -> xr.Dataset:
    """Load Dataset of an ``kind = "elevation"`` layer (see :func:`load_from_elevation`)."""
    where = scenario.where("loads", index=index)
    elevation = read_grid(layer["file"], layer["variable"], "length")
    infill = scenario.table("infill") or {}
    regional: Any = layer["regional_elevation"]
    try:
        if regional is None:
            regional = regional_surface(elevation, layer["regional_radius"])
        return load_from_elevation(
            elevation, layer["density"], regional,
            sea_level=infill.get("sea_level", 0.0),
            water_density=infill.get("water_density", 1030.0),
            gravity=scenario.table("plate")["gravity"],
        )
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc


def load_column(scenario: Scenario, thickness_layers: list[tuple[xr.DataArray, float]],
                stress: xr.DataArray | None) -> xr.Dataset:
    """The column of an ``[infill]`` run.

    Parameters
    ----------
    scenario : Scenario
        With an ``[infill]`` table.
    thickness_layers : list of (thickness grid, density)
        Thickness layers in scenario order, stacked on ``base_elevation`` (their
        submerged parts buoyed by sea water).
    stress : xarray.DataArray, optional
        Sum of the stress layers (Pa), added to the load; they have no height.
    """
    infill = scenario.table("infill")
    gravity = scenario.table("plate")["gravity"]
    layers = scenario.table("loads")
    elevation = [i for i, layer in enumerate(layers) if layer["kind"] == "elevation"]
    if elevation:
        column = elevation_load(scenario, elevation[0], layers[elevation[0]])
    elif thickness_layers:
        try:
            column = load_from_layers(
                infill["base_elevation"], thickness_layers, sea_level=infill["sea_level"],
                water_density=infill["water_density"], gravity=gravity,
            )
        except InputError as exc:
            raise InputError(f"{scenario.where('loads')}: {exc}") from exc
    else:
        if stress is None or infill["base_elevation"] is None:
            raise InputError(f"{scenario.where('infill', 'base_elevation')}: required for "
                             "stress-only loads (the surface before flexure)")
        flat = xr.full_like(stress, infill["base_elevation"])
        column = xr.Dataset({"load": stress * 0.0, "initial_surface": flat,
                             "reference_surface": flat, "load_height": flat * 0.0})
    if stress is not None:
        check_same_grid(stress, column["load"], f"{scenario.where('loads')} stress layers")
        column["load"] = column["load"] + stress.values
    column["load"].attrs = {"units": "Pa",
                            "long_name": "vertical stress of the load (positive downward)"}
    return column


def infill_from_scenario(scenario: Scenario) -> Infill:
    """The :class:`Infill` of the ``[infill]`` table."""
    table = scenario.table("infill")
    try:
        return Infill(
            sea_level=table["sea_level"], water_density=table["water_density"],
            sediment=table["sediment"], sediment_density=table["sediment_density"],
            sediment_level=table["sediment_level"], fill_existing=table["fill_existing"],
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('infill')}: {exc}") from exc


def infill_step(scenario: Scenario, plate: Plate, column: xr.Dataset, progress=None) -> xr.Dataset:
    """Solve the column with the self-consistent infill of the scenario."""
    table, solver = scenario.table("infill"), scenario.table("solver")
    if solver["method"] == "finite-difference" or plate.is_variable:
        raise InputError(f"{scenario.where('infill')}: the self-consistent infill runs with "
                         "the spectral solver (a constant elastic_thickness) in this version")
    log.info("solving %s column with self-consistent infill", column["load"].shape)
    return solve_with_infill(
        column, plate, infill=infill_from_scenario(scenario), edges=solver["edges"],
        inplane_force_x=solver["inplane_force_x"], inplane_force_y=solver["inplane_force_y"],
        pad_factor=solver["pad_factor"], tolerance=table["tolerance"],
        max_iterations=table["max_iterations"], progress=progress,
    )


def gravity_step(scenario: Scenario, result: xr.Dataset) -> xr.Dataset:
    """The result with ``free_air_anomaly`` and ``bouguer_anomaly`` added."""
    table = scenario.table("gravity")
    try:
        gravity = model_gravity(
            result, observation_height=table["observation_height"], terms=table["terms"],
            bouguer_density=table["bouguer_density"], edges=scenario.table("solver")["edges"],
        )
    except InputError as exc:
        raise InputError(f"{scenario.where('gravity')}: {exc}") from exc
    out = result.copy()
    for name in ("free_air_anomaly", "bouguer_anomaly"):
        out[name] = gravity[name]
    out.attrs.update(gravity.attrs)
    return out
