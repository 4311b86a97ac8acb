"""Scenario files: parsing, defaults, units and the messages for bad input."""

from __future__ import annotations

from pathlib import Path

import pytest

from gridflex import InputError
from gridflex.scenario.tables import SCHEMA, load_scenario
from tests.helpers import REPO_ROOT

GOOD = """
[plate]
elastic_thickness = "25 km"
youngs_modulus = "70 GPa"

[[loads]]
file = "load.nc"
variable = "height"
density = "2.8 g/cm^3"

[output]
file = "out.nc"
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "scenario.toml"
    path.write_text(text)
    return path


def test_good_scenario_with_units_and_defaults(tmp_path):
    scenario = load_scenario(_write(tmp_path, GOOD))
    plate = scenario.table("plate")
    assert plate["elastic_thickness"] == 25e3
    assert plate["youngs_modulus"] == 70e9
    assert plate["mantle_density"] == SCHEMA["plate"]["mantle_density"].default
    layer = scenario.table("loads")[0]
    assert layer["density"] == pytest.approx(2800.0)
    assert layer["file"] == tmp_path / "load.nc"  # relative to the scenario's folder
    assert scenario.table("solver")["method"] == "auto"
    assert scenario.table("output")["file"] == tmp_path / "out.nc"
    assert tmp_path / "load.nc" in scenario.input_files


@pytest.mark.parametrize(
    ("edit", "match"),
    [
        (
            lambda t: t.replace('"25 km"', '"25 kg"'),
            r"\[plate\] elastic_thickness: unit 'kg' is not a length",
        ),
        (
            lambda t: t.replace("[plate]", "[plate]\nthickness = 3"),
            r"\[plate\]: unknown key 'thickness'; valid keys are .*elastic_thickness",
        ),
        (lambda t: t + "\n[extras]\na = 1\n", r"unknown table \[extras\]"),
        (lambda t: t.replace("[output]\nfile", "[output]\nname"), r"\[output\]: unknown key"),
        (
            lambda t: t.replace('elastic_thickness = "25 km"\n', ""),
            r"\[plate\] elastic_thickness: required key is missing",
        ),
        (lambda t: t.replace('density = "2.8 g/cm^3"', ""), r"#1 density: required"),
        (lambda t: t.replace('"25 km"', '"-3 km"'), r"elastic_thickness must be >= 0, got '-3 km'"),
        (
            lambda t: t + "\n[solver]\nmethod = 'fastest'\n",
            r"\[solver\] method must be one of 'auto', .*; got 'fastest'",
        ),
        (lambda t: t.replace("[plate]", "[plate\n"), "malformed TOML"),
        (
            lambda t: t.replace("[plate]", "[plate]\npoisson_ratio = nan"),
            r"\[plate\] poisson_ratio must be a finite number, got nan",
        ),
        (
            lambda t: t + "\n[solver]\nmax_iterations = 2.5\n",
            r"\[solver\] max_iterations must be a whole number >= 1, got 2.5",
        ),
        (
            lambda t: t.replace("[output]\n", '[output]\ngeotiff = "yes"\n'),
            r"\[output\] geotiff must be true or false, got 'yes'",
        ),
        (
            lambda t: t.replace('variable = "height"', "variable = 3"),
            r"#1 variable must be a non-empty string, got 3",
        ),
        (
            lambda t: t.replace('file = "load.nc"', 'synthetic = "disc"'),
            r"either 'file' \(with 'variable'\) or 'synthetic'|needs a \[grid\] table",
        ),
    ],
)
def test_bad_scenarios_name_file_table_and_key(tmp_path, edit, match):
    path = _write(tmp_path, edit(GOOD))
    with pytest.raises(InputError, match=match) as info:
        load_scenario(path)
    assert str(path.name) in str(info.value)


def test_missing_scenario(tmp_path):
    with pytest.raises(InputError, match="scenario file not found"):
        load_scenario(tmp_path / "none.toml")


def test_shipped_demo_scenario_is_the_configs_one():
    repo = REPO_ROOT
    from gridflex.workflows.demo import demo_scenario_text

    assert (repo / "configs" / "demo.toml").read_text() == demo_scenario_text()
    load_scenario(repo / "configs" / "demo.toml")
