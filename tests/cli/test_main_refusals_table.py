"""Table of refused inputs over every command (issue 16): each case exits with status 2,
prints exactly one line on stderr naming the culprit and leaves no file behind.

A row is ``(command, base, mutation, extra arguments, culprit)``: *base* names a valid
scenario document below, *mutation* maps a key path (``("plate", "te")``,
``("loads", 0, "density")``) to the value put there (:data:`DROP` removes it).
"""

from __future__ import annotations

import copy
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import xarray as xr

from gridflex.cli.main import main
from tests.helpers import make_grid, toml_text, write_seamount_inputs

DROP = object()
"""Mutation value that removes the key."""

RUN: dict[str, Any] = {
    "plate": {"elastic_thickness": "10 km"},
    "grid": {"rows": 16, "columns": 16, "spacing": "5 km"},
    "loads": [
        {
            "synthetic": "gaussian",
            "kind": "thickness",
            "density": 2800,
            "height": "2 km",
            "radius": "20 km",
        }
    ],
    "output": {"file": "out.nc"},
}
FILE_RUN: dict[str, Any] = {
    "plate": {"elastic_thickness": "10 km"},
    "loads": [{"file": "load.nc", "variable": "height", "density": 2800}],
    "output": {"file": "out.nc"},
}
HISTORY: dict[str, Any] = {
    "plate": {"elastic_thickness": "80 km"},
    "mantle": {"model": "half-space", "viscosity": "1e21 Pa s"},
    "grid": {"rows": 16, "columns": 16, "spacing": "40 km"},
    "ice": {
        "synthetic": "disc",
        "radius": "200 km",
        "height": "2000 m",
        "times": [-20000, -10000, 0],
        "thickness_factors": [0.0, 1.0, 0.0],
    },
    "bed": {"elevation": "300 m"},
    "output": {"file": "ice.nc"},
}
BASIN: dict[str, Any] = {
    "plate": {"elastic_thickness": "8 km"},
    "basin": {"surface_file": "surface.nc", "surface_variable": "elevation"},
    "stages": [{"file": "s1.nc", "variable": "thickness", "age": 3.0e6, "lithology": "shale"}],
    "output": {"file": "basin.nc"},
}
BACKSTRIP: dict[str, Any] = {
    "plate": {"elastic_thickness": 0},
    "backstrip": {
        "sediment_file": "s1.nc",
        "sediment_variable": "thickness",
        "water_file": "water.nc",
        "water_variable": "depth",
        "lithology": "shale",
    },
    "output": {"file": "strip.nc"},
}
FIT: dict[str, Any] = {
    "plate": {"elastic_thickness": "10 km"},
    "loads": [
        {"file": "load.nc", "variable": "height", "density": 2800, "displaced_density": 1030}
    ],
    "fit": {
        "observed_file": "observed.nc",
        "observed_variable": "depth",
        "quantity": "surface",
        "te_min": "2 km",
        "te_max": "80 km",
    },
    "output": {"file": "fit.nc"},
}
SWEEP: dict[str, Any] = {**RUN, "sweep": {"te": ["5 km", "10 km"]}}
ENSEMBLE: dict[str, Any] = {
    **RUN,
    "output": {"file": "ens.nc"},
    "ensemble": {
        "members": 8,
        "seed": 1,
        "te": {"distribution": "normal", "mean": "10 km", "std": "2 km"},
        "thresholds": ["100 m"],
    },
}
TEMAP: dict[str, Any] = {
    "plate": {"crust_thickness": "35 km"},
    "data": {
        "topography_file": "load.nc",
        "topography_variable": "height",
        "anomaly_file": "bouguer.nc",
        "anomaly_variable": "bouguer",
    },
    "temap": {"window": "192 km", "step": "96 km", "samples": 6},
    "output": {"file": "temap.nc"},
}
BASES = {
    "run": RUN,
    "file": FILE_RUN,
    "history": HISTORY,
    "basin": BASIN,
    "backstrip": BACKSTRIP,
    "fit": FIT,
    "sweep": SWEEP,
    "temap": TEMAP,
    "ensemble": ENSEMBLE,
}

NOT_NUMBERS = ["banana", [1, 2], True, {"a": 1}, float("nan"), float("inf")]
"""Values no number or quantity key takes."""


def _each(command: str, base: str, path: tuple, values: list, culprit: str) -> list[tuple]:
    return [(command, base, {path: v}, [], culprit) for v in values]


PROFILE = ["result.nc", "--start", "-3000", "0", "--end", "3000", "0", "--csv", "p.csv"]

ROWS: list[tuple[str, str, dict[tuple, Any], list[str], str]] = [
    # ---- run: wrong types, units, ranges, NaN/inf for the keys of each table
    *_each("run", "run", ("plate", "elastic_thickness"), NOT_NUMBERS, "elastic_thickness"),
    *_each("run", "run", ("plate", "elastic_thickness"), ["10 kg", "-1 km"], "elastic_thickness"),
    *_each("run", "run", ("plate", "youngs_modulus"), [*NOT_NUMBERS, "1 m", -1], "youngs_modulus"),
    *_each(
        "run", "run", ("plate", "poisson_ratio"), ["x", float("nan"), 0.5, -1.0], "poisson_ratio"
    ),
    *_each("run", "run", ("plate", "mantle_density"), ["3 km", -5, float("inf")], "mantle_density"),
    *_each("run", "run", ("plate", "infill_density"), ["3 km", -5, [1]], "infill_density"),
    *_each("run", "run", ("plate", "gravity"), ["1 km", -9.8, 0, "x"], "gravity"),
    *_each("run", "run", ("plate", "method"), ["banana", 3, ["fft"]], "method"),
    *_each("run", "run", ("plate", "edges"), ["banana", 1], "edges"),
    *_each(
        "run", "run", ("plate", "inplane_force_x"), ["x", float("nan"), "1 m"], "inplane_force_x"
    ),
    *_each("run", "run", ("plate", "pad_factor"), ["x", -1, float("inf")], "pad_factor"),
    *_each("run", "run", ("plate", "max_iterations"), [2.5, 0, "ten"], "max_iterations"),
    *_each("run", "run", ("grid", "rows"), [2, 16.5, "16", -4, True], "rows"),
    *_each("run", "run", ("grid", "columns"), [0, 1e300, [16]], "columns"),
    *_each("run", "run", ("grid", "spacing"), ["-5 km", "5 kg", float("nan"), "x"], "spacing"),
    *_each("run", "run", ("grid", "crs"), ["EPSG:999999", "banana", 5], "crs"),
    *_each("run", "run", ("grid", "center_x"), ["x", float("inf")], "center_x"),
    *_each("run", "run", ("loads", 0, "density"), [*NOT_NUMBERS, "2 km", -10], "density"),
    *_each("run", "run", ("loads", 0, "height"), ["x", "2 kg", float("nan")], "height"),
    *_each("run", "run", ("loads", 0, "radius"), ["x", "-2 km", 0], "radius"),
    *_each("run", "run", ("loads", 0, "synthetic"), ["banana", 1], "synthetic"),
    *_each("run", "run", ("loads", 0, "kind"), ["banana", ""], "kind"),
    *_each("run", "run", ("loads", 0, "displaced_density"), ["x", -1], "displaced_density"),
    ("run", "run", {("plate", "elastic_thickness"): DROP}, [], "elastic_thickness"),
    ("run", "run", {("plate",): DROP}, [], "[plate]"),
    ("run", "run", {("output",): DROP}, [], "[output]"),
    ("run", "run", {("output", "file"): DROP}, [], "file"),
    ("run", "run", {("loads",): DROP}, [], "loads"),
    ("run", "run", {("grid", "rows"): DROP}, [], "rows"),
    ("run", "run", {("plate", "te"): 10}, [], "te"),
    ("run", "run", {("banana",): {"a": 1}}, [], "banana"),
    ("run", "run", {("plate",): 5}, [], "plate"),
    ("run", "run", {("loads",): {"density": 1}}, [], "loads"),
    ("run", "run", {("loads", 0, "colour"): "red"}, [], "colour"),
    ("run", "run", {("output", "dtype"): "float16"}, [], "dtype"),
    ("run", "run", {("output", "file"): 5}, [], "file"),
    ("run", "run", {("output", "file"): "sub/"}, [], "sub/"),
    ("run", "run", {("output", "file"): "folder"}, [], "folder"),
    ("run", "run", {("output", "file"): "text.nc/out.nc"}, [], "text.nc"),
    ("run", "run", {("output", "file"): "o\0.nc"}, [], "file"),
    ("run", "run", {("output", "map"): "m\0.png"}, [], "map"),
    ("run", "run", {("output", "geotiff"): "banana"}, [], "geotiff"),
    ("run", "run", {("output", "extent"): "banana"}, [], "extent"),
    ("run", "run", {("output", "moat_fill_map"): "m.png"}, [], "moat_fill_map"),
    ("run", "run", {("output", "free_air_map"): "f.png"}, [], "free_air_map"),
    ("run", "run", {("output", "profile_start"): [0, 0]}, [], "profile"),
    (
        "run",
        "run",
        {
            ("output", "profile_start"): [0, "x"],
            ("output", "profile_end"): [1, 1],
            ("output", "profile_csv"): "p.csv",
        },
        [],
        "profile_start",
    ),
    (
        "run",
        "run",
        {
            ("output", "profile_start"): [0, 0, 0],
            ("output", "profile_end"): [1, 1],
            ("output", "profile_csv"): "p.csv",
        },
        [],
        "profile_start",
    ),
    ("run", "run", {("working_grid",): {"spacing": "-1 km"}}, [], "spacing"),
    ("run", "run", {("working_grid",): {"resampling": "banana"}}, [], "resampling"),
    ("run", "run", {("infill",): {"base_elevation": "x"}}, [], "base_elevation"),
    ("run", "run", {("infill",): {"sediment_density": "1 km"}}, [], "sediment_density"),
    ("run", "run", {("infill",): {"max_iterations": 0}}, [], "max_iterations"),
    ("run", "run", {("infill",): {"tolerance": -1}}, [], "tolerance"),
    ("run", "run", {("gravity",): {"terms": 0}}, [], "terms"),
    ("run", "run", {("gravity",): {"observation_height": "x"}}, [], "observation_height"),
    ("run", "run", {("gravity",): {"bouguer_density": -1}}, [], "bouguer_density"),
    (
        "run",
        "run",
        {("margin",): {"te_left": "10 km", "te_right": "x", "line": [[0, 0], [1, 1]]}},
        [],
        "te_right",
    ),
    (
        "run",
        "run",
        {("margin",): {"te_left": "10 km", "te_right": "20 km", "line": [[0, 0]]}},
        [],
        "line",
    ),
    (
        "run",
        "run",
        {("margin",): {"te_left": "10 km", "te_right": "20 km", "line": [[0, 0], [0, 0]]}},
        [],
        "line",
    ),
    ("run", "run", {("margin",): {"te_left": "10 km"}}, [], "te_right"),
    ("run", "run", {("breaks",): {"line": "x"}}, [], "line"),
    ("run", "run", {("breaks",): [{"line": [[0, 0], [1e3, 0]], "width": "-1 km"}]}, [], "width"),
    ("run", "run", {("solver",): {"tolerance": "x"}}, [], "tolerance"),
    # ---- run with file loads: bad paths and bad grids
    ("run", "file", {("loads", 0, "file"): "nope.nc"}, [], "nope.nc"),
    ("run", "file", {("loads", 0, "file"): "folder"}, [], "folder"),
    ("run", "file", {("loads", 0, "file"): "load.nc/"}, [], "load.nc"),
    ("run", "file", {("loads", 0, "file"): "lo\0ad.nc"}, [], "file"),
    ("run", "file", {("loads", 0, "file"): "text.nc"}, [], "text.nc"),
    ("run", "file", {("loads", 0, "file"): "https://example.org/x.tif"}, [], "https"),
    ("run", "file", {("loads", 0, "file"): "/vsicurl/x.tif"}, [], "vsi"),
    ("run", "file", {("loads", 0, "variable"): "nope"}, [], "nope"),
    ("run", "file", {("loads", 0, "file"): "irregular.nc"}, [], "irregular.nc"),
    ("run", "file", {("loads", 0, "file"): "one_row.nc"}, [], "one_row.nc"),
    ("run", "file", {("loads", 0, "file"): "bad_units.nc"}, [], "bad_units.nc"),
    ("run", "file", {("loads", 0, "missing"): "banana"}, [], "missing"),
    (
        "run",
        "file",
        {
            ("plate", "elastic_thickness_file"): "te_other.nc",
            ("plate", "elastic_thickness_variable"): "te",
            ("plate", "elastic_thickness"): DROP,
        },
        [],
        "te_other.nc",
    ),
    ("run", "file", {("plate", "elastic_thickness_file"): "nope.nc"}, [], "elastic_thickness"),
    (
        "run",
        "file",
        {
            ("plate", "elastic_thickness_file"): "te.nc",
            ("plate", "elastic_thickness_variable"): "te",
            ("plate", "elastic_thickness"): DROP,
            ("margin",): {"te_left": "10 km", "te_right": "20 km", "line": [[0, 0], [1e3, 1e3]]},
        },
        [],
        "margin",
    ),
    (
        "run",
        "file",
        {
            ("plate", "elastic_thickness_file"): "te.nc",
            ("plate", "elastic_thickness_variable"): "nope",
            ("plate", "elastic_thickness"): DROP,
        },
        [],
        "nope",
    ),
    (
        "run",
        "file",
        {
            ("plate", "elastic_thickness_file"): "te_negative.nc",
            ("plate", "elastic_thickness_variable"): "te",
            ("plate", "elastic_thickness"): DROP,
        },
        [],
        "te_negative.nc",
    ),
    ("run", "file", {("breaks",): [{"file": "nope.nc", "variable": "mask"}]}, [], "nope.nc"),
    ("run", "file", {("output", "file"): "load.nc"}, [], "load.nc"),
    ("run", "file", {("loads", 0, "synthetic"): "gaussian"}, [], "synthetic"),
    # ---- history: times, ice, mantle, solver
    *_each(
        "history",
        "history",
        ("ice", "times"),
        ["x", [0, "x"], [0], [0, float("nan")], [0, 0, 0], [0, -1, 5]],
        "times",
    ),
    *_each(
        "history",
        "history",
        ("ice", "thickness_factors"),
        [[0, 1], "x", [0, float("inf"), 0], [0, -1, 0]],
        "thickness_factors",
    ),
    *_each("history", "history", ("ice", "radius"), ["x", "-1 km", "2 kg"], "radius"),
    *_each("history", "history", ("ice", "height"), ["x", float("nan")], "height"),
    *_each("history", "history", ("ice", "synthetic"), ["banana", 1], "synthetic"),
    *_each("history", "history", ("ice", "density"), ["1 km", -1], "density"),
    *_each("history", "history", ("mantle", "model"), ["banana", 3], "model"),
    *_each(
        "history",
        "history",
        ("mantle", "viscosity"),
        ["x", "1e21 m", -1, float("nan")],
        "viscosity",
    ),
    *_each("history", "history", ("solver", "max_step"), ["x", "-1 yr", 0, "1 km"], "max_step"),
    *_each("history", "history", ("solver", "interpolation"), ["banana"], "interpolation"),
    *_each("history", "history", ("solver", "initial"), ["banana"], "initial"),
    *_each("history", "history", ("output", "time_reference"), ["yesterday", 5], "time_reference"),
    ("history", "history", {("ice",): DROP}, [], "[ice]"),
    ("history", "history", {("mantle", "relaxation_time"): "3 km"}, [], "relaxation_time"),
    ("history", "history", {("ice", "file"): "nope.nc"}, [], "ice"),
    ("history", "history", {("ice", "colour"): 1}, [], "colour"),
    ("history", "history", {("loads",): [{"density": 1}]}, [], "loads"),
    ("history", "history", {("output", "file"): "o\0.nc"}, [], "file"),
    ("history", "history", {("output", "file"): "sub/"}, [], "sub/"),
    ("history", "history", {("grid", "rows"): 3}, [], "rows"),
    ("history", "history", {("plate", "elastic_thickness"): "x"}, [], "elastic_thickness"),
    # ---- basin: stages, surface, backstrip
    *_each("basin", "basin", ("stages", 0, "age"), ["x", float("nan"), [1], True], "age"),
    *_each("basin", "basin", ("stages", 0, "lithology"), ["banana", 1], "lithology"),
    *_each("basin", "basin", ("stages", 0, "base_level"), ["x", "1 kg"], "base_level"),
    *_each("basin", "basin", ("stages", 0, "grain_density"), ["x", 900, -1], "grain_density"),
    *_each("basin", "basin", ("stages", 0, "surface_porosity"), ["x", 1.5, -0.1], "porosity"),
    *_each("basin", "basin", ("stages", 0, "decay_length"), ["x", "-1 km"], "decay_length"),
    *_each("basin", "basin", ("basin", "water_density"), ["x", -1], "water_density"),
    *_each("basin", "basin", ("basin", "max_iterations"), [0, 1.5], "max_iterations"),
    ("basin", "basin", {("stages", 0, "file"): "nope.nc"}, [], "nope.nc"),
    ("basin", "basin", {("stages", 0, "file"): "folder"}, [], "folder"),
    ("basin", "basin", {("stages", 0, "file"): DROP}, [], "file"),
    ("basin", "basin", {("stages", 0, "variable"): "nope"}, [], "nope"),
    ("basin", "basin", {("stages", 0, "file"): "other_grid.nc"}, [], "other_grid.nc"),
    ("basin", "basin", {("stages", 0, "colour"): 1}, [], "colour"),
    ("basin", "basin", {("stages",): DROP}, [], "stages"),
    ("basin", "basin", {("stages",): "s1.nc"}, [], "stages"),
    ("basin", "basin", {("basin", "surface_file"): "nope.nc"}, [], "nope.nc"),
    ("basin", "basin", {("basin", "surface_file"): "s\0.nc"}, [], "surface_file"),
    ("basin", "basin", {("basin", "surface_variable"): "nope"}, [], "nope"),
    ("basin", "basin", {("backstrip",): BACKSTRIP["backstrip"]}, [], "backstrip"),
    (
        "basin",
        "basin",
        {("stages",): [BASIN["stages"][0], {**BASIN["stages"][0], "age": 4e6}]},
        [],
        "age",
    ),
    ("basin", "basin", {("output", "file"): "s1.nc"}, [], "s1.nc"),
    ("basin", "backstrip", {("backstrip", "water_file"): "nope.nc"}, [], "nope.nc"),
    ("basin", "backstrip", {("backstrip", "lithology"): "banana"}, [], "lithology"),
    ("basin", "backstrip", {("backstrip", "sediment_file"): DROP}, [], "sediment_file"),
    ("basin", "backstrip", {("backstrip", "max_mismatch"): "x"}, [], "max_mismatch"),
    (
        "basin",
        "backstrip",
        {
            ("backstrip", "water_file"): "other_grid.nc",
            ("backstrip", "water_variable"): "thickness",
        },
        [],
        "other_grid.nc",
    ),
    # ---- fit
    *_each("fit", "fit", ("fit", "te_min"), ["x", "-1 km", "2 kg", float("nan")], "te_min"),
    *_each("fit", "fit", ("fit", "te_max"), ["x", "1 km"], "te_"),
    *_each("fit", "fit", ("fit", "quantity"), ["banana", 1], "quantity"),
    *_each("fit", "fit", ("fit", "confidence"), ["x", 1.5, 0], "confidence"),
    *_each("fit", "fit", ("fit", "samples"), [0, 2.5, "x"], "samples"),
    ("fit", "fit", {("fit",): DROP}, [], "[fit]"),
    ("fit", "fit", {("fit", "observed_file"): "nope.nc"}, [], "nope.nc"),
    ("fit", "fit", {("fit", "observed_file"): DROP}, [], "observed_file"),
    ("fit", "fit", {("fit", "observed_variable"): "nope"}, [], "nope"),
    ("fit", "fit", {("fit", "mask_file"): "nope.nc", ("fit", "mask_variable"): "m"}, [], "nope.nc"),
    (
        "fit",
        "fit",
        {("fit", "observed_file"): "one_row.nc", ("fit", "observed_variable"): "height"},
        [],
        "one_row.nc",
    ),
    ("fit", "fit", {("fit", "summary"): "s\0.json"}, [], "summary"),
    ("fit", "fit", {("fit", "colour"): 1}, [], "colour"),
    # ---- sweep
    *_each(
        "sweep",
        "sweep",
        ("sweep", "te"),
        ["x", [], ["x"], [float("nan")], ["-1 km"], ["5 kg"]],
        "te",
    ),
    *_each("sweep", "sweep", ("sweep", "youngs_modulus"), [["x"], [-1]], "youngs_modulus"),
    *_each("sweep", "sweep", ("sweep", "mantle_density"), [["1 km"], 5], "mantle_density"),
    ("sweep", "sweep", {("sweep",): DROP}, [], "[sweep]"),
    ("sweep", "sweep", {("sweep", "colour"): [1]}, [], "colour"),
    ("sweep", "sweep", {}, ["--scheduler", "banana"], "--scheduler"),
    # ---- scenario files themselves
    ("run", "missing", {}, [], "missing.toml"),
    ("run", "folder", {}, [], "folder"),
    ("run", "garbage", {}, [], "garbage.toml"),
    ("history", "missing", {}, [], "missing.toml"),
    ("basin", "garbage", {}, [], "garbage.toml"),
    ("fit", "folder", {}, [], "folder"),
    ("sweep", "missing", {}, [], "missing.toml"),
    # ---- demo
    ("demo", "", {}, ["--out", "text.nc"], "text.nc"),
    ("demo", "", {}, ["--out", "d\0"], "--out"),
    ("demo", "", {}, ["--out", "text.nc/sub"], "text.nc"),
    # ---- profile
    # ---- ensemble
    *_each("ensemble", "ensemble", ("ensemble", "members"), [0, 2.5, "x", -3], "members"),
    *_each("ensemble", "ensemble", ("ensemble", "seed"), ["x", 1.5], "seed"),
    *_each("ensemble", "ensemble", ("ensemble", "te"), ["x", [], {"distribution": "banana"}], "te"),
    ("ensemble", "ensemble", {("ensemble", "te", "std"): "-2 km"}, [], "te"),
    ("ensemble", "ensemble", {("ensemble", "te", "mean"): "10 kg"}, [], "te"),
    ("ensemble", "ensemble", {("ensemble", "banana"): [1, 2]}, [], "banana"),
    *_each("ensemble", "ensemble", ("ensemble", "thresholds"), ["x", ["1 kg"]], "thresholds"),
    ("ensemble", "ensemble", {("output", "file"): "load.nc"}, [], "load.nc"),
    ("ensemble", "ensemble", {("ensemble", "te"): ["10 km", "-1 km"]}, [], "te"),
    ("ensemble", "", {}, ["nope.toml"], "nope.toml"),
    # ---- temap
    *_each("temap", "temap", ("temap", "window"), [*NOT_NUMBERS, "-10 km", "1 kg"], "window"),
    *_each("temap", "temap", ("temap", "step"), ["x", "0 km", "1 s"], "step"),
    *_each("temap", "temap", ("temap", "quantity"), ["banana", 3], "quantity"),
    *_each("temap", "temap", ("temap", "method"), ["wavelet", 3], "method"),
    *_each("temap", "temap", ("temap", "jackknife"), ["yes", 1], "jackknife"),
    *_each("temap", "temap", ("temap", "prewhiten"), ["no", 0.5], "prewhiten"),
    (
        "temap",
        "temap",
        {("temap", "method"): "fan_wavelet", ("temap", "bandwidth"): 3.0},
        [],
        "bandwidth and tapers",
    ),
    *_each("temap", "temap", ("temap", "samples"), [2, 2.5, "x"], "samples"),
    *_each("temap", "temap", ("data", "topography_file"), ["nope.nc", "folder"], "topography_file"),
    ("temap", "temap", {("data", "anomaly_variable"): "missing"}, [], "no variable 'missing'"),
    ("temap", "temap", {("data", "anomaly_variable"): 3}, [], "anomaly_variable"),
    ("temap", "temap", {("data", "anomaly_file"): "other_grid.nc"}, [], "anomaly_file"),
    ("temap", "temap", {("temap", "te_min"): "90 km", ("temap", "te_max"): "20 km"}, [], "te_min"),
    ("temap", "temap", {("output", "file"): "load.nc"}, [], "load.nc"),
    ("temap", "temap", {("temap", "banana"): 1}, [], "banana"),
    ("profile", "", {}, ["nope.nc", *PROFILE[1:]], "nope.nc"),
    ("profile", "", {}, ["folder", *PROFILE[1:]], "folder"),
    ("profile", "", {}, ["text.nc", *PROFILE[1:]], "text.nc"),
    ("profile", "", {}, ["re\0sult.nc", *PROFILE[1:]], "RESULT"),
    ("profile", "", {}, [*PROFILE[:-1], "result.nc"], "result.nc"),
    ("profile", "", {}, [*PROFILE[:-1], "folder"], "folder"),
    ("profile", "", {}, [*PROFILE[:-1], "sub/"], "sub/"),
    ("profile", "", {}, [*PROFILE, "--samples", "1"], "samples"),
    ("profile", "", {}, [*PROFILE, "--samples", "-5"], "samples"),
    ("profile", "", {}, [*PROFILE, "--variables", "nope"], "nope"),
    ("profile", "", {}, [*PROFILE, "--at", "5"], "--at"),
    ("profile", "", {}, [*PROFILE, "--plot", "p\0.png"], "--plot"),
    ("profile", "", {}, [*PROFILE, "--plot", "p.csv"], "p.csv"),
    ("profile", "", {}, [*PROFILE[:5], "nan", "0", *PROFILE[7:]], "end"),
    ("profile", "", {}, [*PROFILE[:5], "inf", "0", *PROFILE[7:]], "end"),
    ("profile", "", {}, [*PROFILE[:5], "-3000", "0", *PROFILE[7:]], "same point"),
    ("profile", "", {}, [*PROFILE[:5], "1e9", "0", *PROFILE[7:]], "end"),
]


def _mutated(base: dict[str, Any], mutation: dict[tuple, Any]) -> dict[str, Any]:
    doc = copy.deepcopy(base)
    for path, value in mutation.items():
        parent: Any = doc
        for part in path[:-1]:
            parent = parent.setdefault(part, {}) if isinstance(parent, dict) else parent[part]
        if value is DROP:
            del parent[path[-1]]
        else:
            parent[path[-1]] = value
    return doc


def _write_grid(path: Path, name: str, grid: xr.DataArray, units: str = "m") -> None:
    ds = xr.Dataset({name: grid.assign_attrs(units=units)})
    for axis in ("x", "y"):
        ds[axis].attrs["units"] = "m"
    ds.to_netcdf(path)


def write_inputs(folder: Path) -> Path:
    """The input files every case may read, written into *folder*."""
    write_seamount_inputs(folder)  # load.nc (height), observed.nc (depth): 64 x 64, 6 km
    load = make_grid(64, 64, 6e3)
    _write_grid(folder / "te.nc", "te", load + 1e4)
    _write_grid(folder / "te_negative.nc", "te", load - 1e4)
    _write_grid(folder / "te_other.nc", "te", make_grid(20, 20, 6e3) + 1e4)
    basin = make_grid(24, 24, 5e3)
    r2 = (basin.x**2 + basin.y**2).values
    _write_grid(folder / "surface.nc", "elevation", basin + np.linspace(-400, 50, 24))
    _write_grid(folder / "s1.nc", "thickness", basin.copy(data=500 * np.exp(-r2 / 25e3**2)))
    _write_grid(folder / "water.nc", "depth", basin + 150.0)
    noise = np.random.default_rng(1).normal(size=load.shape)  # invented data, any numbers
    _write_grid(folder / "bouguer.nc", "bouguer", load.copy(data=20.0 * noise), units="mGal")
    _write_grid(folder / "other_grid.nc", "thickness", make_grid(10, 12, 3e3))
    irregular = make_grid(16, 16, 5e3)
    irregular = irregular.assign_coords(x=np.r_[irregular.x.values[8:], irregular.x.values[:8]])
    _write_grid(folder / "irregular.nc", "height", irregular)
    _write_grid(folder / "one_row.nc", "height", make_grid(1, 16, 5e3))
    _write_grid(folder / "bad_units.nc", "height", make_grid(16, 16, 5e3), units="furlongs")
    result = make_grid(8, 8, 1e3).assign_attrs(units="m")
    xr.Dataset({"deflection": result}).to_netcdf(folder / "result.nc")
    (folder / "text.nc").write_text("not a grid\n")
    (folder / "garbage.toml").write_text("[plate\nelastic_thickness = = 1\n")
    (folder / "folder").mkdir()
    (folder / "folder.toml").mkdir()
    return folder


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> Path:
    """The input files, written once."""
    return write_inputs(tmp_path_factory.mktemp("inputs"))


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


IDS = [f"{i:03d}-{row[0]}-{row[4]}" for i, row in enumerate(ROWS)]


@pytest.mark.parametrize("row", ROWS, ids=IDS)
def test_refused(row, inputs, tmp_path, capsys, monkeypatch):
    command, base, mutation, extra, culprit = row
    folder = tmp_path / "case"
    shutil.copytree(inputs, folder)
    monkeypatch.chdir(folder)
    args = [command, *extra]
    if base in BASES:
        (folder / "s.toml").write_text(toml_text(_mutated(BASES[base], mutation)))
        args = [command, "s.toml", *extra]
    elif base:
        args = [command, f"{base}.toml", *extra]
    before = _listing(folder)
    status = main([*args, "-q"])
    err = capsys.readouterr().err
    assert status == 2, err
    assert err.count("\n") == 1 and err.startswith("gridflex: error: "), err
    assert culprit in err, err
    assert _listing(folder) == before  # nothing written, nothing left behind


def test_the_table_covers_every_command():
    from gridflex.cli.main import COMMANDS

    assert len(ROWS) >= 150
    assert {row[0] for row in ROWS} == {module.NAME for module in COMMANDS}


@pytest.mark.parametrize("base", list(BASES))
def test_bases_are_valid(base, inputs, tmp_path, monkeypatch):
    # each base document runs (so every refusal comes from its mutation)
    command = {"file": "run", "backstrip": "basin"}.get(base, base)
    folder = tmp_path / "case"
    shutil.copytree(inputs, folder)
    monkeypatch.chdir(folder)
    (folder / "s.toml").write_text(toml_text(BASES[base]))
    assert main([command, "s.toml", "-q"]) == 0
