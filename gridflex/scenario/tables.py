"""The tables of a ``gridflex run`` scenario, declared once, and their loader.

Every table and key is declared once in :data:`SCHEMA` (with its kind, unit
dimension, default and allowed values); parsing, defaults, the error messages and
the documentation table in the README are all derived from it. The allowed values
of every choice are the library's own constants. Every message names the file, the
table and the key. Each table also has a TypedDict (:class:`PlateTable`, ...) so that
``scenario.table("plate")["elastic_thickness"]`` is type-checked; a test keeps their
keys equal to :data:`SCHEMA`'s.

A scenario has these tables (``[[loads]]`` is an array of tables)::

    [plate]        elastic thickness (a number or a grid file), moduli, densities
    [margin]       a te profile across a straight line, instead of a te number or file
    [[breaks]]     one table per break: a polyline in map coordinates or a mask grid
    [solver]       method, edges, in-plane forces, padding, iteration tolerance
    [grid]         size and spacing, for scenarios whose loads are all synthetic
    [working_grid] projection, spacing and resampling of the grid solved on
    [[loads]]      one table per load layer: a grid file or a synthetic shape
    [infill]       optional: self-consistent infill (water, air, sediment) of the depression
    [gravity]      optional: free-air and Bouguer anomalies of the result (needs [infill])
    [output]       where the results go
    [fit]          observation to fit te to (``gridflex fit``)
    [sweep]        lists of values to sweep over (``gridflex sweep``)
    [ensemble]     distributions of parameters for an ensemble (``gridflex ensemble``)
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any, TypedDict, cast, overload

from gridflex.constants import DEFAULT_GRAVITY, MAX_ELASTIC_THICKNESS, SEA_WATER_DENSITY
from gridflex.engine import EDGES, METHODS
from gridflex.estimation.misfit import QUANTITIES, TE_BOUNDS, TE_SAMPLES
from gridflex.estimation.misfit_te_maps import MAP_SAMPLES, SCALE_BOUNDS
from gridflex.gis.geometry import RESAMPLING
from gridflex.gis.resampling import RESULT_EXTENTS, RESULT_GRIDS
from gridflex.infill import SEDIMENT_MODES
from gridflex.io.netcdf import OUTPUT_DTYPES
from gridflex.io.rasters import LAYER_MISSING_POLICIES
from gridflex.loads import LOAD_KINDS
from gridflex.scenario.checks import check_scenario
from gridflex.scenario.schema import REQUIRED, Key, Scenario, ScenarioT, parse_tables, read_scenario
from gridflex.solvers.finite_difference import DEFAULT_MAX_ITERATIONS
from gridflex.sweeps.monte_carlo import SAMPLINGS
from gridflex.sweeps.parameter_sweep import LOCAL_SCHEDULERS
from gridflex.synthetic import SHAPES

__all__ = [
    "ARRAY_TABLES",
    "OPTIONAL_TABLES",
    "REQUIRED_TABLES",
    "SCHEMA",
    "BreakTable",
    "FitTable",
    "FlexureScenario",
    "FlexureTables",
    "GravityTable",
    "GridTable",
    "InfillTable",
    "LoadTable",
    "MarginTable",
    "OutputTable",
    "PlateTable",
    "SolverTable",
    "SweepTable",
    "EnsembleTable",
    "WorkingGridTable",
    "load_scenario",
    "parse_scenario",
]

SCHEMA: dict[str, dict[str, Key]] = {
    "plate": {
        "elastic_thickness": Key(
            "quantity",
            "effective elastic thickness Te",
            None,
            "length",
            minimum=0.0,
            maximum=MAX_ELASTIC_THICKNESS,
        ),
        "elastic_thickness_file": Key("path", "NetCDF grid of Te on the load grid", None),
        "elastic_thickness_variable": Key("string", "variable holding Te in that file", None),
        "youngs_modulus": Key("quantity", "Young's modulus E", 1.0e11, "pressure", minimum=0.0),
        "poisson_ratio": Key("number", "Poisson's ratio", 0.25),
        "mantle_density": Key("quantity", "mantle density", 3300.0, "density", minimum=0.0),
        "infill_density": Key(
            "quantity",
            "density of the material filling the deflection",
            SEA_WATER_DENSITY,
            "density",
            minimum=0.0,
        ),
        "gravity": Key(
            "quantity", "gravitational acceleration", DEFAULT_GRAVITY, "acceleration", minimum=0.0
        ),
        "crust_thickness": Key(
            "quantity",
            "crustal thickness above the crust-mantle boundary (for gravity)",
            6000.0,
            "length",
            minimum=0.0,
        ),
        "crust_density": Key(
            "quantity", "crustal density (for gravity)", 2800.0, "density", minimum=0.0
        ),
    },
    "solver": {
        "method": Key("choice", "solver", "auto", choices=METHODS),
        "edges": Key(
            "choice",
            "what lies beyond the grid edge",
            "infinite",
            choices=EDGES,
        ),
        "inplane_force_x": Key(
            "quantity", "in-plane force along x, tension positive", 0.0, "force_per_length"
        ),
        "inplane_force_y": Key(
            "quantity", "in-plane force along y, tension positive", 0.0, "force_per_length"
        ),
        "pad_factor": Key(
            "number", "zero padding per side in flexural parameters", 4.5, minimum=0.0
        ),
        "tolerance": Key(
            "number",
            "relative accuracy of the deflection (energy norm) of the finite-difference iteration",
            1e-6,
            minimum=1e-15,
        ),
        "max_iterations": Key(
            "integer",
            "iteration limit of the finite-difference solver",
            DEFAULT_MAX_ITERATIONS,
            minimum=1,
        ),
    },
    "margin": {
        "te_left": Key(
            "quantity",
            "Te on the left of the line, looking from its first point to its second",
            REQUIRED,
            "length",
            minimum=0.0,
        ),
        "te_right": Key("quantity", "Te on the right of the line", REQUIRED, "length", minimum=0.0),
        "line": Key("list", "two [x, y] points (m, map coordinates) on the line", REQUIRED),
        "width": Key("quantity", "width of the transition", 0.0, "length", minimum=0.0),
    },
    "breaks": {
        "line": Key("list", "polyline of [x, y] points (m, map coordinates) where Te = 0", None),
        "width": Key(
            "quantity", "width of a line break (0: one cell, a hinge)", 0.0, "length", minimum=0.0
        ),
        "file": Key("path", "NetCDF mask grid (non-zero = broken) on the load grid", None),
        "variable": Key("string", "variable holding the mask in that file", None),
    },
    "grid": {
        "columns": Key("integer", "number of cells along x", REQUIRED, minimum=4),
        "rows": Key("integer", "number of cells along y", REQUIRED, minimum=4),
        "spacing": Key(
            "quantity",
            "cell size (m, also for a geographic grid)",
            REQUIRED,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "crs": Key(
            "string",
            "coordinate reference system of the grid (EPSG code, PROJ or WKT); none: plain metres",
            None,
        ),
        "center_x": Key("number", "x (or longitude) of the grid centre", 0.0),
        "center_y": Key("number", "y (or latitude) of the grid centre", 0.0),
    },
    "working_grid": {
        "projection": Key(
            "string",
            "metric CRS to solve in (default: the input's own, or "
            "a local equal-area projection for geographic inputs)",
            None,
        ),
        "spacing": Key(
            "quantity",
            "cell size of the working grid (default: the input's)",
            None,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "resampling": Key(
            "choice",
            "how layers are resampled onto it",
            "bilinear",
            choices=RESAMPLING,
        ),
    },
    "loads": {
        "name": Key("string", "label of the layer", None),
        "file": Key("path", "GeoTIFF (or other GDAL raster) or NetCDF holding the layer", None),
        "variable": Key("string", "NetCDF variable or raster band, if the file has several", None),
        "missing": Key(
            "choice",
            "what nodata/NaN cells mean: zero load (with a warning) or an error",
            "zero",
            choices=LAYER_MISSING_POLICIES,
        ),
        "synthetic": Key(
            "choice",
            "a built-in shape instead of a file",
            None,
            choices=SHAPES,
        ),
        "kind": Key(
            "choice",
            "thickness (m, times density), stress (Pa) or elevation (m, "
            "the edifice is the rock above a regional surface)",
            "thickness",
            choices=LOAD_KINDS,
        ),
        "density": Key("quantity", "density of the layer", None, "density", minimum=0.0),
        "displaced_density": Key(
            "quantity",
            "density of what the layer replaces (water for a submarine load)",
            0.0,
            "density",
            minimum=0.0,
        ),
        "height": Key("quantity", "peak height of a synthetic shape", None, "length"),
        "radius": Key(
            "quantity",
            "radius of a synthetic disc, or width of a gaussian",
            None,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "center_x": Key("quantity", "x of a synthetic shape's centre", 0.0, "length"),
        "center_y": Key("quantity", "y of a synthetic shape's centre", 0.0, "length"),
        "regional_elevation": Key(
            "quantity",
            "elevation layer: constant regional surface the edifice stands on",
            None,
            "length",
        ),
        "regional_radius": Key(
            "quantity",
            "elevation layer: radius of the robust (median) "
            "smoothing that gives the regional surface",
            None,
            "length",
            minimum=0.0,
        ),
    },
    "infill": {
        "base_elevation": Key(
            "quantity",
            "elevation of the surface the thickness layers stand on (regional sea floor or land)",
            None,
            "length",
        ),
        "sea_level": Key("quantity", "sea-level elevation", 0.0, "length"),
        "water_density": Key(
            "quantity", "sea-water density", SEA_WATER_DENSITY, "density", minimum=0.0
        ),
        "sediment": Key(
            "choice",
            "what sediment does in the depression",
            "none",
            choices=SEDIMENT_MODES,
        ),
        "sediment_density": Key(
            "quantity", "bulk density of the fill sediment", 2400.0, "density", minimum=0.0
        ),
        "sediment_level": Key(
            "quantity", "elevation up to which sediment fills (to_level)", None, "length"
        ),
        "fill_existing": Key(
            "bool", "to_level: also fill space below the level that existed before loading", False
        ),
        "load_buried": Key(
            "bool",
            "the surface is observed after flexure: the load's base "
            "sank with the plate, the space under it is load material",
            False,
        ),
        "tolerance": Key(
            "quantity",
            "stop when an iteration changes the deflection by less",
            1e-4,
            "length",
            minimum=0.0,
        ),
        "max_iterations": Key("integer", "iterations before giving up", 300, minimum=1),
    },
    "gravity": {
        "observation_height": Key(
            "quantity", "height of the observation plane above sea level", 0.0, "length"
        ),
        "terms": Key("integer", "terms of each Parker series", 6, minimum=1),
        "bouguer_density": Key(
            "quantity", "Bouguer reduction density", 2670.0, "density", minimum=0.0
        ),
    },
    "output": {
        "file": Key("path", "NetCDF file for the results", REQUIRED),
        "map": Key("path", "PNG map of the deflection", None),
        "moat_fill_map": Key("path", "PNG map of the moat fill (needs [infill])", None),
        "free_air_map": Key("path", "PNG map of the free-air anomaly (needs [gravity])", None),
        "bouguer_map": Key("path", "PNG map of the Bouguer anomaly (needs [gravity])", None),
        "geotiff": Key(
            "flag_or_names",
            "also write GeoTIFFs beside the NetCDF: true for every output grid, or a list "
            "of variable names",
            False,
        ),
        "grid": Key(
            "choice",
            "where the results are written: on the input grid or on the working grid "
            "(default: the input grid; the working grid with extent = response)",
            None,
            choices=RESULT_GRIDS,
        ),
        "extent": Key(
            "choice",
            "what the written grids cover: the input's footprint, or the whole area where "
            "the deflection exceeds 0.1 % of its peak",
            "input",
            choices=RESULT_EXTENTS,
        ),
        "dtype": Key("choice", "precision of the written grids", "float64", choices=OUTPUT_DTYPES),
        "outlines": Key("path", "GeoJSON of the moat outline, forebulge crest and zero line", None),
        "moat_depth": Key(
            "quantity",
            "deflection contour drawn as the moat outline "
            "(default: a tenth of the maximum deflection)",
            None,
            "length",
            minimum=0.0,
        ),
        "profile_start": Key("list", "[x, y] of a profile's start, in map coordinates", None),
        "profile_end": Key("list", "[x, y] of a profile's end", None),
        "profile_csv": Key("path", "CSV of the values along the profile", None),
        "profile_plot": Key("path", "PNG plot of the profile", None),
        "std_map": Key(
            "path", "PNG of the deflection's standard deviation (needs [ensemble])", None
        ),
        "exceedance_map": Key(
            "path", "PNG of the first threshold's exceedance probability (needs [ensemble])", None
        ),
    },
    "fit": {
        "observed_file": Key("path", "NetCDF grid of the observation", REQUIRED),
        "observed_variable": Key("string", "variable of the observation in the file", REQUIRED),
        "quantity": Key("choice", "what is observed", "deflection", choices=QUANTITIES),
        "mask_file": Key("path", "NetCDF grid, non-zero where data are compared", None),
        "mask_variable": Key("string", "variable of the mask in its file", None),
        "te_min": Key(
            "quantity",
            "smallest te searched (constant te, both sides of a [margin]; "
            f"default {TE_BOUNDS[0] / 1e3:g} km)",
            None,
            "length",
            minimum=0.0,
        ),
        "te_max": Key(
            "quantity",
            f"largest te searched (default {TE_BOUNDS[1] / 1e3:g} km)",
            None,
            "length",
            minimum=0.0,
        ),
        "scale_min": Key(
            "number",
            f"smallest factor on a te grid searched (default {SCALE_BOUNDS[0]:g})",
            None,
            minimum=0.0,
        ),
        "scale_max": Key(
            "number",
            f"largest factor on a te grid searched (default {SCALE_BOUNDS[1]:g})",
            None,
            minimum=0.0,
        ),
        "fit_line_shift": Key(
            "bool", "also fit the position of the [margin] line (moved perpendicular to it)", False
        ),
        "line_shift_min": Key(
            "quantity", "smallest shift of the line (towards its left: negative)", None, "length"
        ),
        "line_shift_max": Key("quantity", "largest shift of the line", None, "length"),
        "samples": Key(
            "integer",
            f"coarse values of the search (default {TE_SAMPLES} for a constant te, "
            f"{MAP_SAMPLES} per parameter for a te map)",
            None,
            minimum=5,
        ),
        "confidence": Key("number", "confidence level of the te interval", 0.95, minimum=0.0),
        "correlated_residuals": Key("bool", "widen the interval for correlated residuals", True),
        "fit_load_scale": Key(
            "bool", "also fit a factor on the load (its density contrast)", False
        ),
        "seafloor_depth": Key(
            "quantity",
            "depth of the undeflected plate top below the gravity observations (free_air_anomaly)",
            None,
            "length",
            minimum=0.0,
        ),
        "summary": Key("path", "JSON summary of the fit", None),
        "plot": Key("path", "PNG of the misfit curve", None),
    },
    "sweep": {
        "te": Key("list", "elastic thicknesses", None, "length"),
        "youngs_modulus": Key("list", "Young's moduli", None, "pressure"),
        "poisson_ratio": Key("list", "Poisson's ratios", None),
        "mantle_density": Key("list", "mantle densities", None, "density"),
        "infill_density": Key("list", "infill densities", None, "density"),
        "load_density": Key(
            "list", "densities of every thickness layer of [[loads]]", None, "density"
        ),
        "inplane_force": Key(
            "list", "in-plane forces on both axes, tension positive", None, "force_per_length"
        ),
        "inplane_force_x": Key("list", "in-plane forces along x", None, "force_per_length"),
        "inplane_force_y": Key("list", "in-plane forces along y", None, "force_per_length"),
        "scheduler": Key(
            "string",
            "where to run: " + ", ".join(LOCAL_SCHEDULERS) + " or a dask scheduler address",
            "threads",
        ),
    },
    "ensemble": {
        "members": Key("integer", "number of members", 400, minimum=2),
        "seed": Key("integer", "seed of the random draws (same seed, same numbers)", 0, minimum=0),
        "sampling": Key(
            "choice", "stratified or plain draws", "latin_hypercube", choices=SAMPLINGS
        ),
        "te": Key(
            "distribution", "elastic thickness (a factor, no unit, on a te grid)", None, "length"
        ),
        "youngs_modulus": Key("distribution", "Young's modulus", None, "pressure"),
        "mantle_density": Key("distribution", "mantle density", None, "density"),
        "infill_density": Key("distribution", "infill density (plain solve)", None, "density"),
        "crust_density": Key("distribution", "crust density (gravity)", None, "density"),
        "water_density": Key("distribution", "sea-water density ([infill])", None, "density"),
        "sediment_density": Key("distribution", "sediment density ([infill])", None, "density"),
        "load_scale": Key("distribution", "factor on the load", None),
        "thresholds": Key("list", "depths for the exceedance maps (deflection)", None, "length"),
        "quantiles": Key("list", "probabilities of the quantile maps", None),
        "scheduler": Key(
            "string",
            "where to run: " + ", ".join(LOCAL_SCHEDULERS) + " or a dask scheduler address",
            "threads",
        ),
    },
}
"""Every table and key a scenario may contain."""

ARRAY_TABLES = frozenset({"loads", "breaks"})
"""Tables written as arrays of tables (``[[loads]]``)."""

REQUIRED_TABLES = ("plate", "loads", "output")
"""Tables every scenario must give."""

OPTIONAL_TABLES = frozenset({"infill", "gravity", "fit", "sweep", "ensemble"})
"""Tables whose presence switches a feature on; absent, they are ``None``."""


class PlateTable(TypedDict):
    """One ``[plate]`` table, in SI (see :data:`SCHEMA`)."""

    elastic_thickness: float | None
    elastic_thickness_file: Path | None
    elastic_thickness_variable: str | None
    youngs_modulus: float
    poisson_ratio: float
    mantle_density: float
    infill_density: float
    gravity: float
    crust_thickness: float
    crust_density: float


class SolverTable(TypedDict):
    """One ``[solver]`` table, in SI (see :data:`SCHEMA`)."""

    method: str
    edges: str
    inplane_force_x: float
    inplane_force_y: float
    pad_factor: float
    tolerance: float
    max_iterations: int


class MarginTable(TypedDict):
    """One ``[margin]`` table, in SI (see :data:`SCHEMA`)."""

    te_left: float
    te_right: float
    line: list[Any]
    width: float


class BreakTable(TypedDict):
    """One ``[[breaks]]`` table, in SI (see :data:`SCHEMA`)."""

    line: list[Any] | None
    width: float
    file: Path | None
    variable: str | None


class GridTable(TypedDict):
    """One ``[grid]`` table, in SI (see :data:`SCHEMA`)."""

    columns: int
    rows: int
    spacing: float
    crs: str | None
    center_x: float
    center_y: float


class WorkingGridTable(TypedDict):
    """One ``[working_grid]`` table, in SI (see :data:`SCHEMA`)."""

    projection: str | None
    spacing: float | None
    resampling: str


class LoadTable(TypedDict):
    """One ``[[loads]]`` table, in SI (see :data:`SCHEMA`)."""

    name: str | None
    file: Path | None
    variable: str | None
    missing: str
    synthetic: str | None
    kind: str
    density: float | None
    displaced_density: float
    height: float | None
    radius: float | None
    center_x: float
    center_y: float
    regional_elevation: float | None
    regional_radius: float | None


class InfillTable(TypedDict):
    """One ``[infill]`` table, in SI (see :data:`SCHEMA`)."""

    base_elevation: float | None
    sea_level: float
    water_density: float
    sediment: str
    sediment_density: float
    sediment_level: float | None
    fill_existing: bool
    load_buried: bool
    tolerance: float
    max_iterations: int


class GravityTable(TypedDict):
    """One ``[gravity]`` table, in SI (see :data:`SCHEMA`)."""

    observation_height: float
    terms: int
    bouguer_density: float


class OutputTable(TypedDict):
    """One ``[output]`` table, in SI (see :data:`SCHEMA`)."""

    file: Path
    map: Path | None
    moat_fill_map: Path | None
    free_air_map: Path | None
    bouguer_map: Path | None
    geotiff: bool | list[str]
    grid: str | None
    extent: str
    dtype: str
    outlines: Path | None
    moat_depth: float | None
    profile_start: list[Any] | None
    profile_end: list[Any] | None
    profile_csv: Path | None
    profile_plot: Path | None
    std_map: Path | None
    exceedance_map: Path | None


class FitTable(TypedDict):
    """One ``[fit]`` table, in SI (see :data:`SCHEMA`)."""

    observed_file: Path
    observed_variable: str
    quantity: str
    mask_file: Path | None
    mask_variable: str | None
    te_min: float | None
    te_max: float | None
    scale_min: float | None
    scale_max: float | None
    fit_line_shift: bool
    line_shift_min: float | None
    line_shift_max: float | None
    samples: int | None
    confidence: float
    correlated_residuals: bool
    fit_load_scale: bool
    seafloor_depth: float | None
    summary: Path | None
    plot: Path | None


class SweepTable(TypedDict):
    """One ``[sweep]`` table, in SI (see :data:`SCHEMA`)."""

    te: list[Any] | None
    youngs_modulus: list[Any] | None
    poisson_ratio: list[Any] | None
    mantle_density: list[Any] | None
    infill_density: list[Any] | None
    load_density: list[Any] | None
    inplane_force: list[Any] | None
    inplane_force_x: list[Any] | None
    inplane_force_y: list[Any] | None
    scheduler: str


class EnsembleTable(TypedDict):
    """One ``[ensemble]`` table, in SI (see :data:`SCHEMA`; distributions as written)."""

    members: int
    seed: int
    sampling: str
    te: list[Any] | dict[str, Any] | None
    youngs_modulus: list[Any] | dict[str, Any] | None
    mantle_density: list[Any] | dict[str, Any] | None
    infill_density: list[Any] | dict[str, Any] | None
    crust_density: list[Any] | dict[str, Any] | None
    water_density: list[Any] | dict[str, Any] | None
    sediment_density: list[Any] | dict[str, Any] | None
    load_scale: list[Any] | dict[str, Any] | None
    thresholds: list[Any] | None
    quantiles: list[Any] | None
    scheduler: str


class FlexureTables(TypedDict):
    """All tables of a ``gridflex run`` scenario (``None``: the table is absent)."""

    plate: PlateTable
    solver: SolverTable
    margin: MarginTable | None
    breaks: list[BreakTable]
    grid: GridTable | None
    working_grid: WorkingGridTable
    loads: list[LoadTable]
    infill: InfillTable | None
    gravity: GravityTable | None
    output: OutputTable
    fit: FitTable | None
    sweep: SweepTable | None
    ensemble: EnsembleTable | None


FlexureScenario = Scenario[FlexureTables]
"""A validated ``gridflex run`` scenario: its tables are typed."""


def parse_scenario(data: dict[str, Any], path: Path, text: str = "") -> FlexureScenario:
    """Validate a scenario already read into a dict (see :func:`load_scenario`)."""
    scenario = parse_tables(
        data, path, text, SCHEMA, ARRAY_TABLES, REQUIRED_TABLES, OPTIONAL_TABLES
    )
    typed = cast(FlexureScenario, scenario)  # keys and kinds follow SCHEMA (tested)
    check_scenario(typed)
    return typed


@overload
def load_scenario(path: str | Path) -> FlexureScenario: ...
@overload
def load_scenario(
    path: str | Path, parser: Callable[[dict[str, Any], Path, str], ScenarioT]
) -> ScenarioT: ...
def load_scenario(
    path: str | Path, parser: Callable[[dict[str, Any], Path, str], Any] = parse_scenario
) -> Any:
    """Read and validate a TOML scenario file.

    Parameters
    ----------
    path : str or pathlib.Path
        The scenario file; relative paths inside it are taken from its folder.
    parser : callable, optional
        Validator of another kind of scenario (e.g. the history scenario's); by
        default :func:`parse_scenario`, the ``gridflex run`` tables.

    Returns
    -------
    Scenario
        A :data:`FlexureScenario` unless *parser* makes another kind.

    Raises
    ------
    InputError
        Missing or malformed file (see :func:`~gridflex.scenario.schema.read_scenario`),
        unknown table or key, a value of the wrong type, unit or range, keys that do
        not go together; the message names file, table and key.
    """
    return read_scenario(path, parser)
