"""Per-stage GeoTIFFs and maps, pseudo-wells and the horizon section of ``gridflex basin``,
with real files written and read back."""

import csv

import numpy as np
import pytest
import rasterio
import xarray as xr
from numpy.testing import assert_allclose
from rasterio.crs import CRS

from gridflex.cli.main import main
from gridflex.io.rasters import write_geotiff
from gridflex.workflows.basin_outputs import well_table
from tests.helpers import BASIN_CELL, BASIN_SCENARIO, write_basin_inputs

N = 24
PNG = b"\x89PNG\r\n\x1a\n"
WELL_X, WELL_Y = 12 * BASIN_CELL, 11 * BASIN_CELL  # on a cell centre
OUTPUTS = f"""
[[wells]]
name = "W-1"
x = {WELL_X}
y = {WELL_Y}

[section]
start = [0.0, {WELL_Y}]
end = [{(N - 1) * BASIN_CELL}, {WELL_Y}]
ages = [3.0e6, 1.0e6]

[output]
file = "out/basin.nc"
geotiff = true
"""


def _table(path):
    with open(path) as handle:
        rows = list(csv.reader(handle))
    return rows[0], np.array(rows[1:], dtype=float)


@pytest.fixture(scope="module")
def basin_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("basin")
    write_basin_inputs(folder, N)
    (folder / "basin.toml").write_text(BASIN_SCENARIO + OUTPUTS)
    assert main(["basin", "-q", str(folder / "basin.toml")]) == 0
    with xr.open_dataset(folder / "out" / "basin.nc") as ds:
        return folder / "out", ds.load()


def test_every_planned_file_is_written(basin_run):
    out, _ = basin_run
    names = sorted(p.name for p in out.iterdir())
    tiffs = [f"basin_{g}_stage{k}.tif" for k in range(3) for g in _DEFAULT]
    expected = ["basin.nc", "basin_section.png", "basin_well_W-1.csv", *tiffs]
    assert names == sorted(expected)
    assert (out / "basin_section.png").read_bytes()[:8] == PNG


_DEFAULT = ("stage_thickness", "accommodation_created", "deflection_increment")


def test_stage_geotiffs_hold_the_stage_grids(basin_run):
    # a GeoTIFF read back by GDAL holds the NetCDF's grid of that stage (common practice)
    out, ds = basin_run
    for k in range(3):
        for name in _DEFAULT:
            with rasterio.open(out / f"basin_{name}_stage{k}.tif") as src:
                values = src.read(1)[::-1]  # north-up file, south-up grid
                assert src.descriptions[0] == name
            assert_allclose(values, ds[name][k].values, rtol=1e-12, atol=1e-12)


def test_pseudo_well_reads_the_grids_at_the_well(basin_run):
    out, ds = basin_run
    header, values = _table(out / "basin_well_W-1.csv")
    assert header[:3] == ["age [years before present]", "total_subsidence [m]"] + [
        "tectonic_subsidence [m]"
    ]
    assert "thermal_subsidence [m]" not in header  # no stretching in this model
    at = ds.sel(x=WELL_X, y=WELL_Y)
    assert_allclose(values[:, 0], ds["age"].values)
    assert_allclose(values[:, 1], at["basement_depth"].values, rtol=1e-9)
    for k in range(3):
        column = values[:, header.index(f"horizon_{k}_depth [m]")]
        assert_allclose(column[k:], at["horizon_depth"][k:, k].values, rtol=1e-9)
        assert np.isnan(column[:k]).all()


def test_tectonic_subsidence_of_an_airy_basin_is_its_first_water_depth(tmp_path):
    # te = 0, sediment filling a basin under water: each column is in local balance, so
    # backstripping it (Steckler & Watts 1978, PHYSICS.md 9.2) returns the water depth
    # before the first stage at every stage; also with compaction (the mean density of
    # the compacted column). 1e-5 m: infill tolerance 1e-7 m.
    write_basin_inputs(tmp_path, N)
    deep = xr.open_dataset(tmp_path / "surface.nc").load()
    deep["elevation"] = deep["elevation"] * 0.0 - 3000.0
    deep.to_netcdf(tmp_path / "deep.nc")
    (tmp_path / "airy.toml").write_text(
        f"""
[plate]
elastic_thickness = 0
[solver]
edges = "periodic"
[basin]
surface_file = "deep.nc"
tolerance = "1e-7 m"
[[stages]]
file = "s1.nc"
age = 2e6
[[stages]]
file = "s2.nc"
age = 1e6
lithology = "sandstone"
[[wells]]
name = "centre"
x = {WELL_X}
y = {WELL_Y}
[output]
file = "airy.nc"
"""
    )
    assert main(["basin", "-q", str(tmp_path / "airy.toml")]) == 0
    header, values = _table(tmp_path / "airy_well_centre.csv")
    assert_allclose(values[:, header.index("tectonic_subsidence [m]")], 3000.0, atol=1e-5)
    total = values[:, header.index("total_subsidence [m]")]
    assert np.all(total > 3100.0)  # the sediment load took the basement down


def test_well_table_writes_thermal_subsidence_only_when_the_model_has_it(basin_run):
    # the hook for stretching models (common practice): the column follows the grid
    _, ds = basin_run
    assert "thermal_subsidence" not in well_table(ds, WELL_X, WELL_Y)
    thermal = ds.assign(thermal_subsidence=ds["deflection"] * 0.0 + 42.0)
    table = well_table(thermal, WELL_X, WELL_Y)
    assert_allclose(table["thermal_subsidence"].values, 42.0)


def _refused(tmp_path, capsys, outputs, message, scenario=BASIN_SCENARIO):
    write_basin_inputs(tmp_path, N)
    (tmp_path / "bad.toml").write_text(scenario + outputs)
    assert main(["basin", str(tmp_path / "bad.toml")]) == 2
    err = capsys.readouterr().err
    assert message in err, err
    assert not list(tmp_path.glob("bad*.nc")) and not list(tmp_path.glob("*.tif"))


def test_a_well_outside_the_grid_is_refused_by_name(tmp_path, capsys):
    outputs = '[[wells]]\nname = "far"\nx = 1e7\ny = 0\n[output]\nfile = "bad.nc"\ngeotiff = true\n'
    _refused(tmp_path, capsys, outputs, "[[wells]] #1: well 'far' at (1e+07, 0) lies outside")


@pytest.mark.parametrize(
    ("outputs", "message"),
    [
        ("[section]\nstart = [0, 0]\nend = [5e4, 0]\nages = [2.5e6]\n", "2500000.0 is not the age"),
        ('[output]\nfile = "bad.nc"\nmaps = ["load"]\n', "no stage grid 'load'"),
        ('[[wells]]\nname = "a/b"\nx = 0\ny = 0\n', "'a/b' must be letters"),
        ('[[wells]]\nname = "a"\nx = 0\ny = 0\n[[wells]]\nname = "a"\nx = 1\ny = 1\n', "names two"),
        ("[section]\nstart = [0, 0]\nend = [5e9, 0]\nages = [1e6]\n", "profile end (5e+09, 0)"),
    ],
)
def test_bad_basin_outputs_are_refused_before_any_file(tmp_path, capsys, outputs, message):
    if "[output]" not in outputs:
        outputs += '[output]\nfile = "bad.nc"\n'
    _refused(tmp_path, capsys, outputs, message)


def test_backstrip_refuses_stage_outputs(tmp_path, capsys):
    scenario = '[plate]\nelastic_thickness = 0\n[backstrip]\nsediment_file = "s1.nc"\n'
    scenario += 'water_file = "s2.nc"\n'
    outputs = '[output]\nfile = "bad.nc"\ngeotiff = true\n'
    _refused(tmp_path, capsys, outputs, "[output] geotiff needs staged loading", scenario)


def test_an_existing_stage_geotiff_stops_the_run_before_work(tmp_path, capsys):
    # all or nothing: a planned GeoTIFF that exists (no --overwrite) is refused before
    # the solve, and the NetCDF is not written either
    surface = write_basin_inputs(tmp_path, N)
    write_geotiff(surface, tmp_path / "bad_accommodation_created_stage1.tif", "EPSG:32633")
    outputs = '[output]\nfile = "bad.nc"\ngeotiff = true\n'
    (tmp_path / "bad.toml").write_text(BASIN_SCENARIO + outputs)
    assert main(["basin", str(tmp_path / "bad.toml")]) == 2
    assert "bad_accommodation_created_stage1.tif" in capsys.readouterr().err
    assert not (tmp_path / "bad.nc").exists()
    assert sorted(p.name for p in tmp_path.glob("*.tif")) == [
        "bad_accommodation_created_stage1.tif"
    ]


def test_geotiffs_keep_the_crs_of_the_inputs_and_maps_are_drawn(tmp_path):
    write_basin_inputs(tmp_path, N)
    crs = "EPSG:32633"
    for name, variable in (("surface", "elevation"), ("s1", "thickness")):
        with xr.open_dataset(tmp_path / f"{name}.nc") as ds:
            grid = ds[variable].load()
        write_geotiff(grid, tmp_path / f"{name}.tif", crs)
    (tmp_path / "crs.toml").write_text(
        '[plate]\nelastic_thickness = "8 km"\n[basin]\nsurface_file = "surface.tif"\n'
        '[[stages]]\nfile = "s1.tif"\nage = 1e6\n'
        '[output]\nfile = "crs.nc"\ngeotiff = ["deflection"]\nmaps = ["accommodation"]\n'
    )
    assert main(["basin", "-q", str(tmp_path / "crs.toml")]) == 0
    with rasterio.open(tmp_path / "crs_deflection_stage0.tif") as src:
        assert src.crs == CRS.from_string(crs)
        assert float(src.read(1).max()) > 1.0
    assert (tmp_path / "crs_accommodation_stage0.png").read_bytes()[:8] == PNG
