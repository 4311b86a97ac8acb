"""History scenarios: an ice-thickness history on a plate over a viscous or relaxing
mantle, written as deflection through time, an uplift-rate map and point series.

A history scenario has these tables (``[[points]]`` is an array of tables)::

    [plate]     elastic thickness (a number or a te file), moduli, densities
                (infill_density must stay 0)
    [margin]    te changing across a line, instead of the number or the file
    [[breaks]]  lines or mask files where te = 0
    [mantle]    model, viscosity, relaxation time, the elastic Earth (elastic = true)
    [solver]    edges, padding, load interpolation, initial state
    [grid]      size and spacing, for a synthetic ice history
    [ice]       the ice-thickness history: a NetCDF (time, y, x) variable or a disc
    [bed]       bed elevation of the reference state (or, with present_day, of the last
                time): a NetCDF grid or one number
    [sea]       sea level: one number or a NetCDF series; reference level; water density
    [[points]]  named points for time-series plots and the series table
    [output]    NetCDF file, uplift-rate map (and its time), series plot and CSV table,
                the times written, the precision (float32)
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import SPECTRAL_EDGES
from gridflex.errors import InputError
from gridflex.gis.geometry import parse_crs
from gridflex.glacial.elastic import EARTH_POISSON_RATIO, EARTH_YOUNGS_MODULUS
from gridflex.glacial.ice import check_max_step, check_output_times, ice_response, sea_level_at
from gridflex.glacial.response import INITIAL_STATES
from gridflex.grid import check_same_grid
from gridflex.io.netcdf import as_output_dtype, write_netcdf
from gridflex.io.plots import plot_point_series, plot_uplift_rate_map
from gridflex.io.rasters import LAYER_MISSING_POLICIES
from gridflex.io.tables import write_csv
from gridflex.io.time_grids import (
    DEFAULT_TIME_REFERENCE,
    cf_time_axis,
    check_time_reference,
    read_history,
    read_series,
)
from gridflex.memory import check_memory
from gridflex.progress import Progress
from gridflex.scenario.checks import check_plate_structure
from gridflex.scenario.schema import REQUIRED, Key, Scenario, parse_tables
from gridflex.scenario.tables import SCHEMA, load_scenario
from gridflex.solvers.viscous import DEFAULT_WIDTH_FACTOR, INTERPOLATIONS, MODELS
from gridflex.synthetic import disc_height, empty_grid
from gridflex.units import parse_quantity
from gridflex.validation import check_grid_range, check_number
from gridflex.workflows.grid_input import apply_missing_policy, in_si_units, read_grid_input
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result, with_vertical_displacement
from gridflex.workflows.run import plate_from_scenario
from gridflex.workflows.scenario_tables import array_table

HistoryScenario = Scenario[dict[str, Any]]
"""A validated history scenario (its tables are checked against :data:`HISTORY_SCHEMA`)."""

__all__ = [
    "HISTORY_SCHEMA",
    "HistoryScenario",
    "SERIES_VARIABLES",
    "check_bed_and_plate",
    "ice_model_options",
    "point_series_table",
    "format_history_summary",
    "load_history_scenario",
    "parse_history_scenario",
    "run_history_scenario",
]

log = logging.getLogger(__name__)

SYNTHETIC_ICE = ("disc",)
"""Built-in ice histories: a disc whose thickness follows ``thickness_factors``."""

HISTORY_SCHEMA: dict[str, dict[str, Key]] = {
    "plate": {
        **SCHEMA["plate"],
        "infill_density": Key(
            "quantity",
            "must be 0: the ocean over depressed bedrock is added from the sea level",
            0.0,
            "density",
            minimum=0.0,
        ),
    },
    "margin": SCHEMA["margin"],
    "breaks": SCHEMA["breaks"],
    "mantle": {
        "model": Key(
            "choice",
            "viscous half-space or relaxing asthenosphere",
            "half-space",
            choices=MODELS,
        ),
        "viscosity": Key("quantity", "half-space viscosity", 1e21, "viscosity", minimum=0.0),
        "relaxation_time": Key(
            "quantity", "relaxation time of the relaxing model", 3000.0, "time", minimum=0.0
        ),
        "elastic": Key(
            "bool", "add the instantaneous elastic half-space response of the Earth", False
        ),
        "elastic_youngs_modulus": Key(
            "quantity",
            "Young's modulus of the elastic Earth (PREM uppermost mantle)",
            EARTH_YOUNGS_MODULUS,
            "pressure",
            minimum=0.0,
            strict=True,
        ),
        "elastic_poisson_ratio": Key(
            "number",
            "Poisson's ratio of the elastic Earth (PREM uppermost mantle)",
            EARTH_POISSON_RATIO,
            minimum=0.0,
            strict=True,
            maximum=0.5,
        ),
    },
    "solver": {
        "edges": Key(
            "choice", "what lies beyond the grid edge", "infinite", choices=SPECTRAL_EDGES
        ),
        "pad_factor": Key(
            "number", "zero padding per side in flexural parameters", 4.5, minimum=0.0
        ),
        "pad_width_factor": Key(
            "number",
            "half-space: padding per side in grid widths",
            DEFAULT_WIDTH_FACTOR,
            minimum=0.0,
        ),
        "interpolation": Key(
            "choice", "load between the given times", "linear", choices=INTERPOLATIONS
        ),
        "initial": Key("choice", "state at the first time", "rest", choices=INITIAL_STATES),
        "max_step": Key(
            "quantity", "longest time step; longer intervals are split", None, "time", minimum=0.0
        ),
    },
    "grid": {key: SCHEMA["grid"][key] for key in ("columns", "rows", "spacing")},
    "ice": {
        "file": Key("path", "NetCDF file with the ice thickness (time, y, x)", None),
        "variable": Key("string", "ice-thickness variable in the file (m)", None),
        "synthetic": Key(
            "choice", "a built-in ice history instead of a file", None, choices=SYNTHETIC_ICE
        ),
        "radius": Key("quantity", "radius of the synthetic ice disc", None, "length", minimum=0.0),
        "height": Key(
            "quantity", "full thickness of the synthetic ice disc", None, "length", minimum=0.0
        ),
        "center_x": Key("quantity", "x of the disc's centre", 0.0, "length"),
        "center_y": Key("quantity", "y of the disc's centre", 0.0, "length"),
        "times": Key("list", "times of the synthetic history (years)", None),
        "thickness_factors": Key("list", "share of the full thickness at each time", None),
        "density": Key("quantity", "ice density", 910.0, "density", minimum=0.0),
        "missing": Key(
            "choice",
            "what nodata/NaN cells of the file mean: no ice (with a warning) or an error",
            "zero",
            choices=LAYER_MISSING_POLICIES,
        ),
    },
    "bed": {
        "file": Key("path", "NetCDF grid with the bed elevation of the reference state", None),
        "variable": Key("string", "bed-elevation variable in the file (m, up)", None),
        "elevation": Key("quantity", "one bed elevation everywhere (m, up)", None, "length"),
        "present_day": Key(
            "bool",
            "the bed given is the bed at the last time; the reference bed is solved for",
            False,
        ),
    },
    "sea": {
        "level": Key("quantity", "sea level, constant in time", 0.0, "length"),
        "file": Key("path", "NetCDF file with a sea-level series along time", None),
        "variable": Key("string", "sea-level variable in the file (m)", None),
        "reference_level": Key("quantity", "sea level of the reference state", 0.0, "length"),
        "water_density": Key(
            "quantity", "sea-water density", SEA_WATER_DENSITY, "density", minimum=0.0
        ),
    },
    "points": {
        "name": Key("string", "label of the point", REQUIRED),
        "x": Key("quantity", "x of the point", REQUIRED, "length"),
        "y": Key("quantity", "y of the point", REQUIRED, "length"),
    },
    "output": {
        "file": Key("path", "NetCDF file with deflection through time", REQUIRED),
        "rate_map": Key("path", "PNG map of the uplift rate", None),
        "rate_time": Key(
            "quantity", "time of the uplift-rate map (default: the last)", None, "time"
        ),
        "series_plot": Key("path", "PNG time series at the [[points]]", None),
        "series_csv": Key("path", "CSV table of the time series at the [[points]]", None),
        "times": Key(
            "list", "times to write, each a number of years or with units (default: all)", None
        ),
        "dtype": SCHEMA["output"]["dtype"],
        "time_reference": Key("string", "date that is year 0 of the times", DEFAULT_TIME_REFERENCE),
    },
}
"""Every table and key a history scenario may contain."""

HISTORY_WORDS_PER_TIME = 8
"""float64 grids per time a history holds at its peak (ice, load, deflection, uplift rate,
vertical displacement, the copies written), for the memory estimate before the ice grid."""

HISTORY_ARRAY_TABLES = frozenset({"points", "breaks"})
HISTORY_REQUIRED_TABLES = ("plate", "ice", "bed", "output")


def parse_history_scenario(data: dict[str, Any], path: Path, text: str = "") -> HistoryScenario:
    """Validate a history scenario already read into a dict."""
    scenario = parse_tables(
        data, path, text, HISTORY_SCHEMA, HISTORY_ARRAY_TABLES, HISTORY_REQUIRED_TABLES
    )
    _check_history(scenario)
    return scenario


def load_history_scenario(path: str | Path) -> HistoryScenario:
    """Read and validate a history scenario (TOML); messages name file, table and key."""
    return load_scenario(path, parser=parse_history_scenario)


def _check_history(scenario: HistoryScenario) -> None:
    check_plate_structure(scenario)
    ice = scenario.table("ice")
    where = scenario.where("ice")
    if (ice["file"] is None) == (ice["synthetic"] is None):
        raise InputError(f"{where}: give either 'file' (with 'variable') or 'synthetic'")
    if ice["file"] is not None and ice["variable"] is None:
        raise InputError(f"{where} variable: required with 'file'")
    if ice["synthetic"] is not None:
        if scenario.tables["grid"] is None:
            raise InputError(f"{scenario.path}: a synthetic ice history needs a [grid] table")
        for name in ("radius", "height", "times", "thickness_factors"):
            if ice[name] is None:
                raise InputError(f"{where} {name}: required for a synthetic ice history")
        times, factors = ice["times"], ice["thickness_factors"]
        for name, values in (("times", times), ("thickness_factors", factors)):
            if not values or not all(
                isinstance(v, (int, float)) and not isinstance(v, bool) for v in values
            ):
                raise InputError(f"{where} {name}: expected a non-empty list of numbers")
            for value in values:  # NaN or inf would reach the solver as a NaN ice load
                check_number(f"{where} {name}", value, minimum=0.0 if name != "times" else None)
        if any(later <= earlier for earlier, later in zip(times, times[1:])):
            raise InputError(
                f"{where} times: must increase from the oldest to the youngest (years after "
                f"time_reference, the past negative), got {times!r}"
            )
        if len(times) != len(factors):
            raise InputError(
                f"{where}: times has {len(times)} values, thickness_factors "
                f"{len(factors)}; give one factor per time"
            )
    check_bed_and_plate(scenario)
    sea = scenario.table("sea")
    if sea["file"] is not None and sea["variable"] is None:
        raise InputError(f"{scenario.where('sea')} variable: required with 'file'")
    check_time_reference(
        scenario.where("output", "time_reference"), scenario.table("output")["time_reference"]
    )
    output = scenario.table("output")
    if output["times"] is not None:
        where = scenario.where("output", "times")
        if not output["times"]:
            raise InputError(f"{where}: give at least one time, or leave the key out")
        output["times"] = [
            parse_quantity(value, "time", f"{where}[{i}]")
            for i, value in enumerate(output["times"])
        ]
    names = [p["name"] for p in array_table(scenario, "points")]
    if len(set(names)) != len(names):
        raise InputError(f"{scenario.path}: [[points]] names must differ, got {names!r}")


def check_bed_and_plate(scenario: HistoryScenario) -> None:
    """The ``[bed]`` is a file (with its variable) or one elevation, and the ``[plate]``
    has no infill (the ocean is part of the ice load). Shared with the BMI configuration.

    Raises
    ------
    InputError
        Naming the table and key.
    """
    bed = scenario.table("bed")
    if (bed["file"] is None) == (bed["elevation"] is None):
        raise InputError(
            f"{scenario.where('bed')}: give either 'file' (with 'variable') or 'elevation'"
        )
    if bed["file"] is not None and bed["variable"] is None:
        raise InputError(f"{scenario.where('bed')} variable: required with 'file'")
    if scenario.table("plate")["infill_density"] != 0.0:
        raise InputError(
            f"{scenario.where('plate', 'infill_density')}: must be 0 for an ice "
            "history (the ocean over depressed bedrock is added from the sea level)"
        )


def ice_model_options(scenario: HistoryScenario) -> dict[str, Any]:
    """The ``[mantle]``, ``[solver]``, ``[sea]`` and ``[ice]`` settings as keyword
    arguments of :class:`gridflex.IceStepper` (and :func:`gridflex.ice_response`)."""
    mantle, solver, sea = scenario.table("mantle"), scenario.table("solver"), scenario.table("sea")
    return {
        "model": mantle["model"],
        "mantle_viscosity": mantle["viscosity"],
        "relaxation_time": mantle["relaxation_time"],
        "reference_sea_level": sea["reference_level"],
        "ice_density": scenario.table("ice")["density"],
        "water_density": sea["water_density"],
        "initial": solver["initial"],
        "interpolation": solver["interpolation"],
        "edges": solver["edges"],
        "pad_factor": solver["pad_factor"],
        "width_factor": solver["pad_width_factor"],
        "elastic": mantle["elastic"],
        "elastic_youngs_modulus": mantle["elastic_youngs_modulus"],
        "elastic_poisson_ratio": mantle["elastic_poisson_ratio"],
    }


def _ice_history(scenario: HistoryScenario, reference: str) -> xr.DataArray:
    """The ice thickness (m) through time: from the file (missing cells by the ``missing``
    policy, in metres, within 0 to :data:`~gridflex.constants.MAX_ICE_THICKNESS`) or the
    synthetic disc. ``attrs["crs_wkt"]`` is the file's CRS (``""`` when unknown)."""
    ice = scenario.table("ice")
    if ice["file"] is not None:
        history = read_history(ice["file"], ice["variable"], reference)
        where = f"{scenario.where('ice', 'file')}: {ice['file'].name}"
        history = apply_missing_policy(history, ice["missing"], where)
        history = in_si_units(history, "length", where)
        check_grid_range(history.values, "ice_thickness", f"{where}: variable {ice['variable']!r}")
        return history
    g = scenario.table("grid")
    nt, cells = len(ice["times"]), g["rows"] * g["columns"]  # Python ints: no overflow
    check_memory(
        8 * cells * (HISTORY_WORDS_PER_TIME * nt + 4),
        f"an ice history of {nt} times on a grid of {g['rows']} x {g['columns']}",
        advice="use fewer [grid] rows and columns (a coarser spacing) or fewer [ice] times",
    )
    grid = empty_grid(g["rows"], g["columns"], g["spacing"])
    check_grid_range([ice["height"]], "ice_thickness", scenario.where("ice", "height"))
    factors = np.asarray(ice["thickness_factors"], dtype=np.float64)
    check_grid_range(  # the thickest ice of the history, not only the disc's height
        [ice["height"] * float(factors.max())],
        "ice_thickness",
        f"{scenario.where('ice', 'thickness_factors')} (times height {ice['height']!r} m)",
    )
    disc = disc_height(grid, ice["radius"], ice["height"], ice["center_x"], ice["center_y"])
    values = factors[:, None, None] * disc.values[None]
    return xr.DataArray(
        values,
        dims=("time", "y", "x"),
        coords={"time": np.asarray(ice["times"], dtype=np.float64), "y": grid.y, "x": grid.x},
        name="ice_thickness",
        attrs={"crs_wkt": ""},
    )


def _in_order_of(grid: xr.DataArray, like: xr.DataArray) -> xr.DataArray:
    """*grid* with each axis that runs the other way than *like*'s reversed (a north-up
    GeoTIFF against a south-up NetCDF): the same cells in *like*'s row and column order."""
    for dim in ("y", "x"):
        ours, theirs = grid[dim].values, like[dim].values
        if ours.size > 1 and theirs.size > 1 and (ours[1] - ours[0]) * (theirs[1] - theirs[0]) < 0:
            grid = grid.isel({dim: slice(None, None, -1)})
    return grid


def _bed(scenario: HistoryScenario, like: xr.DataArray) -> xr.DataArray:
    """The bed elevation (m, up) of the reference state on the ice grid *like*.

    A bed file must lie on the ice grid; rows (or columns) stored in the other order
    are put in the ice grid's order first. ``attrs["crs_wkt"]`` is the bed's CRS.
    """
    bed = scenario.table("bed")
    if bed["file"] is None:
        out = xr.full_like(like, bed["elevation"], dtype=np.float64)
        out.attrs = {"crs_wkt": ""}
        return out
    where = scenario.where("bed", "file")
    grid = read_grid_input(bed["file"], bed["variable"], where, metric=True, role="elevation")
    label = f"{where}: {bed['file'].name}: variable {grid.name!r}"
    grid = _in_order_of(grid, like)
    check_same_grid(grid, like, label)
    return xr.DataArray(
        np.asarray(grid.values, dtype=np.float64),
        dims=like.dims,
        coords={name: like[name].values for name in like.dims},
        name=grid.name,
        attrs=dict(grid.attrs),
    )


def _output_crs(scenario: HistoryScenario, ice: xr.DataArray, bed: xr.DataArray) -> CRS | None:
    """The CRS of the ice history, else of the bed (None when neither has one).

    Raises
    ------
    InputError
        Both have a CRS and they differ (the grids cannot be the same).
    """
    where = {"ice": scenario.where("ice", "file"), "bed": scenario.where("bed", "file")}
    found = {
        name: parse_crs(wkt, f"{where[name]}: CRS")
        for name, wkt in (("ice", ice.attrs.get("crs_wkt")), ("bed", bed.attrs.get("crs_wkt")))
        if wkt
    }
    if len(found) == 2 and found["ice"] != found["bed"]:
        raise InputError(
            f"{where['bed']}: the bed's CRS ({found['bed'].to_string()[:60]}) differs from "
            f"the ice history's ({found['ice'].to_string()[:60]}); give both on one grid"
        )
    return found.get("ice", found.get("bed"))


PointCell = tuple[str, float, float, int, int]
"""A ``[[points]]`` entry: name, x and y (m), and the row and column of its cell."""


def _point_cells(scenario: HistoryScenario, grid: xr.DataArray) -> list[PointCell]:
    x, y = grid["x"].values, grid["y"].values
    cells = []
    for index, point in enumerate(array_table(scenario, "points")):
        px, py = float(point["x"]), float(point["y"])
        dx, dy = abs(x[1] - x[0]), abs(y[1] - y[0])
        if not (
            x.min() - dx / 2 <= px <= x.max() + dx / 2
            and y.min() - dy / 2 <= py <= y.max() + dy / 2
        ):
            raise InputError(
                f"{scenario.where('points', index=index)}: point "
                f"({px:g}, {py:g}) m lies outside the grid"
            )
        cells.append(
            (
                str(point["name"]),
                px,
                py,
                int(np.argmin(np.abs(y - py))),
                int(np.argmin(np.abs(x - px))),
            )
        )
    return cells


def run_history_scenario(
    scenario: HistoryScenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Run a history scenario and write its outputs.

    Output paths are checked before the run; files are written atomically and never
    over an input.

    Returns
    -------
    RunOutcome
        ``result`` is the Dataset as written (CF time axis), ``summary`` a dict for
        :func:`format_history_summary`.
    """
    outputs = scenario.table("output")
    plan = OutputPlan(scenario, overwrite)
    plan.add({key: outputs[key] for key in ("file", "rate_map", "series_plot", "series_csv")})
    inputs = plan.inputs
    reference = outputs["time_reference"]
    thickness = _ice_history(scenario, reference)
    bed = _bed(scenario, thickness.isel(time=0, drop=True))
    # a te file, [margin] or [[breaks]] become a te grid on the ice grid, as in gridflex run
    plate = plate_from_scenario(scenario, bed)
    sea = scenario.table("sea")
    crs = _output_crs(scenario, thickness, bed)
    times = np.asarray(thickness["time"].values, dtype=np.float64)
    max_step = check_max_step(
        scenario.where("solver", "max_step"), scenario.table("solver")["max_step"], times
    )
    level: Any = sea["level"]
    if sea["file"] is not None:
        sea_series = read_series(sea["file"], sea["variable"], reference)
        where = f"{scenario.where('sea', 'file')}: {sea['file'].name}"
        sea_in_m = in_si_units(sea_series, "length", where)
        level = sea_level_at(sea_in_m, times, f"{where}: variable {sea['variable']!r}")
    wanted = times
    if outputs["times"] is not None:
        wanted = check_output_times(outputs["times"], times, scenario.where("output", "times"))
    rate_time = float(times[-1]) if outputs["rate_time"] is None else outputs["rate_time"]
    if not times[0] <= rate_time <= times[-1]:
        raise InputError(
            f"{scenario.where('output', 'rate_time')}: {rate_time:g} years is "
            f"outside the history ({times[0]:g} to {times[-1]:g})"
        )
    at = int(np.argmin(np.abs(wanted - rate_time)))  # the nearest time written
    cells = _point_cells(scenario, bed)
    for key in ("series_plot", "series_csv"):
        if outputs[key] and not cells:
            raise InputError(
                f"{scenario.where('output', key)}: needs at least one [[points]] table"
            )
    solver = scenario.table("solver")
    log.info("ice history of %d times on a %s grid", thickness.sizes["time"], bed.shape)
    result = ice_response(
        thickness,
        bed,
        plate,
        level,
        **ice_model_options(scenario),
        max_step=max_step,
        output_times=None if outputs["times"] is None else wanted,
        present_day=scenario.table("bed")["present_day"],
        progress=progress,
    )
    result["ice_thickness"] = (
        ("time", "y", "x"),
        thickness.values
        if wanted is times
        else thickness.interp(
            time=wanted, method="linear" if solver["interpolation"] == "linear" else "zero"
        ).values,
        {"units": "m", "long_name": "ice thickness"},
    )
    out = stamp_result(
        with_vertical_displacement(result, "bed"), scenario, "history", projected_axes=True
    )
    out = as_output_dtype(cf_time_axis(out, reference), outputs["dtype"])
    outcome = RunOutcome(result=out)
    with plan.writing():
        outcome.written.append(write_netcdf(out, outputs["file"], overwrite, inputs, crs=crs))
        times = result["time"].values
        if outputs["rate_map"]:
            outcome.written.append(
                plot_uplift_rate_map(
                    result["uplift_rate"].isel(time=at),
                    outputs["rate_map"],
                    overwrite,
                    inputs,
                    title=f"Uplift rate at {times[at]:g} years after {reference}",
                    outline=result["ice_thickness"].isel(time=at),
                )
            )
        if outputs["series_plot"]:
            series = {
                name: (
                    result["deflection"].values[:, iy, ix],
                    result["uplift_rate"].values[:, iy, ix],
                )
                for name, _, _, iy, ix in cells
            }
            outcome.written.append(
                plot_point_series(
                    times,
                    series,
                    outputs["series_plot"],
                    overwrite,
                    inputs,
                    time_label=f"time (years after {reference})",
                )
            )
        if outputs["series_csv"]:
            outcome.written.append(
                write_csv(
                    point_series_table(result, cells),
                    outputs["series_csv"],
                    overwrite,
                    inputs,
                )
            )
    outcome.summary = _summary(result, at, cells)
    outcome.text = format_history_summary(outcome.summary)
    return outcome


SERIES_VARIABLES = ("deflection", "uplift_rate", "bed_elevation", "elastic_deflection")
"""Variables of the point series table, in column order; those the result lacks (the
elastic part without an elastic Earth) are left out."""


def point_series_table(result: xr.Dataset, cells: list[PointCell]) -> xr.Dataset:
    """The series at the ``[[points]]`` as one table along time: a column
    ``<point>:<variable>`` for each point and each of :data:`SERIES_VARIABLES` the result
    has (values of the cell holding the point), with their units."""
    columns: dict[str, Any] = {}
    for name, _, _, iy, ix in cells:
        for variable in SERIES_VARIABLES:
            if variable in result:
                grid = result[variable]
                columns[f"{name}:{variable}"] = (
                    "time",
                    np.asarray(grid.values[:, iy, ix], dtype=np.float64),
                    {"units": grid.attrs.get("units", "")},
                )
    time = ("time", np.asarray(result["time"].values, dtype=np.float64), {"units": "years"})
    return xr.Dataset(columns, coords={"time": time})


def _summary(result: xr.Dataset, at: int, cells: list[PointCell]) -> dict[str, Any]:
    w = result["deflection"].values
    rate = result["uplift_rate"].values[at]
    return {
        "times": int(w.shape[0]),
        "first_time": float(result["time"].values[0]),
        "last_time": float(result["time"].values[-1]),
        "max_deflection": float(w.max()),
        "max_deflection_time": float(
            result["time"].values[np.unravel_index(w.argmax(), w.shape)[0]]
        ),
        "rate_time": float(result["time"].values[at]),
        "max_uplift_rate": float(rate.max()),
        "min_uplift_rate": float(rate.min()),
        "points": {
            name: (float(w[-1, iy, ix]), float(result["uplift_rate"].values[at, iy, ix]))
            for name, _, _, iy, ix in cells
        },
    }


def format_history_summary(summary: dict[str, Any]) -> str:
    """The summary as a few lines of text (m, mm/yr)."""
    lines = [
        f"times               {summary['times']} from {summary['first_time']:g} "
        f"to {summary['last_time']:g} years",
        f"deepest depression  {summary['max_deflection']:10.1f} m at "
        f"{summary['max_deflection_time']:g} years",
        f"uplift rate at {summary['rate_time']:g} years: {summary['min_uplift_rate'] * 1e3:.2f} "
        f"to {summary['max_uplift_rate'] * 1e3:.2f} mm/yr",
    ]
    for name, (w, rate) in summary["points"].items():
        lines.append(
            f"  {name}: deflection {w:.1f} m at the end, uplift rate {rate * 1e3:.2f} mm/yr"
        )
    return "\n".join(lines)
