"""The output plan of a run: every path, derived names included, and every check that
can fail, before the solve; a run that fails leaves nothing (real runs, real files)."""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import pytest
import xarray as xr

from gridflex.errors import CompensationOutsideWarning, InputError
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import run_scenario

SCENARIO = """
[plate]
elastic_thickness = "10 km"

[grid]
rows = 32
columns = 32
spacing = "2 km"
{grid}

[[loads]]
synthetic = "disc"
radius = "10 km"
height = "1 km"
density = 2800

[output]
{output}
"""


def _scenario(tmp_path: Path, output: str, grid: str = ""):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO.format(output=output, grid=grid))
    return load_scenario(path)


def _files(folder: Path) -> list[str]:
    """Every path under *folder* (hidden ones included) but the scenario, relative."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*") if p.name != "s.toml")


def _refused_before_the_solve(scenario, caplog, match: str) -> None:
    """*scenario* is refused with *match*, and the solve never started."""
    with caplog.at_level(logging.INFO), pytest.raises(InputError, match=match):
        run_scenario(scenario)
    assert "solving" not in caplog.text


@pytest.mark.parametrize(
    ("output", "match"),
    [
        (
            'file = "out/r.nc"\ngeotiff = ["deflection"]\nmap = "out/r_deflection.tif"',
            r"\[output\] geotiff: .*r_deflection.tif' is also the path of output 'map'",
        ),
        (
            'file = "out/r.nc"\ngeotiff = true\nmap = "out/r_load.tif"',
            r"\[output\] map: .*r_load.tif' may be the GeoTIFF of a result grid",
        ),
        (
            'file = "out/r.nc"\ngeotiff = true\noutlines = "out/r_x.TIF"',
            r"\[output\] outlines: .*r_x.TIF' may be the GeoTIFF",
        ),
    ],
)
def test_a_map_on_the_name_of_a_geotiff_is_refused_before_any_work(tmp_path, caplog, output, match):
    scenario = _scenario(tmp_path, output)
    _refused_before_the_solve(scenario, caplog, match)
    assert _files(tmp_path) == []


def test_a_profile_off_the_grid_is_refused_before_the_solve(tmp_path, caplog):
    scenario = _scenario(
        tmp_path,
        'file = "out/r.nc"\nprofile_csv = "out/p.csv"\n'
        "profile_start = [0, 0]\nprofile_end = [90e3, 0]",  # the grid reaches 31 km
    )
    _refused_before_the_solve(scenario, caplog, r"\[output\] profile_start: profile end")
    assert _files(tmp_path) == []


def test_outlines_without_a_crs_are_refused_before_the_solve(tmp_path, caplog):
    scenario = _scenario(tmp_path, 'file = "out/r.nc"\noutlines = "out/o.geojson"')
    _refused_before_the_solve(scenario, caplog, r"\[output\] outlines: .*no coordinate reference")
    assert _files(tmp_path) == []
    with_crs = _scenario(
        tmp_path, 'file = "out/r.nc"\noutlines = "out/o.geojson"', 'crs = "EPSG:3413"'
    )
    with pytest.warns(CompensationOutsideWarning):
        run_scenario(with_crs)
    assert _files(tmp_path) == ["out", "out/o.geojson", "out/r.nc"]


@pytest.mark.parametrize("value", ["out/", "out"])
def test_file_naming_a_folder_is_refused_naming_the_key(tmp_path, value):
    (tmp_path / "out").mkdir()
    with pytest.raises(InputError, match=r"\[output\] file.*(folder|directory)"):
        run_scenario(_scenario(tmp_path, f'file = "{value}"'))
    assert _files(tmp_path) == ["out"]


def test_a_failed_overwrite_run_keeps_every_earlier_file(tmp_path):
    output = 'file = "out/r.nc"\ngeotiff = ["deflection"]\nmap = "out/map.png"'
    with pytest.warns(CompensationOutsideWarning):
        run_scenario(_scenario(tmp_path, output))
    before = {name: (tmp_path / name).read_bytes() for name in _files(tmp_path) if "." in name}
    # the rerun fails after the solve, when it asks for a grid the result does not have
    rerun = _scenario(tmp_path, output.replace('["deflection"]', '["deflection", "nope"]'))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CompensationOutsideWarning)
        with pytest.raises(InputError, match="no output grid 'nope'"):
            run_scenario(rerun, overwrite=True)
    after = {name: (tmp_path / name).read_bytes() for name in _files(tmp_path) if "." in name}
    assert after == before
    assert _files(tmp_path) == ["out", "out/map.png", "out/r.nc", "out/r_deflection.tif"]
    with xr.open_dataset(tmp_path / "out" / "r.nc") as ds:
        assert "nope" not in ds.attrs["scenario"]
