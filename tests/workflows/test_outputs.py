"""The output plan: every output path checked before any work; nothing written if refused."""

from __future__ import annotations

from pathlib import Path

import pytest

from gridflex.errors import InputError
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan
from gridflex.workflows.run import run_scenario

SCENARIO = """
[plate]
elastic_thickness = "10 km"

[grid]
rows = 32
columns = 32
spacing = "2 km"

[[loads]]
synthetic = "disc"
radius = "10 km"
height = "1 km"
density = 2800

[output]
file = "out/result.nc"
{extra}
"""


def _scenario(tmp_path: Path, extra: str = ""):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO.format(extra=extra))
    return load_scenario(path)


def _files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if p.name != "s.toml")


def test_two_outputs_on_one_path_are_refused_before_any_work(tmp_path):
    scenario = _scenario(tmp_path, 'map = "out/result.nc"')
    with pytest.raises(InputError, match=r"\[output\] map: .*also the path of output 'file'"):
        run_scenario(scenario)
    assert _files(tmp_path) == []  # not even the output folder


def test_output_over_an_input_is_refused(tmp_path):
    scenario = _scenario(tmp_path)
    plan = OutputPlan(scenario)
    with pytest.raises(InputError, match="would overwrite an input file"):
        plan.add({"file": tmp_path / "s.toml"})
    assert plan.get("file") is None


def test_existing_output_without_overwrite_is_refused_and_kept(tmp_path):
    (tmp_path / "out").mkdir()
    existing = tmp_path / "out" / "result.nc"
    existing.write_text("an earlier result")
    scenario = _scenario(tmp_path, 'map = "out/map.png"')
    with pytest.raises(InputError, match="output exists"):
        run_scenario(scenario)
    assert existing.read_text() == "an earlier result"
    assert _files(tmp_path) == [tmp_path / "out", existing]  # the map was not drawn either


def test_later_paths_are_checked_before_earlier_folders_are_made(tmp_path):
    scenario = _scenario(tmp_path)
    plan = OutputPlan(scenario)
    with pytest.raises(InputError, match="would overwrite an input file"):
        plan.add({"file": tmp_path / "new" / "a.nc", "map": tmp_path / "s.toml"})
    assert not (tmp_path / "new").exists()


def test_plan_creates_folders_and_the_run_writes_what_was_planned(tmp_path):
    scenario = _scenario(tmp_path, 'map = "maps/deflection.png"')
    outcome = run_scenario(scenario)
    assert isinstance(outcome, RunOutcome)
    assert outcome.written == [tmp_path / "out/result.nc", tmp_path / "maps/deflection.png"]
    assert all(p.is_file() for p in outcome.written)
    report = outcome.report().splitlines()
    assert report[-2:] == [f"wrote {p}" for p in outcome.written]
    assert "deflection" in outcome.text
    again = run_scenario(scenario, overwrite=True)
    assert again.written == outcome.written
