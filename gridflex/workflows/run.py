"""Run a validated scenario: build the load, solve, write the outputs."""

from __future__ import annotations

import dataclasses
import logging
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.engine import solve
from gridflex.errors import CompensationOutsideWarning, InputError
from gridflex.gis.geometry import GridGeometry
from gridflex.grid import check_same_grid
from gridflex.io.netcdf import as_output_dtype, write_netcdf
from gridflex.io.plots import plot_deflection_map, plot_field_map, plot_profile
from gridflex.io.rasters import write_geotiff
from gridflex.io.tables import write_csv
from gridflex.io.vectors import outline_features, write_geojson
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.results.profile import profile_ends, sample_profile
from gridflex.results.summary import deflection_summary, format_summary
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import Scenario
from gridflex.te_maps import break_mask, broken_te, margin_te
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.layers import (
    WorkingGrid,
    build_working_layers,
    input_grid_load,
    restoring_stiffness,
    to_input_grid,
    working_load,
)
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result, with_vertical_displacement
from gridflex.workflows.run_steps import gravity_step, infill_step, load_column
from gridflex.workflows.scenario_tables import array_table

__all__ = [
    "RunOutcome",  # defined in gridflex.workflows.outcome; kept here for existing imports
    "broken_cells",
    "elastic_thickness_from_scenario",
    "output_dataset",
    "plate_from_scenario",
    "plate_with_te",
    "run_scenario",
    "with_breaks",
]

log = logging.getLogger(__name__)


def elastic_thickness_from_scenario(
    scenario: Scenario, like: xr.DataArray | None = None, grid: WorkingGrid | None = None
) -> float | xr.DataArray:
    """Te of the scenario: a number, or a grid on *like*'s grid (m).

    *like* is the working grid of the load (and *grid* its geometry, when the layers were
    resampled): Te and mask rasters are resampled onto it like the load layers (bilinear for
    Te, nearest for masks), and margin and break lines are in its projected coordinates (m).

    A grid comes from ``[plate] elastic_thickness_file`` or from the ``[margin]`` profile;
    every ``[[breaks]]`` entry then sets Te = 0 on its cells (a constant Te with breaks
    becomes a grid too).

    Raises
    ------
    InputError
        A Te grid or mask not on the load grid, a bad line; the message names the table.
    """
    table = scenario.table("plate")
    breaks = array_table(scenario, "breaks")
    margin = scenario.tables.get("margin")
    if (
        table["elastic_thickness"] is None
        and table.get("elastic_thickness_file") is None
        and margin is None
    ):
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: required key is "
            "missing (effective elastic thickness Te)"
        )
    if table["elastic_thickness"] is not None and not breaks:
        return float(table["elastic_thickness"])
    if like is None:
        raise InputError(f"{scenario.where('plate')}: a Te grid needs the load grid")
    te = _te_grid(scenario, like, None if grid is None else grid.working)
    broken = broken_cells(scenario, like, grid)
    return te if broken is None else broken_te(te, broken)


def broken_cells(
    scenario: Scenario, like: xr.DataArray, grid: WorkingGrid | None = None
) -> xr.DataArray | None:
    """The cells of every ``[[breaks]]`` entry (True: te = 0) on *like*'s grid, or None.

    Mask files are resampled onto *like*'s grid by nearest neighbour (*grid*: the
    geometry of the working grid, when the layers were resampled); lines are drawn in its
    projected coordinates (m).

    Raises
    ------
    InputError
        A mask not on the load grid or a bad line; the message names the entry.
    """
    return _broken_on(scenario, like, None if grid is None else grid.working)


def with_breaks(
    scenario: Scenario,
    te: xr.DataArray,
    like: xr.DataArray,
    working: GridGeometry | None = None,
) -> xr.DataArray:
    """*te* (m, a grid on *like*'s grid) with Te = 0 on the cells of every ``[[breaks]]``
    entry (a line in *like*'s projected coordinates, or a mask file put on its grid;
    *like* and *working* as in :func:`elastic_thickness_from_scenario`).

    Raises
    ------
    InputError
        A bad line or mask; the message names the ``[[breaks]]`` entry.
    """
    broken = _broken_on(scenario, like, working)
    return te if broken is None else broken_te(te, broken)


def _broken_on(
    scenario: Scenario, like: xr.DataArray, working: GridGeometry | None
) -> xr.DataArray | None:
    """The break cells of :func:`broken_cells` for a working geometry (or None)."""
    breaks = array_table(scenario, "breaks")
    if not breaks:
        return None
    broken = np.zeros(like.shape, dtype=bool)
    for index, item in enumerate(breaks):
        where = scenario.where("breaks", index=index)
        if item["file"] is not None:
            mask = read_grid_input(
                item["file"],
                item["variable"],
                where,
                dimension=None,
                reference=like,
                working=working,
                resampling="nearest",
            )
            cells = mask != 0
        else:
            with error_context(where):
                cells = break_mask(like, [item["line"]], item["width"])
        with error_context(where):
            check_same_grid(cells, like, "break mask")
        broken |= np.asarray(cells.values, dtype=bool)
    out = like.copy(data=broken)
    out.attrs = {"long_name": "broken plate (te = 0)"}
    return out.rename("broken")


def _te_grid(scenario: Scenario, like: xr.DataArray, working: GridGeometry | None) -> xr.DataArray:
    """Te (m) on *like*'s grid from a file, a ``[margin]`` profile or the constant."""
    table = scenario.table("plate")
    margin = scenario.tables.get("margin")
    if table["elastic_thickness_file"] is not None:
        return read_grid_input(
            table["elastic_thickness_file"],
            table["elastic_thickness_variable"],
            scenario.where("plate", "elastic_thickness_file"),
            reference=like,
            working=working,
            role="elastic_thickness",
        )
    if margin is not None:
        with error_context(scenario.where("margin")):
            return margin_te(
                like, margin["te_left"], margin["te_right"], margin["line"], margin["width"]
            )
    # plate_from_scenario refused a plate without any source of Te before calling here
    constant = cast(float, table["elastic_thickness"])
    return xr.full_like(like, float(constant), dtype=np.float64)


RESPONSE_MARGIN = 8.0
"""With ``extent = "response"`` the working grid reaches this many (largest) flexural
parameters beyond the input: the deflection of a point load has fallen below 0.1 % of its
peak well within it (|kei(x)| / kei(0) < 1e-3 beyond x ~ 7; kei by scipy.special)."""


def flexural_parameter_range(scenario: Scenario) -> tuple[float, float]:
    """The plate's smallest and largest flexural parameters (m), before any working grid.

    From the Te of the constant, the ``[margin]`` profile or the Te file (read on its own
    grid); breaks do not change them. ``(0, 0)`` when no Te is given (plate_from_scenario
    says so) or it is not finite.
    """
    table = scenario.table("plate")
    margin = scenario.tables.get("margin")
    if table["elastic_thickness_file"] is not None:
        te_grid = read_grid_input(
            table["elastic_thickness_file"],
            table["elastic_thickness_variable"],
            scenario.where("plate", "elastic_thickness_file"),
        )
        low, high = float(np.nanmin(te_grid.values)), float(np.nanmax(te_grid.values))
    elif margin is not None:
        low, high = sorted((float(margin["te_left"]), float(margin["te_right"])))
    elif table["elastic_thickness"] is not None:
        low = high = float(table["elastic_thickness"])
    else:
        return 0.0, 0.0
    if not (np.isfinite(low) and np.isfinite(high)):
        return 0.0, 0.0
    return (
        float(plate_with_te(scenario, max(low, 0.0)).flexural_parameter),
        float(plate_with_te(scenario, max(high, 0.0)).flexural_parameter),
    )


def plate_from_scenario(
    scenario: Scenario, like: xr.DataArray | None = None, grid: WorkingGrid | None = None
) -> Plate:
    """The :class:`Plate` of the ``[plate]`` table (Te grids on *like*'s grid)."""
    return plate_with_te(scenario, elastic_thickness_from_scenario(scenario, like, grid))


def plate_with_te(scenario: Scenario, te: float | xr.DataArray) -> Plate:
    """A :class:`Plate` of *te* with the other ``[plate]`` values of *scenario*."""
    table = scenario.table("plate")
    with error_context(scenario.where("plate")):
        return Plate(
            te,
            youngs_modulus=table["youngs_modulus"],
            poisson_ratio=table["poisson_ratio"],
            mantle_density=table["mantle_density"],
            infill_density=table["infill_density"],
            gravity=table["gravity"],
            crust_thickness=table["crust_thickness"],
            crust_density=table["crust_density"],
        )


def output_dataset(
    result: xr.Dataset,
    scenario: Scenario,
    grid: WorkingGrid,
    command: str = "run",
    back: BackToInput | None = None,
) -> xr.Dataset:
    """The result with GIS-friendly extras and the provenance of ``gridflex COMMAND``,
    on the input grid, nodata where the load file had none (*back*: the load there, the
    plate's rigidity, see :func:`to_input_grid`, and for an infill run without plate
    stiffness its columns solved on the input grid)."""
    out = stamp_result(result, scenario, command)
    out.attrs.update(grid.describe())
    if _on_working_grid(scenario):
        return with_vertical_displacement(out, "plate")
    if back is None:
        on_input = to_input_grid(out, grid)
    else:
        on_input = to_input_grid(out, grid, back.input_load, back.rigidity)
        if back.local is not None:
            on_input = _with_local_columns(on_input, back.local)
    return with_nodata(with_vertical_displacement(on_input, "plate"), grid.input_nodata)


def _local_infill(scenario: Scenario, grid: WorkingGrid) -> xr.Dataset:
    """The infill solution of a plate without stiffness (te = 0 everywhere) on the input
    grid itself: each column floats on its own, so the grid's projection and spacing do
    not enter and it is exact cell by cell (written instead of the working solution read
    back, which would smooth the cell-to-cell detail)."""
    ny, nx = grid.input.shape
    dy, dx = grid.input.cell_size_metres()
    coords = {"y": np.arange(ny) * dy, "x": np.arange(nx) * dx}
    layers = [
        xr.DataArray(np.asarray(da.values), dims=("y", "x"), coords=coords, name=da.name)
        for da in grid.input_layers
    ]
    column = load_column(scenario, layers)
    return infill_step(scenario, plate_with_te(scenario, 0.0), column)


def _with_local_columns(result: xr.Dataset, local: xr.Dataset) -> xr.Dataset:
    """*result* with every grid *local* holds (load, deflection, fill, surfaces) taken
    from it, cell by cell; the rest (gravity) as it was."""
    out = result.copy()
    for name, var in local.data_vars.items():
        if name in out and out[name].dims == ("y", "x") and var.shape == out[name].shape:
            out[name] = out[name].copy(data=np.asarray(var.values))
    return out


def with_nodata(result: xr.Dataset, nodata: np.ndarray | None) -> xr.Dataset:
    """*result* with every ``(y, x)`` grid NaN where the input had no data (the cells the
    load file left empty stay empty in what is written)."""
    if nodata is None:
        return result
    out = result.copy()
    for name, var in result.data_vars.items():
        if var.dims == ("y", "x") and var.shape == nodata.shape:
            out[name] = var.where(~nodata)
    return out


@dataclass(frozen=True)
class BackToInput:
    """What :func:`to_input_grid` needs beyond the result: the load on the input grid
    (Pa) and the plate's flexural rigidity (N m, constant or on the working grid)."""

    input_load: np.ndarray | None
    rigidity: float | np.ndarray
    local: xr.Dataset | None = None


def _geotiff_paths(scenario: Scenario, result: xr.Dataset) -> dict[str, Path]:
    """``{variable: path}`` of the GeoTIFFs ``[output] geotiff`` asks for (none, every
    grid of the result, or the listed variables, each of which must be one)."""
    output = scenario.table("output")
    wanted, netcdf = output["geotiff"], output["file"]
    grids = [str(n) for n in result.data_vars if result[n].dims == ("y", "x")]
    if wanted is False:
        return {}
    names = grids if wanted is True else list(wanted)
    unknown = [n for n in names if n not in grids]
    if unknown:
        raise InputError(
            f"{scenario.where('output', 'geotiff')}: no output grid {unknown[0]!r}; "
            f"the grids are {', '.join(grids)}"
        )
    return {name: netcdf.with_name(f"{netcdf.stem}_{name}.tif") for name in names}


def _on_working_grid(scenario: Scenario) -> bool:
    """Results are written on the working grid: asked for, or implied by the response extent."""
    output = scenario.table("output")
    return output["grid"] == "working" or output["extent"] == "response"


def written_crs(scenario: Scenario, grid: WorkingGrid) -> CRS | None:
    """The CRS of the written grids: the input's, or the working grid's."""
    return grid.working.crs if _on_working_grid(scenario) else grid.input.crs


RESPONSE_THRESHOLD = 1e-3
"""``extent = "response"`` keeps the cells where |w| exceeds this share of its peak."""


def crop_to_response(working: xr.Dataset) -> xr.Dataset:
    """*working* cut to the rows and columns where |deflection| exceeds 0.1 % of its
    peak, and one cell more on each side."""
    w = np.abs(working["deflection"].values)
    peak = float(w.max())
    if not peak > 0:
        return working
    rows = np.flatnonzero((w > RESPONSE_THRESHOLD * peak).any(axis=1))
    cols = np.flatnonzero((w > RESPONSE_THRESHOLD * peak).any(axis=0))
    ny, nx = w.shape
    return working.isel(
        y=slice(max(rows[0] - 1, 0), min(rows[-1] + 2, ny)),
        x=slice(max(cols[0] - 1, 0), min(cols[-1] + 2, nx)),
    )


def compensation_outside(working: xr.Dataset) -> float | None:
    """Share of the load's compensation that lies outside the grid (0 to 1).

    On an unbounded plate the restoring force ∫ (ρm − ρinfill) g w dA balances the
    load ∫ q dA (force balance, PHYSICS.md 1.1); the part of it missing from the grid
    is the compensation beyond its edges. Known for a plain solve with infinite edges
    and one infill density (else None).
    """
    attrs = working.attrs
    if attrs.get("edges") != "infinite" or "moat_fill" in working:
        return None
    stiffness = restoring_stiffness(attrs)
    if stiffness is None:
        return None
    total = float(np.sum(working["load"].values))
    if not total > 0:
        return None
    inside = stiffness * float(np.sum(working["deflection"].values))
    return float(min(max(1.0 - inside / total, 0.0), 1.0))


_FIELD_MAPS = {
    # output key: (variable, title, colour-bar label, signed colour map)
    "moat_fill_map": (
        "moat_fill",
        "Moat fill (sediment and water in the flexural depression); black: load outline",
        "moat fill (m)",
        False,
    ),
    "free_air_map": (
        "free_air_anomaly",
        "Free-air gravity anomaly of the flexure model; black: load outline",
        "free-air anomaly (mGal)",
        True,
    ),
    "bouguer_map": (
        "bouguer_anomaly",
        "Bouguer gravity anomaly of the flexure model; black: load outline",
        "Bouguer anomaly (mGal)",
        True,
    ),
}
"""PNG maps of single fields: ``[output]`` key -> what to draw."""


def _planned_outputs(scenario: Scenario) -> dict[str, Path | None]:
    """Every output path known before the solve: the keys of ``[output]`` and the
    GeoTIFFs of the grids ``geotiff`` lists by name."""
    out: Mapping[str, Any] = scenario.table("output")
    keys = ("file", "map", "outlines", "profile_csv", "profile_plot", *_FIELD_MAPS)
    planned: dict[str, Path | None] = {k: out[k] for k in keys}
    if isinstance(out["geotiff"], list):
        netcdf = out["file"]
        for name in out["geotiff"]:
            planned[f"geotiff {name}"] = netcdf.with_name(f"{netcdf.stem}_{name}.tif")
    return planned


def _check_geotiff_names(scenario: Scenario, plan: OutputPlan) -> None:
    """With ``geotiff = true`` (a GeoTIFF per grid, named once the grids are known) no
    other output may be named like one: ``<stem>_<anything>.tif`` beside the NetCDF."""
    out = scenario.table("output")
    if out["geotiff"] is not True:
        return
    netcdf = out["file"]
    folder, prefix = netcdf.resolve().parent, f"{netcdf.stem}_"
    for key, path in plan.paths.items():
        resolved = path.resolve()
        if (
            key != "file"
            and resolved.parent == folder
            and resolved.name.startswith(prefix)
            and resolved.suffix.lower() in (".tif", ".tiff")
        ):
            raise InputError(
                f"{scenario.where('output', key.split()[0])}: {str(path)!r} may be the "
                f"GeoTIFF of a result grid (geotiff = true writes {prefix}<grid>.tif); "
                "give the output another name"
            )


def _check_before_solve(scenario: Scenario, grid: WorkingGrid) -> None:
    """What would stop the outputs from being written, checked once the grids are
    known and before the solve: the profile line lies on the written grid, the outlines
    have a CRS."""
    outputs = scenario.table("output")
    if outputs["outlines"] and grid.working.crs is None:
        raise InputError(
            f"{scenario.where('output', 'outlines')}: the grid has no coordinate reference "
            "system, so the outlines cannot be placed in longitude/latitude; give the "
            "input a CRS or leave outlines out"
        )
    start, end = outputs["profile_start"], outputs["profile_end"]
    if start is not None and end is not None:
        written = grid.working if _on_working_grid(scenario) else grid.input
        y, x = written.coords()
        units = "degrees_east" if written.is_geographic else "m"
        axes = xr.Dataset(coords={"y": ("y", y), "x": ("x", x, {"units": units})})
        with error_context(scenario.where("output", "profile_start")):
            profile_ends(axes, start, end)


def _solve_working(
    scenario: Scenario,
    progress: Progress | None = None,
    check: Callable[[WorkingGrid], None] | None = None,
) -> tuple[xr.Dataset, WorkingGrid, BackToInput]:
    """The solve on the working grid: plain, or with ``[infill]`` and ``[gravity]``.

    Te grids (files, margins, breaks) are put on the working grid of the load. *check*
    is called with the grids before the solve.
    """
    solver = scenario.table("solver")
    input_load = None
    alpha, widest = flexural_parameter_range(scenario)
    margin = RESPONSE_MARGIN * widest if scenario.table("output")["extent"] == "response" else 0.0
    local = None
    if scenario.table("infill") is not None:
        layers, grid = build_working_layers(scenario, alpha, margin)
        if check is not None:
            check(grid)
        column = load_column(scenario, layers)
        plate = plate_from_scenario(scenario, column["load"], grid)
        working = infill_step(scenario, plate, column, progress)
        if widest == 0.0 and grid.input_layers:  # no stiffness: every column on its own
            local = _local_infill(scenario, grid)
        grid = dataclasses.replace(grid, input_layers=())
    else:
        parts, grid = working_load(scenario, alpha, margin)
        if check is not None:
            check(grid)
        load = parts()
        plate = plate_from_scenario(scenario, load, grid)
        input_load = input_grid_load(scenario, grid, parts)
        grid = dataclasses.replace(grid, input_layers=())  # read layers: free them now
        log.info("solving %s load grid", load.shape)
        working = solve(
            load,
            plate,
            solver["method"],
            edges=solver["edges"],
            inplane_force_x=solver["inplane_force_x"],
            inplane_force_y=solver["inplane_force_y"],
            pad_factor=solver["pad_factor"],
            tolerance=solver["tolerance"],
            max_iterations=solver["max_iterations"],
            progress=progress,
        )
    if scenario.table("gravity") is not None:
        working = gravity_step(scenario, working)
    rigidity = plate.rigidity
    stiff = np.asarray(rigidity.values) if isinstance(rigidity, xr.DataArray) else float(rigidity)
    return working, grid, BackToInput(input_load, stiff, local)


def run_scenario(
    scenario: Scenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Build the load, solve and write the outputs of *scenario*.

    *progress* (optional) is called with (done, total) during an iterative solve.
    Output paths are checked before the solve (:class:`OutputPlan`), and the profile
    line and the outlines' CRS once the grids are known, so a run that would fail to
    write fails before any work; with ``geotiff = true`` the GeoTIFF files, named after
    the result's grids, are checked once the result is known and before anything is
    written. The files are written together (:meth:`OutputPlan.writing`): all or none,
    never over an input.

    Raises
    ------
    InputError
        Bad inputs or output paths.
    """
    plan = OutputPlan(scenario, overwrite)
    plan.add(_planned_outputs(scenario))
    _check_geotiff_names(scenario, plan)
    working, grid, back = _solve_working(
        scenario, progress, lambda grid: _check_before_solve(scenario, grid)
    )
    if scenario.table("output")["extent"] == "response":
        working = crop_to_response(working)
    result = output_dataset(working, scenario, grid, back=back)
    summary = deflection_summary(working)
    outcome = RunOutcome(result=result, summary=summary, text=format_summary(summary))
    tiffs = _geotiff_paths(scenario, result)
    listed = {key.split(" ", 1)[1] for key in plan.paths if key.startswith("geotiff ")}
    _warn_compensation_outside(working, summary)
    plan.add({f"geotiff {name}": path for name, path in tiffs.items() if name not in listed})
    _write_outputs(scenario, plan, outcome, working, grid, tiffs)
    return outcome


COMPENSATION_WARNING = 0.05
"""Share of the compensation outside the grid above which a run warns."""


def _warn_compensation_outside(working: xr.Dataset, summary: dict[str, Any]) -> None:
    """Record the compensation beyond the grid in *summary*; warn above 5 %."""
    share = compensation_outside(working)
    if share is None:
        return
    summary["compensation_outside"] = share
    if share > COMPENSATION_WARNING:
        warnings.warn(
            f"{share:.0%} of the load's compensation (the plate's restoring force) lies "
            "outside the grid and is not written; extend the input grid beyond the load "
            "by a few flexural parameters to see all of the moat and bulge",
            CompensationOutsideWarning,
            stacklevel=3,
        )


def _write_outputs(
    scenario: Scenario,
    plan: OutputPlan,
    outcome: RunOutcome,
    working: xr.Dataset,
    grid: WorkingGrid,
    tiffs: dict[str, Path],
) -> None:
    """Write the planned outputs of a run, recording them in *outcome*.

    What can still fail (the outlines, the profile) is computed first; the files are
    then written together, all or none (:meth:`OutputPlan.writing`)."""
    outputs = scenario.table("output")
    result = outcome.result
    overwrite, inputs = plan.overwrite, plan.inputs
    crs = written_crs(scenario, grid)
    written = outcome.written
    grids = as_output_dtype(result, outputs["dtype"])
    features = None
    if outputs["outlines"]:
        depth = outputs["moat_depth"]
        if depth is None:
            depth = 0.1 * outcome.summary["max_deflection"]
        features = outline_features(working, grid.working.crs, depth)
    start, end = outputs["profile_start"], outputs["profile_end"]
    profile = None
    if start is not None and end is not None:  # both or neither (scenario.checks)
        with error_context(scenario.where("output", "profile_start")):
            profile = sample_profile(result, start, end)
    by_key: Mapping[str, Any] = outputs
    with plan.writing():
        written.append(write_netcdf(grids, outputs["file"], overwrite, inputs, crs=crs))
        for name, path in tiffs.items():
            written.append(write_geotiff(grids[name], path, crs, overwrite, inputs))
        if outputs["map"]:
            written.append(plot_deflection_map(result, outputs["map"], overwrite, inputs))
        for key, (variable, title, label, signed) in _FIELD_MAPS.items():
            path = by_key[key]
            if path:
                written.append(
                    plot_field_map(
                        result[variable],
                        path,
                        title,
                        label,
                        overwrite,
                        inputs,
                        outline=result["load"],
                        signed=signed,
                    )
                )
        if features is not None and outputs["outlines"]:
            written.append(write_geojson(features, outputs["outlines"], overwrite, inputs))
        if profile is not None:
            if outputs["profile_csv"]:
                written.append(write_csv(profile, outputs["profile_csv"], overwrite, inputs))
            if outputs["profile_plot"]:
                written.append(plot_profile(profile, outputs["profile_plot"], overwrite, inputs))
