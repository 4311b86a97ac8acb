"""Scenario run steps for the ``[infill]`` and ``[gravity]`` tables.

The load layers become a column (load, surface before flexure, the surface
under the load, its height), the column is solved with the self-consistent
infill, and the anomalies are added to the result. :mod:`gridflex.workflows.run` calls
these when the tables are present.
"""

from __future__ import annotations

import logging

import xarray as xr

from gridflex.errors import InputError
from gridflex.gravity.anomalies import model_gravity
from gridflex.infill import Infill, solve_with_infill
from gridflex.loads import load_from_layers
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario, present
from gridflex.scenario.tables import InfillTable
from gridflex.workflows.layers import elevation_stress
from gridflex.workflows.scenario_tables import array_table

__all__ = ["gravity_step", "infill_from_scenario", "infill_step", "load_column"]

log = logging.getLogger(__name__)


def _base_elevation(scenario: Scenario, infill: InfillTable) -> float:
    """``[infill] base_elevation`` (m), required under thickness and stress layers."""
    base = infill["base_elevation"]
    if base is None:
        raise InputError(
            f"{scenario.where('infill', 'base_elevation')}: required with thickness or "
            "stress layers (the surface the loads stand on before flexure)"
        )
    return base


def load_column(scenario: Scenario, layers: list[xr.DataArray]) -> xr.Dataset:
    """The column of an ``[infill]`` run on the working grid.

    Thickness layers are stacked on ``base_elevation`` in scenario order (their
    submerged parts buoyed by sea water, :func:`load_from_layers`); an elevation layer
    gives the surface itself (:func:`gridflex.workflows.layers.elevation_stress`); stress layers
    add to the load and have no height.

    Parameters
    ----------
    scenario : Scenario
        With an ``[infill]`` table.
    layers : list of xarray.DataArray
        :func:`gridflex.workflows.layers.build_working_layers` values, one per ``[[loads]]``.

    Returns
    -------
    xarray.Dataset
        ``load`` (Pa), ``initial_surface``, ``reference_surface``, ``load_height`` (m).
    """
    infill = present(scenario.table("infill"), scenario.where("infill"))
    specs = array_table(scenario, "loads")
    thickness = [
        (da, spec["density"])
        for spec, da in zip(specs, layers, strict=True)
        if spec["kind"] == "thickness"
    ]
    stresses = [da for spec, da in zip(specs, layers, strict=True) if spec["kind"] == "stress"]
    elevation = [i for i, spec in enumerate(specs) if spec["kind"] == "elevation"]
    if elevation:
        column = elevation_stress(scenario, elevation[0], layers[elevation[0]])
    elif thickness:
        with error_context(scenario.where("loads")):
            column = load_from_layers(
                _base_elevation(scenario, infill),
                thickness,
                sea_level=infill["sea_level"],
                water_density=infill["water_density"],
                gravity=scenario.table("plate")["gravity"],
            )
    else:
        flat = xr.full_like(stresses[0], _base_elevation(scenario, infill))
        column = xr.Dataset(
            {
                "load": flat * 0.0,
                "initial_surface": flat,
                "reference_surface": flat,
                "load_height": flat * 0.0,
            }
        )
    for da in stresses:
        column["load"] = column["load"] + da.values
    column["load"].attrs = {
        "units": "Pa",
        "long_name": "vertical stress of the load (positive downward)",
    }
    return column


def infill_from_scenario(scenario: Scenario) -> Infill:
    """The :class:`Infill` of the ``[infill]`` table."""
    table = present(scenario.table("infill"), scenario.where("infill"))
    with error_context(scenario.where("infill")):
        return Infill(
            sea_level=table["sea_level"],
            water_density=table["water_density"],
            sediment=table["sediment"],
            sediment_density=table["sediment_density"],
            sediment_level=table["sediment_level"],
            fill_existing=table["fill_existing"],
            load_buried=table["load_buried"],
        )


def infill_step(
    scenario: Scenario, plate: Plate, column: xr.Dataset, progress: Progress | None = None
) -> xr.Dataset:
    """Solve the column with the self-consistent infill of the scenario, for any plate
    (a te grid from a file, ``[margin]`` or ``[[breaks]]`` runs by finite differences)."""
    table = present(scenario.table("infill"), scenario.where("infill"))
    solver = scenario.table("solver")
    log.info("solving %s column with self-consistent infill", column["load"].shape)
    return solve_with_infill(
        column,
        plate,
        infill=infill_from_scenario(scenario),
        method=solver["method"],
        edges=solver["edges"],
        inplane_force_x=solver["inplane_force_x"],
        inplane_force_y=solver["inplane_force_y"],
        pad_factor=solver["pad_factor"],
        tolerance=table["tolerance"],
        max_iterations=table["max_iterations"],
        progress=progress,
    )


def gravity_step(scenario: Scenario, result: xr.Dataset) -> xr.Dataset:
    """The result with ``free_air_anomaly`` and ``bouguer_anomaly`` added."""
    table = present(scenario.table("gravity"), scenario.where("gravity"))
    with error_context(scenario.where("gravity")):
        gravity = model_gravity(
            result,
            observation_height=table["observation_height"],
            terms=table["terms"],
            bouguer_density=table["bouguer_density"],
            edges=scenario.table("solver")["edges"],
        )
    out = result.copy()
    for name in ("free_air_anomaly", "bouguer_anomaly"):
        out[name] = gravity[name]
    out.attrs.update(gravity.attrs)
    return out
