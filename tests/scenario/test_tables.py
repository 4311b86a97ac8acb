"""The scenario key tables: choices are the library's constants, TypedDicts match SCHEMA."""

from __future__ import annotations

import re
import types
from pathlib import Path
from typing import Any, get_args, get_origin, get_overloads, get_type_hints

import pytest

from gridflex.basin.compaction import LITHOLOGIES
from gridflex.basin.staging import ISOPACHS
from gridflex.basin.stretching import ISOSTASY
from gridflex.bmi.config import BMI_SCHEMA
from gridflex.engine import EDGES, METHODS, SPECTRAL_EDGES
from gridflex.estimation.misfit import QUANTITIES
from gridflex.gis.geometry import RESAMPLING
from gridflex.gis.resampling import RESULT_EXTENTS, RESULT_GRIDS
from gridflex.glacial.response import INITIAL_STATES
from gridflex.infill import SEDIMENT_MODES
from gridflex.io.netcdf import OUTPUT_DTYPES
from gridflex.io.rasters import LAYER_MISSING_POLICIES
from gridflex.loads import LOAD_KINDS
from gridflex.scenario.schema import Key, Scenario
from gridflex.scenario.tables import SCHEMA, FlexureTables, load_scenario
from gridflex.solvers.viscous import INTERPOLATIONS, MODELS
from gridflex.sweeps.monte_carlo import SAMPLINGS
from gridflex.synthetic import SHAPES
from gridflex.workflows.basin_tables import BASIN_SCHEMA
from gridflex.workflows.history import HISTORY_SCHEMA, SYNTHETIC_ICE

LIBRARY_CHOICES: dict[tuple[str, str, str], tuple[str, ...]] = {
    ("run", "solver", "method"): METHODS,
    ("run", "solver", "edges"): EDGES,
    ("run", "working_grid", "resampling"): RESAMPLING,
    ("run", "loads", "missing"): LAYER_MISSING_POLICIES,
    ("run", "loads", "synthetic"): SHAPES,
    ("run", "loads", "kind"): LOAD_KINDS,
    ("run", "infill", "sediment"): SEDIMENT_MODES,
    ("run", "fit", "quantity"): QUANTITIES,
    ("run", "output", "grid"): RESULT_GRIDS,
    ("run", "output", "extent"): RESULT_EXTENTS,
    ("run", "output", "dtype"): OUTPUT_DTYPES,
    ("run", "ensemble", "sampling"): SAMPLINGS,
    ("basin", "solver", "edges"): EDGES,
    ("basin", "basin", "isopachs"): ISOPACHS,
    ("basin", "stages", "lithology"): tuple(LITHOLOGIES),
    ("basin", "backstrip", "lithology"): tuple(LITHOLOGIES),
    ("basin", "backstrip_layers", "lithology"): tuple(LITHOLOGIES),
    ("basin", "stretching", "isostasy"): ISOSTASY,
    ("history", "mantle", "model"): MODELS,
    ("history", "solver", "edges"): SPECTRAL_EDGES,
    ("history", "solver", "interpolation"): INTERPOLATIONS,
    ("history", "solver", "initial"): INITIAL_STATES,
    ("history", "ice", "synthetic"): SYNTHETIC_ICE,
    ("history", "ice", "missing"): LAYER_MISSING_POLICIES,
    ("history", "output", "dtype"): OUTPUT_DTYPES,
    ("bmi", "mantle", "model"): MODELS,
    ("bmi", "solver", "edges"): SPECTRAL_EDGES,
    ("bmi", "solver", "interpolation"): INTERPOLATIONS,
    ("bmi", "solver", "initial"): INITIAL_STATES,
}
"""Every choice key of every kind of scenario and the library constant it must be."""

SCHEMAS = {"run": SCHEMA, "basin": BASIN_SCHEMA, "history": HISTORY_SCHEMA, "bmi": BMI_SCHEMA}


def _choice_keys() -> dict[tuple[str, str, str], Key]:
    return {
        (kind, table, name): key
        for kind, schema in SCHEMAS.items()
        for table, keys in schema.items()
        for name, key in keys.items()
        if key.kind == "choice"
    }


def test_every_choice_key_is_listed_here():
    assert set(_choice_keys()) == set(LIBRARY_CHOICES)


@pytest.mark.parametrize("where", sorted(LIBRARY_CHOICES), ids="-".join)
def test_choices_are_the_library_constant(where):
    choices = _choice_keys()[where].choices
    constant = LIBRARY_CHOICES[where]
    assert choices == constant
    if where[2] != "lithology":  # the names of the LITHOLOGIES dict, a tuple of its keys
        assert choices is constant
    assert _choice_keys()[where].default in (None, *constant)


_KIND_TYPES: dict[str, Any] = {
    "quantity": float,
    "number": float,
    "integer": int,
    "string": str,
    "choice": str,
    "path": Path,
    "bool": bool,
    "flag_or_names": bool | list[str],
    "list": list[Any],
    "distribution": list[Any] | dict[str, Any],
}


def _row_type(hint: Any) -> Any:
    """PlateTable from PlateTable, PlateTable | None or list[PlateTable]."""
    if get_origin(hint) is list:
        return get_args(hint)[0]
    if isinstance(hint, types.UnionType):
        return next(arg for arg in get_args(hint) if arg is not type(None))
    return hint


def test_typed_tables_are_the_schema_tables():
    assert list(get_type_hints(FlexureTables)) == list(SCHEMA)


@pytest.mark.parametrize("table", list(SCHEMA))
def test_typed_table_keys_and_types_follow_the_schema(table):
    row = _row_type(get_type_hints(FlexureTables)[table])
    hints = get_type_hints(row)
    assert list(hints) == list(SCHEMA[table]), row.__name__
    for name, key in SCHEMA[table].items():
        expected = _KIND_TYPES[key.kind]
        if key.default is None:
            expected = expected | None
        assert hints[name] == expected, f"{row.__name__}.{name}"


def test_absent_tables_are_typed_as_optional():
    hints = get_type_hints(FlexureTables)
    for table in ("infill", "gravity", "fit", "sweep", "ensemble", "margin", "grid"):
        assert type(None) in get_args(hints[table]), table
    for table in ("plate", "solver", "working_grid", "output"):
        assert type(None) not in get_args(hints[table]), table


def test_scenario_table_overloads_are_the_typed_tables():
    """``Scenario.table("plate")`` is typed as FlexureTables says, for every table."""
    returns = {}
    for overload in get_overloads(Scenario.table):
        name = re.fullmatch(r"Literal\[[\"'](\w+)[\"']\]", overload.__annotations__["name"])
        if name:
            returns[name.group(1)] = overload.__annotations__["return"]
    typed = {name: ref.__forward_arg__ for name, ref in FlexureTables.__annotations__.items()}
    assert returns == typed


def test_table_returns_the_parsed_values(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(
        '[plate]\nelastic_thickness = "25 km"\n[[loads]]\nfile = "l.nc"\ndensity = 2800\n'
        '[output]\nfile = "o.nc"\n'
    )
    scenario = load_scenario(path)
    assert scenario.table("plate") is scenario.tables["plate"]
    assert scenario.table("plate")["elastic_thickness"] == 25e3
    assert scenario.table("infill") is None  # optional table, absent
    assert scenario.table("margin") is None  # has required keys, absent
    assert scenario.table("solver")["method"] == "auto"  # defaults
