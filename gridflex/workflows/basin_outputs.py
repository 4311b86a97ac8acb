"""The outputs of a staged basin beyond its NetCDF file: grids and maps per stage,
pseudo-wells and a cross-section of the horizons.

Every path is planned in the run's :class:`~gridflex.workflows.outputs.OutputPlan`
before any work (:func:`plan_basin_outputs`); the wells and the section line are checked
against the grid as soon as it is read, before the stages are solved
(:func:`check_basin_outputs`); what can still fail (sampling) is computed before the
first file is written, and the files are written with the NetCDF, all or none
(:func:`write_basin_outputs`). The writers are the ones of ``gridflex run``
(:func:`gridflex.io.rasters.write_geotiff`, :func:`gridflex.io.plots.plot_field_map`,
:func:`gridflex.io.tables.write_csv`).

Names beside the NetCDF file ``<stem>.nc`` of ``[output] file``:

* ``<stem>_<grid>_stage<k>.tif`` and ``.png``: the grid after stage ``k`` (0 the oldest);
* ``<stem>_well_<name>.csv``: the pseudo-well ``name`` of ``[[wells]]``;
* ``[output] section_plot`` (default ``<stem>_section.png``): the horizons along
  ``[section]``.

Depths and subsidence are positive DOWN (m) below the basin's sea level.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.basin.backstrip import airy_tectonic_subsidence
from gridflex.errors import InputError
from gridflex.io.plots import plot_field_map, plot_horizon_section
from gridflex.io.rasters import write_geotiff
from gridflex.io.tables import write_csv
from gridflex.results.profile import (
    check_profile_ends,
    check_profile_point,
    profile_ends,
    sample_profile,
)
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario
from gridflex.validation import check_number
from gridflex.workflows.outputs import OutputPlan
from gridflex.workflows.scenario_tables import array_table

__all__ = [
    "DEFAULT_STAGE_GRIDS",
    "STAGE_GRIDS",
    "WELL_VARIABLES",
    "BasinOutputs",
    "check_basin_outputs",
    "plan_basin_outputs",
    "well_table",
    "write_basin_outputs",
]

STAGE_GRIDS = (
    "stage_thickness",
    "accommodation_created",
    "accommodation",
    "deflection_increment",
    "deflection",
    "surface",
    "water_depth",
    "stage_fill",
    "sediment_thickness",
    "basement_depth",
)
"""Grids of a staged basin that ``[output] geotiff`` and ``maps`` may name."""

DEFAULT_STAGE_GRIDS = ("stage_thickness", "accommodation_created", "deflection_increment")
"""What ``geotiff = true`` and ``maps = true`` write for every stage."""

_SIGNED = frozenset(
    {"accommodation_created", "accommodation", "deflection_increment", "deflection", "surface"}
)
"""Grids drawn with a diverging colour map centred on zero."""

WELL_VARIABLES = ("thermal_subsidence",)
"""Optional grids on ``(stage, y, x)`` that a pseudo-well table samples when the result
has them (m, positive down; added by forward models with lithospheric stretching)."""

_WELL_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass
class BasinOutputs:
    """The planned outputs of a staged basin beyond its NetCDF file (see the module)."""

    tiffs: dict[tuple[str, int], Path] = field(default_factory=dict)
    maps: dict[tuple[str, int], Path] = field(default_factory=dict)
    wells: dict[str, tuple[float, float, Path]] = field(default_factory=dict)
    section: tuple[tuple[float, float], tuple[float, float], list[int], Path] | None = None


def _stage_grids(scenario: Scenario, key: str) -> list[str]:
    table: Mapping[str, Any] = scenario.table("output")
    value = table[key]
    if value is False:
        return []
    names = list(DEFAULT_STAGE_GRIDS) if value is True else list(value)
    unknown = [n for n in names if n not in STAGE_GRIDS]
    if unknown:
        raise InputError(
            f"{scenario.where('output', key)}: no stage grid {unknown[0]!r}; "
            f"the stage grids are {', '.join(STAGE_GRIDS)}"
        )
    return names


def _section_stages(scenario: Scenario, ages: Any, stage_ages: list[float]) -> list[int]:
    """The stage index of each of the ``[section] ages`` (each must be a stage's age)."""
    where = scenario.where("section", "ages")
    if not isinstance(ages, list) or not ages:
        raise InputError(f"{where} must be a non-empty list of stage ages, got {ages!r}")
    out = []
    for age in ages:
        value = check_number(where, age, unit="years")
        match = [i for i, a in enumerate(stage_ages) if np.isclose(a, value, rtol=1e-9, atol=0)]
        if not match:
            have = ", ".join(f"{a:g}" for a in stage_ages)
            raise InputError(f"{where}: {age!r} is not the age of a stage; the stages are {have}")
        out.append(match[0])
    return out


def plan_basin_outputs(scenario: Scenario, plan: OutputPlan) -> BasinOutputs:
    """Check the per-stage grids and maps, ``[[wells]]`` and ``[section]`` of a basin
    scenario and add their paths to *plan*, before any work.

    Raises
    ------
    InputError
        An output a backstrip cannot give, an unknown stage grid, a bad well name or
        section, or a path that may not be written (naming table, key and value).
    """
    output: Mapping[str, Any] = scenario.table("output")
    netcdf: Path = output["file"]
    wanted = {
        "geotiff": _stage_grids(scenario, "geotiff"),
        "maps": _stage_grids(scenario, "maps"),
    }
    wells = array_table(scenario, "wells")
    section = scenario.tables.get("section")
    stages = array_table(scenario, "stages")
    if scenario.tables.get("basin") is None:
        asked = [f"[output] {k}" for k, v in wanted.items() if v]
        asked += ["[[wells]]"] if wells else []
        asked += ["[section]"] if section is not None else []
        asked += ["[output] section_plot"] if output["section_plot"] is not None else []
        if asked:
            raise InputError(
                f"{scenario.path}: {asked[0]} needs staged loading ([basin] and "
                "[[stages]]); a backstrip writes its NetCDF file only"
            )
        return BasinOutputs()
    out = BasinOutputs()
    paths: dict[str, Path | None] = {}
    where: dict[str, str] = {}
    for key, store, suffix in (("geotiff", out.tiffs, ".tif"), ("maps", out.maps, ".png")):
        for name in wanted[key]:
            for k in range(len(stages)):
                path = netcdf.with_name(f"{netcdf.stem}_{name}_stage{k}{suffix}")
                store[(name, k)] = path
                paths[f"{key} {name} stage {k}"] = path
                where[f"{key} {name} stage {k}"] = scenario.where("output", key)
    for i, row in enumerate(wells):
        label = scenario.where("wells", "name", i)
        name = row["name"]
        if not _WELL_NAME.match(name):
            raise InputError(
                f"{label}: {name!r} must be letters, digits, '_', '.' or '-' "
                "(it names the well's CSV file)"
            )
        if name in out.wells:
            raise InputError(f"{label}: {name!r} names two wells")
        path = netcdf.with_name(f"{netcdf.stem}_well_{name}.csv")
        out.wells[name] = (row["x"], row["y"], path)
        paths[f"well {name}"], where[f"well {name}"] = path, label
    if section is None and output["section_plot"] is not None:
        raise InputError(f"{scenario.where('output', 'section_plot')}: needs a [section] table")
    if section is not None:
        start, end = check_profile_ends(
            section["start"],
            section["end"],
            (scenario.where("section", "start"), scenario.where("section", "end")),
        )
        chosen = _section_stages(scenario, section["ages"], [float(s["age"]) for s in stages])
        plot = output["section_plot"] or netcdf.with_name(f"{netcdf.stem}_section.png")
        out.section = (start, end, chosen, plot)
        paths["section_plot"] = plot
        where["section_plot"] = scenario.where("output", "section_plot")
    plan.files.add(paths, where)
    return out


def check_basin_outputs(scenario: Scenario, outputs: BasinOutputs, grid: xr.DataArray) -> None:
    """Wells and section line lie on *grid* (the basin's surface), checked before the
    stages are solved.

    Raises
    ------
    InputError
        Naming the well (or the section end), its position and the grid's extent.
    """
    xs, ys = grid["x"].values, grid["y"].values
    extent = f"x {xs.min():g} to {xs.max():g}, y {ys.min():g} to {ys.max():g}"
    for i, (name, (x, y, _)) in enumerate(outputs.wells.items()):
        check_profile_point(scenario.where("wells", index=i), [x, y])
        if not (xs.min() <= x <= xs.max() and ys.min() <= y <= ys.max()):
            raise InputError(
                f"{scenario.where('wells', index=i)}: well {name!r} at ({x:g}, {y:g}) lies "
                f"outside the grid ({extent})"
            )
    if outputs.section is not None:
        start, end, _, _ = outputs.section
        axes = xr.Dataset(coords={"y": grid["y"], "x": grid["x"]})
        with error_context(scenario.where("section")):
            profile_ends(axes, start, end)


def well_table(result: xr.Dataset, x: float, y: float) -> xr.Dataset:
    """The pseudo-well at ``(x, y)`` of a staged-loading result: one row per stage.

    Columns (m, positive down; bilinear interpolation between cell centres):
    ``total_subsidence``, the basement depth below the basin's sea level;
    ``tectonic_subsidence``, the local (Airy) water-loaded backstrip of the well's
    column (Steckler & Watts 1978; PHYSICS.md 9.2) with the stage's sea level;
    ``thermal_subsidence`` when the result has it (:data:`WELL_VARIABLES`); and
    ``horizon_<k>_depth``, the depth of the top of stage ``k`` (NaN before it is
    deposited).

    Parameters
    ----------
    result : xarray.Dataset
        Of :func:`gridflex.basin.stage_loading`, with its ``sea_level`` and
        ``water_density`` attributes and ``plate_mantle_density``.
    x, y : float
        The well, in the grid's coordinates.
    """
    names = ["basement_depth", "horizon_depth", "surface", "sediment_thickness"]
    names += ["sediment_density", "sea_level"]
    names += [n for n in WELL_VARIABLES if n in result]
    point = result[names].interp(x=x, y=y)
    datum = float(result.attrs["sea_level"])
    sea = point["sea_level"].values
    tectonic = airy_tectonic_subsidence(
        point["sediment_thickness"].values,
        point["sediment_density"].values,
        sea - point["surface"].values,
        sea - datum,
        float(result.attrs["plate_mantle_density"]),
        float(result.attrs["water_density"]),
    )
    down = f"m below the basin's sea level ({datum:g} m), positive down"
    columns: dict[str, tuple[str, np.ndarray, dict[str, str]]] = {
        "total_subsidence": (
            "age",
            point["basement_depth"].values,
            {"units": "m", "long_name": f"basement depth, {down}"},
        ),
        "tectonic_subsidence": (
            "age",
            tectonic,
            {
                "units": "m",
                "long_name": "water-loaded tectonic subsidence, local (Airy) backstrip "
                "of the well's column (Steckler & Watts 1978)",
            },
        ),
    }
    for name in WELL_VARIABLES:  # written only when the model computed them
        if name in point:
            columns[name] = ("age", point[name].values, dict(result[name].attrs))
    for k in range(result.sizes["horizon"]):
        age = float(result["horizon_age"][k])
        columns[f"horizon_{k}_depth"] = (
            "age",
            point["horizon_depth"].isel(horizon=k).values,
            {"units": "m", "long_name": f"top of the stage of age {age:g} yr, {down}"},
        )
    ages = np.asarray(result["age"].values, dtype=np.float64)
    table = xr.Dataset(columns, coords={"age": ("age", ages, {"units": "years before present"})})
    return table.assign_attrs(x=x, y=y)


def _stage_title(result: xr.Dataset, name: str, stage: int) -> str:
    long_name = str(result[name].attrs.get("long_name", name))
    age = float(result["age"][stage])
    return f"{long_name}\nstage {stage}, {age / 1e6:g} Myr before present"


def write_basin_outputs(
    outputs: BasinOutputs,
    result: xr.Dataset,
    crs: CRS | None,
    plan: OutputPlan,
    written: list[Path],
) -> None:
    """Write the planned per-stage GeoTIFFs and maps, wells and section (inside
    :meth:`OutputPlan.writing`, after the NetCDF); the wells and section are sampled
    first."""
    wells = {name: (well_table(result, x, y), path) for name, (x, y, path) in outputs.wells.items()}
    section = None
    if outputs.section is not None:
        start, end, stages, path = outputs.section
        parts = []
        for k in stages:
            at = result[["basement_depth", "horizon_depth"]].isel(stage=k)
            parts.append((float(result["age"][k]), sample_profile(at, start, end)))
        section = (parts, path)
    overwrite, inputs = plan.overwrite, plan.inputs
    by_grid: Mapping[tuple[str, int], Path]
    for by_grid, kind in ((outputs.tiffs, "tif"), (outputs.maps, "png")):
        for (name, k), path in by_grid.items():
            grid = result[name].isel(stage=k, drop=True)
            if kind == "tif":
                written.append(write_geotiff(grid, path, crs, overwrite, inputs))
                continue
            units = grid.attrs.get("units", "")
            written.append(
                plot_field_map(
                    grid,
                    path,
                    _stage_title(result, name, k),
                    f"{name.replace('_', ' ')} ({units})",
                    overwrite,
                    inputs,
                    signed=name in _SIGNED,
                )
            )
    for table, path in wells.values():
        written.append(write_csv(table, path, overwrite, inputs))
    if section is not None:
        parts, path = section
        written.append(plot_horizon_section(parts, path, overwrite, inputs))
