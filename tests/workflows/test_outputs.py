"""The output plan: every output path checked before any work; nothing written if refused."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
import xarray as xr

from gridflex.errors import CompensationOutsideWarning, InputError
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
    with pytest.warns(CompensationOutsideWarning, match="compensation"):  # a small grid
        outcome = run_scenario(scenario)
    assert isinstance(outcome, RunOutcome)
    assert outcome.written == [tmp_path / "out/result.nc", tmp_path / "maps/deflection.png"]
    assert all(p.is_file() for p in outcome.written)
    report = outcome.report().splitlines()
    assert report[-2:] == [f"wrote {p}" for p in outcome.written]
    assert "deflection" in outcome.text
    with pytest.warns(CompensationOutsideWarning):
        again = run_scenario(scenario, overwrite=True)
    assert again.written == outcome.written


def _gaussian_scenario(tmp_path, rows, output_extra):
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / "s.toml").write_text(
        f"""
[plate]
elastic_thickness = "20 km"

[grid]
rows = {rows}
columns = {rows}
spacing = "4 km"

[[loads]]
synthetic = "gaussian"
radius = "15 km"
height = "2 km"
density = 2800
displaced_density = 1030

[output]
file = "out/result.nc"
{output_extra}
"""
    )
    return load_scenario(tmp_path / "s.toml")


def test_compensation_outside_the_grid_is_what_a_larger_grid_sees_beyond_it(tmp_path):
    # on an unbounded plate the restoring force balances the load (force balance,
    # Turcotte & Schubert 2002, Geodynamics, section 3-9); the share missing from a small
    # grid must equal what a grid 4 times wider finds beyond the small grid's extent
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CompensationOutsideWarning)
        small = run_scenario(_gaussian_scenario(tmp_path / "a", 40, ""))
        large = run_scenario(_gaussian_scenario(tmp_path / "b", 160, ""))
    w = large.result["deflection"]
    q = float(large.result["load"].sum())
    half = 80e3  # the small grid spans 40 cells of 4 km
    inside = w.where((abs(w["x"]) < half) & (abs(w["y"]) < half)).sum()
    expected = 1.0 - (3300.0 - 1030.0) * 9.81 * float(inside) / q
    assert small.summary["compensation_outside"] == pytest.approx(expected, abs=2e-3)
    assert small.summary["compensation_outside"] > 0.05
    assert large.summary["compensation_outside"] < 0.01


def test_output_keys_choose_the_grid_the_precision_and_the_geotiffs(tmp_path):
    scenario = _gaussian_scenario(
        tmp_path, 160, 'geotiff = ["deflection"]\ndtype = "float32"\ngrid = "working"'
    )
    outcome = run_scenario(scenario)
    out = tmp_path / "out"
    assert sorted(p.name for p in out.iterdir()) == ["result.nc", "result_deflection.tif"]
    with xr.open_dataset(out / "result.nc") as ds:
        assert ds["deflection"].dtype == np.float32
        assert ds["deflection"].shape == (160, 160)
    with rasterio.open(out / "result_deflection.tif") as src:
        assert src.dtypes[0] == "float32"
    assert outcome.result["deflection"].dtype == np.float64  # in memory: full precision
    bad = _gaussian_scenario(tmp_path / "c", 160, 'geotiff = ["no_such_grid"]')
    with pytest.raises(InputError, match=r"\[output\] geotiff: no output grid 'no_such_grid'"):
        run_scenario(bad)


def test_response_extent_writes_the_whole_moat_and_bulge(tmp_path):
    # a grid cut close to the load misses 20 % of its compensation; extent = "response"
    # widens the solve and keeps the area where |w| exceeds 0.1 % of the peak, so (force
    # balance, Turcotte & Schubert 2002, section 3-9) almost all of it is written
    scenario = _gaussian_scenario(tmp_path, 40, 'extent = "response"')
    outcome = run_scenario(scenario)
    assert outcome.summary["compensation_outside"] < 0.01  # computed: 0.55 %, the far tails
    with xr.open_dataset(tmp_path / "out" / "result.nc") as ds:
        assert ds.sizes["x"] > 40 and ds.sizes["y"] > 40
        w = ds["deflection"].values
    assert np.abs(w[[0, -1], :]).max() <= 2e-3 * w.max()  # the edges are beyond the response
    with pytest.raises(InputError, match=r"\[output\] extent: .*working grid"):
        _gaussian_scenario(tmp_path / "c", 40, 'extent = "response"\ngrid = "input"')
