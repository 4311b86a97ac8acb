"""Scenario files: a TOML description of one model run, validated key by key.

Every table and key is declared once in :data:`SCHEMA` (with its kind, unit
dimension, default and allowed values); parsing, defaults, the error messages and
the documentation table in the README are all derived from it. Every message names
the file, the table and the key.

A scenario has these tables (``[[loads]]`` is an array of tables)::

    [plate]    elastic thickness (a number or a grid file), moduli, densities
    [margin]   a te profile across a straight line, instead of a te number or file
    [[breaks]] one table per break: a polyline in map coordinates or a mask grid
    [solver]   method, edges, in-plane forces, padding, iteration tolerance
    [grid]     size and spacing, for scenarios whose loads are all synthetic
    [[loads]]  one table per load layer: a grid file or a synthetic shape
    [infill]   optional: self-consistent infill (water, air, sediment) of the depression
    [gravity]  optional: free-air and Bouguer anomalies of the result (needs [infill])
    [output]   where the results go
    [fit]      observation to fit te to (``gridflex fit``)
    [sweep]    lists of values to sweep over (``gridflex sweep``)
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from gridflex.errors import InputError
from gridflex.estimation.misfit import QUANTITIES
from gridflex.sweeps.parameter_sweep import LOCAL_SCHEDULERS
from gridflex.units import parse_quantity

__all__ = [
    "Key",
    "SCHEMA",
    "ARRAY_TABLES",
    "REQUIRED",
    "Scenario",
    "load_scenario",
    "parse_scenario",
    "parse_tables",
]

REQUIRED = object()
"""Default of a key that must be given."""


@dataclass(frozen=True)
class Key:
    """Declaration of one scenario key.

    Parameters
    ----------
    kind : str
        ``"quantity"`` (number or string with unit of *dimension*), ``"number"``,
        ``"integer"``, ``"string"``, ``"choice"``, ``"path"``, ``"bool"``, ``"list"``.
    help : str
        One line for documentation.
    default : object
        Value when the key is absent; :data:`REQUIRED` if it must be given, ``None``
        if optional without default.
    dimension : str, optional
        Unit dimension for quantities (see :data:`gridflex.units.DIMENSIONS`).
    choices : tuple of str
        Allowed values for ``"choice"``.
    minimum : float, optional
        Smallest allowed value (inclusive) for numbers and quantities.
    """

    kind: str
    help: str
    default: Any = None
    dimension: str = ""
    choices: tuple[str, ...] = ()
    minimum: float | None = None


def _choices(*names: str) -> tuple[str, ...]:
    return tuple(names)


SCHEMA: dict[str, dict[str, Key]] = {
    "plate": {
        "elastic_thickness": Key(
            "quantity", "effective elastic thickness Te", None, "length", minimum=0.0
        ),
        "elastic_thickness_file": Key("path", "NetCDF grid of Te on the load grid", None),
        "elastic_thickness_variable": Key("string", "variable holding Te in that file", None),
        "youngs_modulus": Key("quantity", "Young's modulus E", 1.0e11, "pressure", minimum=0.0),
        "poisson_ratio": Key("number", "Poisson's ratio", 0.25),
        "mantle_density": Key("quantity", "mantle density", 3300.0, "density", minimum=0.0),
        "infill_density": Key(
            "quantity",
            "density of the material filling the deflection",
            1030.0,
            "density",
            minimum=0.0,
        ),
        "gravity": Key("quantity", "gravitational acceleration", 9.81, "acceleration", minimum=0.0),
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
        "method": Key(
            "choice", "solver", "auto", choices=_choices("auto", "spectral", "finite-difference")
        ),
        "edges": Key(
            "choice",
            "what lies beyond the grid edge",
            "infinite",
            choices=_choices("infinite", "periodic", "clamped", "free"),
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
            "number", "relative residual of the finite-difference iteration", 1e-8, minimum=1e-15
        ),
        "max_iterations": Key(
            "integer", "iteration limit of the finite-difference solver", 300, minimum=1
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
            "quantity", "cell size (m, also for a geographic grid)", REQUIRED, "length", minimum=0.0
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
        ),
        "resampling": Key(
            "choice",
            "how layers are resampled onto it",
            "bilinear",
            choices=_choices("bilinear", "average", "nearest", "cubic"),
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
            choices=_choices("zero", "error"),
        ),
        "synthetic": Key(
            "choice",
            "a built-in shape instead of a file",
            None,
            choices=_choices("island-chain", "disc", "gaussian"),
        ),
        "kind": Key(
            "choice",
            "thickness (m, times density), stress (Pa) or elevation (m, "
            "the edifice is the rock above a regional surface)",
            "thickness",
            choices=_choices("thickness", "stress", "elevation"),
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
        "water_density": Key("quantity", "sea-water density", 1030.0, "density", minimum=0.0),
        "sediment": Key(
            "choice",
            "what sediment does in the depression",
            "none",
            choices=_choices("none", "full", "to_level"),
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
            "bool", "also write one GeoTIFF per output variable beside the NetCDF", False
        ),
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
    },
    "fit": {
        "observed_file": Key("path", "NetCDF grid of the observation", REQUIRED),
        "observed_variable": Key("string", "variable of the observation in the file", REQUIRED),
        "quantity": Key("choice", "what is observed", "deflection", choices=QUANTITIES),
        "mask_file": Key("path", "NetCDF grid, non-zero where data are compared", None),
        "mask_variable": Key("string", "variable of the mask in its file", None),
        "te_min": Key("quantity", "smallest te searched", 1.0e3, "length", minimum=0.0),
        "te_max": Key("quantity", "largest te searched", 1.0e5, "length", minimum=0.0),
        "samples": Key("integer", "log-spaced te of the coarse search", 25, minimum=5),
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
}
"""Every table and key a scenario may contain."""

ARRAY_TABLES = frozenset({"loads", "breaks"})
"""Tables written as arrays of tables (``[[loads]]``)."""

REQUIRED_TABLES = ("plate", "loads", "output")

OPTIONAL_TABLES = frozenset({"infill", "gravity", "fit", "sweep"})
"""Tables whose presence switches a feature on; absent, they are ``None``."""


@dataclass(frozen=True)
class Scenario:
    """A validated scenario.

    Attributes
    ----------
    path : pathlib.Path
        The scenario file (paths inside it are resolved against its folder).
    text : str
        The scenario text as read (recorded in output metadata).
    tables : dict
        ``{table: {key: value}}`` with defaults filled in and quantities in SI;
        array tables map to a list of such dicts.
    """

    path: Path
    text: str
    tables: dict[str, Any] = field(default_factory=dict)

    def table(self, name: str) -> dict[str, Any]:
        """Values of one table (defaults for an absent table)."""
        return self.tables[name]

    def where(self, table: str, key: str = "", index: int | None = None) -> str:
        """``file [table] key`` for messages."""
        tag = f"[[{table}]] #{index + 1}" if index is not None else f"[{table}]"
        return f"{self.path}: {tag}" + (f" {key}" if key else "")

    @property
    def input_files(self) -> list[Path]:
        """Every file the scenario reads: paths in any table but ``[output]``.

        Outputs must never be written over one of these."""
        files = [self.path]
        for name, values in self.tables.items():
            if name == "output" or values is None:
                continue
            for row in values if isinstance(values, list) else [values]:
                files.extend(v for v in row.values() if isinstance(v, Path))
        return files


_Checker = Callable[[Any, Key, str, Path], Any]


def _check_number(value: Any, key: Key, where: str, base: Path) -> Any:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where}: expected a number, got {value!r}")
    return float(value)


def _check_integer(value: Any, key: Key, where: str, base: Path) -> Any:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{where}: expected a whole number, got {value!r}")
    return value


def _check_quantity(value: Any, key: Key, where: str, base: Path) -> Any:
    return parse_quantity(value, key.dimension, where)


def _check_string(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, str) or not value:
        raise InputError(f"{where}: expected a non-empty string, got {value!r}")
    return value


def _check_choice(value: Any, key: Key, where: str, base: Path) -> Any:
    if value not in key.choices:
        raise InputError(
            f"{where}: {value!r} is not allowed; use one of "
            + ", ".join(repr(c) for c in key.choices)
        )
    return value


def _check_path(value: Any, key: Key, where: str, base: Path) -> Any:
    _check_string(value, key, where, base)
    path = Path(value).expanduser()
    return path if path.is_absolute() else (base / path)


def _check_bool(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, bool):
        raise InputError(f"{where}: expected true or false, got {value!r}")
    return value


def _check_list(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, list):
        raise InputError(f"{where}: expected a list, got {value!r}")
    return value


_CHECKERS: dict[str, _Checker] = {
    "number": _check_number,
    "integer": _check_integer,
    "quantity": _check_quantity,
    "string": _check_string,
    "choice": _check_choice,
    "path": _check_path,
    "bool": _check_bool,
    "list": _check_list,
}


def _parse_table(values: Any, spec: dict[str, Key], where: str, base: Path) -> dict[str, Any]:
    if not isinstance(values, dict):
        raise InputError(f"{where}: expected a table, got {values!r}")
    unknown = sorted(set(values) - set(spec))
    if unknown:
        raise InputError(
            f"{where}: unknown key {unknown[0]!r}; valid keys are " + ", ".join(sorted(spec))
        )
    out: dict[str, Any] = {}
    for name, key in spec.items():
        if name not in values:
            if key.default is REQUIRED:
                raise InputError(f"{where} {name}: required key is missing ({key.help})")
            out[name] = key.default
            continue
        value = _CHECKERS[key.kind](values[name], key, f"{where} {name}", base)
        if key.minimum is not None and isinstance(value, (int, float)) and value < key.minimum:
            raise InputError(f"{where} {name}: must be >= {key.minimum:g}, got {values[name]!r}")
        out[name] = value
    return out


def parse_scenario(data: dict[str, Any], path: Path, text: str = "") -> Scenario:
    """Validate a scenario already read into a dict (see :func:`load_scenario`)."""
    scenario = parse_tables(data, path, text, SCHEMA, ARRAY_TABLES, REQUIRED_TABLES)
    _check_loads(scenario)
    _check_profile(scenario)
    _check_structure(scenario)
    _check_infill_and_gravity(scenario)
    return scenario


def parse_tables(
    data: dict[str, Any],
    path: Path,
    text: str,
    schema: dict[str, dict[str, Key]],
    array_tables: frozenset[str],
    required_tables: tuple[str, ...],
) -> Scenario:
    """Validate *data* against *schema* (tables, keys, defaults); no cross-key checks.

    Shared by every kind of scenario file (see :func:`parse_scenario`).
    """
    base = path.parent
    unknown = sorted(set(data) - set(schema))
    if unknown:
        raise InputError(
            f"{path}: unknown table [{unknown[0]}]; valid tables are "
            + ", ".join(f"[{t}]" for t in schema)
        )
    for name in required_tables:
        if name not in data:
            raise InputError(f"{path}: required table [{name}] is missing")
    tables: dict[str, Any] = {}
    for name, spec in schema.items():
        raw = data.get(name)
        if name in array_tables:
            items = raw if raw is not None else []
            if not isinstance(items, list):
                raise InputError(f"{path}: [{name}] must be an array of tables, written [[{name}]]")
            tables[name] = [
                _parse_table(item, spec, f"{path}: [[{name}]] #{i + 1}", base)
                for i, item in enumerate(items)
            ]
        elif raw is None:
            if name in OPTIONAL_TABLES or any(k.default is REQUIRED for k in spec.values()):
                tables[name] = None
            else:
                tables[name] = {k: v.default for k, v in spec.items()}
        else:
            tables[name] = _parse_table(raw, spec, f"{path}: [{name}]", base)
    return Scenario(path=path, text=text, tables=tables)


def _check_structure(scenario: Scenario) -> None:
    """One source of Te; every break is a line or a mask file."""
    plate = scenario.tables["plate"]
    sources = [
        name
        for name, given in (
            ("elastic_thickness", plate["elastic_thickness"] is not None),
            ("elastic_thickness_file", plate["elastic_thickness_file"] is not None),
            ("[margin]", scenario.tables["margin"] is not None),
        )
        if given
    ]
    if not sources:
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: required key is "
            "missing (or give elastic_thickness_file, or a [margin] table)"
        )
    if len(sources) > 1:
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: give only one of "
            f"elastic_thickness, elastic_thickness_file or a [margin] table "
            f"(found {', '.join(sources)})"
        )
    if (plate["elastic_thickness_file"] is None) != (plate["elastic_thickness_variable"] is None):
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness_variable')}: "
            "elastic_thickness_file and elastic_thickness_variable go together"
        )
    for i, item in enumerate(scenario.tables["breaks"]):
        where = scenario.where("breaks", index=i)
        if (item["line"] is None) == (item["file"] is None):
            raise InputError(f"{where}: give either 'line' or 'file' (with 'variable')")
        if item["file"] is not None and item["variable"] is None:
            raise InputError(f"{where} variable: required with 'file' (the mask's name in it)")


def _check_loads(scenario: Scenario) -> None:
    layers = scenario.tables["loads"]
    if not layers:
        raise InputError(f"{scenario.path}: at least one [[loads]] table is needed")
    for i, layer in enumerate(layers):
        where = scenario.where("loads", index=i)
        has_file, has_shape = layer["file"] is not None, layer["synthetic"] is not None
        if has_file == has_shape:
            raise InputError(f"{where}: give either 'file' (with 'variable') or 'synthetic'")
        if layer["kind"] == "thickness" and layer["density"] is None:
            raise InputError(f"{where} density: required for a thickness layer")
        if has_shape:
            if scenario.tables["grid"] is None:
                raise InputError(
                    f"{scenario.path}: a synthetic load needs a [grid] table "
                    "(columns, rows, spacing)"
                )
            if layer["synthetic"] != "island-chain":
                for name in ("height", "radius"):
                    if layer[name] is None:
                        raise InputError(
                            f"{where} {name}: required for a {layer['synthetic']!r} shape"
                        )


def _check_infill_and_gravity(scenario: Scenario) -> None:
    infill, gravity = scenario.tables["infill"], scenario.tables["gravity"]
    layers = scenario.tables["loads"]
    kinds = [layer["kind"] for layer in layers]
    if "elevation" in kinds and kinds.count("elevation") > 1:
        raise InputError(
            f"{scenario.path}: at most one [[loads]] table may have kind = 'elevation'"
        )
    if "elevation" in kinds and "thickness" in kinds:
        raise InputError(
            f"{scenario.path}: an elevation layer cannot be combined with "
            "thickness layers (it defines the surface itself)"
        )
    for i, layer in enumerate(layers):
        where = scenario.where("loads", index=i)
        if layer["kind"] != "elevation":
            continue
        if layer["file"] is None:
            raise InputError(f"{where} file: an elevation layer is read from a file")
        if (layer["regional_elevation"] is None) == (layer["regional_radius"] is None):
            raise InputError(
                f"{where}: give either regional_elevation or regional_radius for an elevation layer"
            )
        if layer["density"] is None:
            raise InputError(f"{where} density: required for an elevation layer (rock)")
    if infill is not None:
        if "thickness" in kinds and infill["base_elevation"] is None:
            raise InputError(
                f"{scenario.where('infill', 'base_elevation')}: required with "
                "thickness layers (the surface they stand on)"
            )
        for i, layer in enumerate(layers):
            if layer["kind"] == "thickness" and layer["displaced_density"]:
                raise InputError(
                    f"{scenario.where('loads', 'displaced_density', i)}: leave it out with "
                    "[infill]; the water a layer displaces follows from sea_level"
                )
        if infill["sediment"] == "to_level" and infill["sediment_level"] is None:
            raise InputError(
                f"{scenario.where('infill', 'sediment_level')}: required with sediment = 'to_level'"
            )
    if gravity is not None and infill is None:
        raise InputError(
            f"{scenario.path}: a [gravity] table needs an [infill] table (the "
            "water, sediment and surfaces the anomaly comes from)"
        )
    outputs = scenario.tables["output"]
    if outputs is not None:
        if outputs["moat_fill_map"] is not None and infill is None:
            raise InputError(f"{scenario.where('output', 'moat_fill_map')}: needs [infill]")
        for key in ("free_air_map", "bouguer_map"):
            if outputs[key] is not None and gravity is None:
                raise InputError(f"{scenario.where('output', key)}: needs [gravity]")


def _check_profile(scenario: Scenario) -> None:
    out = scenario.tables["output"]
    ends = [out["profile_start"], out["profile_end"]]
    wanted = out["profile_csv"] is not None or out["profile_plot"] is not None
    for key, value in zip(("profile_start", "profile_end"), ends):
        if value is None:
            if wanted:
                raise InputError(f"{scenario.where('output', key)}: required for a profile")
            continue
        if len(value) != 2 or not all(isinstance(v, (int, float)) for v in value):
            raise InputError(f"{scenario.where('output', key)}: expected [x, y], got {value!r}")
    if all(v is not None for v in ends) and not wanted:
        raise InputError(f"{scenario.where('output')}: a profile needs profile_csv or profile_plot")


def load_scenario(
    path: str | Path,
    parser: Callable[[dict[str, Any], Path, str], Scenario] = parse_scenario,
) -> Scenario:
    """Read and validate a TOML scenario file.

    Parameters
    ----------
    path : str or pathlib.Path
        The scenario file; relative paths inside it are taken from its folder.
    parser : callable, default :func:`parse_scenario`
        Validator for the kind of scenario (e.g. the history scenario's).

    Returns
    -------
    Scenario

    Raises
    ------
    InputError
        Missing or unreadable file, malformed TOML, unknown table or key, a value of
        the wrong type, unit or range; the message names file, table and key.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise InputError(f"{path}: scenario file not found") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the scenario file ({exc})") from exc
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: malformed TOML: {exc}") from exc
    return parser(data, path.resolve(), text)
