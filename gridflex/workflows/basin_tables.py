"""Basin scenarios (``gridflex basin``): staged loading with compaction, or backstripping.

A basin scenario has these tables (``[[...]]`` are arrays of tables)::

    [plate]               elastic thickness (a number or a grid file), moduli, mantle density
    [margin]              optional: a te profile across a straight line instead
    [[breaks]]            optional: lines or mask files where te = 0
    [solver]              edges and padding of the solves
    [basin]               staged loading: the surface before the first stage, sea level,
                          water density, compaction, infill tolerance
    [[stages]]            one per stage, oldest first: isopach file, age, lithology, base
                          level, sea level, te of its time
    [stretching]          optional, with [basin]: a rift under the basin (beta, rift age)
    [backstrip]           or backstripping: basement, sediment and water grids, density
    [[backstrip_layers]]  optional: a layered column, backstripped step by step
    [output]              NetCDF file; GeoTIFFs and maps of each stage, section plot
    [[wells]]             optional: pseudo-wells (name, x, y), a CSV each
    [section]             optional: a cross-section of the horizons at chosen ages
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from gridflex.basin.compaction import LITHOLOGIES, check_grains_sink
from gridflex.basin.staging import ISOPACHS
from gridflex.basin.stretching import DEFAULT_CRUST_THICKNESS, DEFAULT_THERMAL_DIFFUSIVITY, ISOSTASY
from gridflex.constants import SEA_WATER_DENSITY
from gridflex.errors import InputError
from gridflex.scenario.checks import check_plate_structure
from gridflex.scenario.schema import REQUIRED, Key, Scenario, parse_tables, read_scenario
from gridflex.scenario.tables import SCHEMA

LITHOLOGY_NAMES = tuple(LITHOLOGIES)
"""The names of :data:`gridflex.basin.compaction.LITHOLOGIES`, the accepted lithologies."""

_LITHOLOGY_KEYS: dict[str, Key] = {
    "lithology": Key(
        "choice",
        "porosity-depth law (Sclater & Christie 1980)",
        "shale",
        choices=LITHOLOGY_NAMES,
    ),
    "surface_porosity": Key(
        "number", "override the lithology's surface porosity", None, minimum=0.0
    ),
    "decay_length": Key(
        "quantity", "override the lithology's porosity decay length", None, "length", minimum=0.0
    ),
    "grain_density": Key(
        "quantity", "override the lithology's grain density", None, "density", minimum=0.0
    ),
}
"""Keys shared by ``[[stages]]`` and ``[[backstrip_layers]]`` (one declaration)."""


BasinScenario = Scenario[dict[str, Any]]
"""A validated basin scenario (its tables are checked against :data:`BASIN_SCHEMA`)."""

__all__ = [
    "BASIN_SCHEMA",
    "BasinScenario",
    "LITHOLOGY_NAMES",
    "load_basin_scenario",
    "parse_basin_scenario",
]


BASIN_SCHEMA: dict[str, dict[str, Key]] = {
    # infill_density is not used: the fill is decided per cell (water, sediment, air)
    "plate": dict(SCHEMA["plate"]),
    # te structure as in gridflex run (the same keys, read by the same functions)
    "margin": dict(SCHEMA["margin"]),
    "breaks": dict(SCHEMA["breaks"]),
    "solver": {key: SCHEMA["solver"][key] for key in ("edges", "pad_factor")},
    "basin": {
        "surface_file": Key(
            "path",
            "grid file (GeoTIFF or NetCDF, metric) of the surface "
            "before the first stage (elevation, positive up)",
            REQUIRED,
        ),
        "surface_variable": Key("string", "NetCDF variable or band in surface_file", None),
        "sea_level": Key("quantity", "sea-level elevation", 0.0, "length"),
        "sea_level_file": Key(
            "path",
            "CSV of sea level through time, columns 'age [Ma]' and 'level [m]' (units in "
            "the header): a stage without its own sea_level takes it at its age",
            None,
        ),
        "water_density": Key(
            "quantity",
            "sea-water (and pore-water) density",
            SEA_WATER_DENSITY,
            "density",
            minimum=0.0,
        ),
        "compaction": Key("bool", "compact older stages under younger ones", True),
        "isopachs": Key(
            "choice",
            "stage thicknesses as deposited, or present-day (then decompacted first)",
            "deposited",
            choices=ISOPACHS,
        ),
        "tolerance": Key("quantity", "infill iteration tolerance", 1e-4, "length", minimum=0.0),
        "max_iterations": Key("integer", "infill iterations before giving up", 300, minimum=1),
    },
    "stages": {
        "file": Key(
            "path",
            "grid file (GeoTIFF or NetCDF) of the stage isopach (thickness as deposited)",
            REQUIRED,
        ),
        "variable": Key("string", "NetCDF variable or band, if the file has several", None),
        "erosion": Key(
            "bool",
            "the isopach may be negative: negative cells erode that (compacted) thickness "
            "from the top of the pile",
            False,
        ),
        "age": Key(
            "quantity",
            "age of the stage before present (years, or with a unit: 5 Myr, 5 Ma); oldest first",
            REQUIRED,
            "time",
        ),
        **_LITHOLOGY_KEYS,
        "base_level": Key(
            "quantity",
            "sediment fills the new depression up to this elevation (default: water to sea level)",
            None,
            "length",
        ),
        "sea_level": Key("quantity", "sea level at the time of the stage", None, "length"),
        "elastic_thickness": Key(
            "quantity", "te at the time of loading (default: [plate])", None, "length", minimum=0.0
        ),
        "te_file": Key("path", "grid file of te at the time of loading", None),
        "te_variable": Key("string", "NetCDF variable or band in te_file", None),
    },
    # a rift under the staged basin (McKenzie 1978); the mantle and water densities are
    # those of [plate] and [basin]
    "stretching": {
        "stretching_factor": Key("number", "stretching factor beta (1 = none)", None, minimum=1.0),
        "stretching_factor_file": Key("path", "or a grid file of beta", None),
        "stretching_factor_variable": Key(
            "string", "NetCDF variable or band in stretching_factor_file", None
        ),
        "rift_age": Key(
            "quantity", "age of the stretching (years before present)", REQUIRED, "time"
        ),
        "lithosphere_thickness": Key(
            "quantity", "thickness a of the lithosphere", 125e3, "length", minimum=0.0, strict=True
        ),
        "crust_thickness": Key(
            "quantity",
            "unstretched crustal thickness",
            DEFAULT_CRUST_THICKNESS,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "mantle_temperature": Key(
            "number", "temperature at the base of the lithosphere (degC)", 1333.0, minimum=0.0
        ),
        "thermal_expansion": Key(
            "number", "volumetric thermal expansion (1/K)", 3.28e-5, minimum=0.0
        ),
        "thermal_diffusivity": Key(
            "number",
            "thermal diffusivity (m^2/s)",
            DEFAULT_THERMAL_DIFFUSIVITY,
            minimum=0.0,
            strict=True,
        ),
        "crust_density": Key("quantity", "crust density at 0 degC", 2800.0, "density", minimum=0.0),
        "isostasy": Key(
            "choice",
            "thermal subsidence as published (mckenzie) or on the full column (column)",
            "mckenzie",
            choices=ISOSTASY,
        ),
    },
    "backstrip": {
        "basement_file": Key(
            "path", "grid file of basement depth below sea level (positive down)", None
        ),
        "basement_variable": Key("string", "NetCDF variable or band in basement_file", None),
        "sediment_file": Key("path", "grid file of sediment thickness", None),
        "sediment_variable": Key("string", "NetCDF variable or band in sediment_file", None),
        "water_file": Key("path", "grid file of water depth (positive down)", None),
        "water_variable": Key("string", "NetCDF variable or band in water_file", None),
        "lithology": Key(
            "choice",
            "porosity-depth law giving the sediment density",
            "shale",
            choices=LITHOLOGY_NAMES,
        ),
        "sediment_density": Key(
            "quantity",
            "mean sediment bulk density instead of the porosity law",
            None,
            "density",
            minimum=0.0,
        ),
        "sea_level_change": Key(
            "quantity", "sea level of the time relative to present (positive higher)", 0.0, "length"
        ),
        "water_density": Key(
            "quantity", "sea-water density", SEA_WATER_DENSITY, "density", minimum=0.0
        ),
        "max_mismatch": Key(
            "quantity", "largest allowed |basement - sediment - water|", 1.0, "length", minimum=0.0
        ),
    },
    "backstrip_layers": {
        "file": Key("path", "grid file of the layer's present thickness", REQUIRED),
        "variable": Key("string", "NetCDF variable or band, if the file has several", None),
        **_LITHOLOGY_KEYS,
        "water_depth": Key(
            "quantity", "water depth when the layer had just been deposited", None, "length"
        ),
        "water_depth_file": Key("path", "or a grid file of that water depth", None),
        "water_depth_variable": Key("string", "NetCDF variable or band in water_depth_file", None),
        "sea_level_change": Key("quantity", "sea level then, relative to present", 0.0, "length"),
        "age": Key(
            "quantity",
            "age of the top of the layer before present (years, or 5 Myr, 5 Ma)",
            None,
            "time",
        ),
    },
    "output": {
        "file": Key("path", "NetCDF file for the results", REQUIRED),
        "geotiff": Key(
            "flag_or_names",
            "GeoTIFFs of each stage beside the NetCDF (<stem>_<grid>_stage<k>.tif): true "
            "for stage_thickness, accommodation_created and deflection_increment, or a "
            "list of stage grids",
            False,
        ),
        "maps": Key(
            "flag_or_names",
            "PNG maps of each stage beside the NetCDF (<stem>_<grid>_stage<k>.png), as geotiff",
            False,
        ),
        "section_plot": Key(
            "path", "PNG of the horizons along [section] (default <stem>_section.png)", None
        ),
    },
    # pseudo-wells: one CSV each beside the NetCDF (<stem>_well_<name>.csv)
    "wells": {
        "name": Key("string", "name of the pseudo-well (also in its CSV file's name)", REQUIRED),
        "x": Key("number", "x of the well in the grid's coordinates", REQUIRED),
        "y": Key("number", "y of the well in the grid's coordinates", REQUIRED),
    },
    "section": {
        "start": Key(
            "list", "[x, y] of the cross-section's start, in the grid's coordinates", REQUIRED
        ),
        "end": Key("list", "[x, y] of the cross-section's end", REQUIRED),
        "ages": Key(
            "list", "ages of the stages drawn (years before present), a panel each", REQUIRED
        ),
    },
}
"""Every table and key a basin scenario may contain."""

BASIN_ARRAY_TABLES = frozenset({"stages", "backstrip_layers", "breaks", "wells"})
BASIN_REQUIRED_TABLES = ("plate", "output")
_OPTIONAL = frozenset({"basin", "backstrip", "section", "stretching"})
"""Tables that switch a workflow on; absent, they are ``None``."""


def parse_basin_scenario(data: dict[str, Any], path: Path, text: str = "") -> BasinScenario:
    """Validate a basin scenario already read into a dict."""
    scenario = parse_tables(
        data, path, text, BASIN_SCHEMA, BASIN_ARRAY_TABLES, BASIN_REQUIRED_TABLES, _OPTIONAL
    )
    _check_basin(scenario)
    return scenario


def load_basin_scenario(path: str | Path) -> BasinScenario:
    """Read and validate a basin scenario (TOML); messages name file, table and key."""
    return read_scenario(path, parse_basin_scenario)


def _check_grains(scenario: BasinScenario) -> None:
    """Every lithology's grains are denser than the water of the run."""
    for rows, table in (("stages", "basin"), ("backstrip_layers", "backstrip")):
        if scenario.tables[table] is None:
            continue
        water = scenario.tables[table]["water_density"]
        for i, row in enumerate(scenario.tables[rows]):
            grains = row["grain_density"]
            if grains is None:
                grains = LITHOLOGIES[row["lithology"]].grain_density
            key = "grain_density" if row["grain_density"] is not None else "lithology"
            check_grains_sink(grains, water, scenario.where(rows, key, i))


def _check_basin(scenario: BasinScenario) -> None:
    check_plate_structure(scenario)
    tables = scenario.tables
    _check_grains(scenario)
    if tables["basin"] is not None and tables["backstrip"] is not None:
        raise InputError(
            f"{scenario.path}: give either [basin] (with [[stages]]) or [backstrip], not both"
        )
    if tables["basin"] is None and tables["backstrip"] is None:
        raise InputError(
            f"{scenario.path}: a basin scenario needs [basin] (with [[stages]]) or [backstrip]"
        )
    if tables["backstrip_layers"] and tables["backstrip"] is None:
        raise InputError(f"{scenario.path}: [[backstrip_layers]] need a [backstrip] table")
    _check_stretching(scenario)
    if tables["basin"] is not None:
        if not tables["stages"]:
            raise InputError(f"{scenario.path}: [basin] needs at least one [[stages]] table")
        for i, stage in enumerate(tables["stages"]):
            if stage["te_file"] is None and stage["te_variable"] is not None:
                raise InputError(f"{scenario.where('stages', 'te_variable', i)}: needs te_file")
            if stage["te_file"] is not None and stage["elastic_thickness"] is not None:
                raise InputError(
                    f"{scenario.where('stages', index=i)}: give either elastic_thickness or te_file"
                )
        return
    if tables["stages"]:
        raise InputError(f"{scenario.path}: [[stages]] need a [basin] table")
    table = tables["backstrip"]
    if tables["backstrip_layers"]:
        files = [f"{p}_file" for p in ("basement", "sediment", "water") if table[f"{p}_file"]]
        files += ["sediment_density"] if table["sediment_density"] is not None else []
        if files:
            raise InputError(
                f"{scenario.where('backstrip', files[0])}: leave it out with "
                "[[backstrip_layers]] (each layer has its thickness and water "
                "depth)"
            )
        ages = [layer["age"] for layer in tables["backstrip_layers"]]
        if any(a is None for a in ages) and not all(a is None for a in ages):
            raise InputError(
                f"{scenario.path}: give age in every [[backstrip_layers]] table or in none"
            )
        for i, layer in enumerate(tables["backstrip_layers"]):
            if (layer["water_depth"] is None) == (layer["water_depth_file"] is None):
                raise InputError(
                    f"{scenario.where('backstrip_layers', index=i)}: give either "
                    "water_depth or water_depth_file"
                )
        return
    given = [p for p in ("basement", "sediment", "water") if table[f"{p}_file"] is not None]
    for part in ("basement", "sediment", "water"):
        if table[f"{part}_file"] is None and table[f"{part}_variable"] is not None:
            raise InputError(
                f"{scenario.where('backstrip', part + '_variable')}: needs {part}_file"
            )
    if len(given) < 2:
        raise InputError(
            f"{scenario.where('backstrip')}: give at least two of basement_file, "
            "sediment_file and water_file"
        )


def _check_stretching(scenario: BasinScenario) -> None:
    """[stretching] goes with [basin] and gives beta as a number or a file."""
    table = scenario.tables.get("stretching")
    if table is None:
        return
    if scenario.tables["basin"] is None:
        raise InputError(f"{scenario.where('stretching')}: needs a [basin] table")
    if (table["stretching_factor"] is None) == (table["stretching_factor_file"] is None):
        raise InputError(
            f"{scenario.where('stretching')}: give either stretching_factor or "
            "stretching_factor_file"
        )
    if table["stretching_factor_file"] is None and table["stretching_factor_variable"]:
        raise InputError(
            f"{scenario.where('stretching', 'stretching_factor_variable')}: needs "
            "stretching_factor_file"
        )
