"""``gridflex basin`` with a ``[stretching]`` table, through real NetCDF files."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate
from gridflex.basin import Stage, Stretching, StretchingModel, stage_loading
from gridflex.cli.main import main
from gridflex.errors import InputError
from gridflex.workflows.basin import run_basin
from gridflex.workflows.basin_tables import load_basin_scenario

N, DX = 32, 5e3


def _grid(values):
    coord = np.arange(N) * DX
    return xr.DataArray(values, dims=("y", "x"), coords={"y": coord, "x": coord})


def _beta():
    coord = np.arange(N) * DX
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = ((x - coord.mean()) ** 2 + (y - coord.mean()) ** 2) / (30e3) ** 2
    return _grid(1.0 + 1.2 * np.exp(-r2))


SCENARIO = """
[plate]
elastic_thickness = "10 km"

[solver]
edges = "periodic"

[basin]
surface_file = "surface.nc"
tolerance = "1e-6 m"

[stretching]
{beta}
rift_age = "40000 kyr"
crust_thickness = "32 km"
isostasy = "column"

[[stages]]
file = "s1.nc"
age = 30.0e6

[[stages]]
file = "s2.nc"
age = 10.0e6
lithology = "sandstone"

[output]
file = "rift_out.nc"
"""


@pytest.fixture
def files(tmp_path):
    _grid(np.full((N, N), -300.0)).to_dataset(name="elevation").to_netcdf(tmp_path / "surface.nc")
    _beta().to_dataset(name="beta").to_netcdf(tmp_path / "beta.nc")
    for name, h in (("s1.nc", 400.0), ("s2.nc", 200.0)):
        _grid(np.full((N, N), h)).to_dataset(name="thickness").to_netcdf(tmp_path / name)
    return tmp_path


def test_basin_command_with_a_stretching_grid_matches_the_library(files, capsys):
    # the command reproduces the library call on the same grids (common practice)
    text = SCENARIO.format(
        beta='stretching_factor_file = "beta.nc"\nstretching_factor_variable = "beta"'
    )
    (files / "rift.toml").write_text(text)
    assert main(["basin", str(files / "rift.toml")]) == 0
    assert "wrote" in capsys.readouterr().out
    with xr.open_dataset(files / "rift_out.nc") as ds:
        out = ds.load()
    rift = Stretching(_beta(), 40e6, StretchingModel(crust_thickness=32e3, isostasy="column"))
    stages = [
        Stage(_grid(np.full((N, N), 400.0)), 30e6),
        Stage(_grid(np.full((N, N), 200.0)), 10e6, "sandstone"),
    ]
    expected = stage_loading(
        stages,
        _grid(np.full((N, N), -300.0)),
        Plate(te=10e3),
        edges="periodic",
        tolerance=1e-6,
        stretching=rift,
    )
    assert_allclose(out["deflection"], expected["deflection"], atol=1e-9)
    assert_allclose(out["tectonic_subsidence"], expected["tectonic_subsidence"], atol=1e-9)
    assert float(out["tectonic_subsidence"].max()) > 1000.0
    assert out.attrs["stretching_isostasy"] == "column"
    assert out.attrs["stretching_rift_age"] == 40e6


def test_stretching_table_checks(files):
    path = files / "rift.toml"
    path.write_text(SCENARIO.format(beta="stretching_factor = 1.5"))
    scenario = load_basin_scenario(path)
    assert scenario.tables["stretching"]["rift_age"] == 40e6
    path.write_text(SCENARIO.format(beta=""))
    with pytest.raises(InputError, match=r"\[stretching\].*either stretching_factor or"):
        load_basin_scenario(path)
    path.write_text(SCENARIO.format(beta="stretching_factor = 0.8"))
    with pytest.raises(InputError, match="stretching_factor"):
        load_basin_scenario(path)
    path.write_text(SCENARIO.format(beta='stretching_factor_file = "surface.nc"'))
    # the surface (-300 m) read as beta: refused, naming the key, the file and the range
    with pytest.raises(InputError, match=r"stretching_factor_file.*surface.nc.*stretching factor"):
        run_basin(load_basin_scenario(path))
