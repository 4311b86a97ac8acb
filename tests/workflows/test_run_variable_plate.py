"""Scenarios with a Te grid, a margin profile and breaks, run end to end."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import InputError
from gridflex.errors import CompensationOutsideWarning
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import elastic_thickness_from_scenario, run_scenario

BASE = """
[grid]
columns = 64
rows = 48
spacing = "4 km"

[[loads]]
synthetic = "disc"
height = "1500 m"
radius = "30 km"
density = 2800

[output]
file = "out.nc"
"""

MARGIN = """
[plate]
youngs_modulus = "100 GPa"

[margin]
te_left = "50 km"
te_right = "5 km"
line = [[20000.0, -100000.0], [20000.0, 100000.0]]
width = "40 km"

[[breaks]]
line = [[-60000.0, -80000.0], [-60000.0, 40000.0]]

[solver]
tolerance = 1e-9
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "scenario.toml"
    path.write_text(text)
    return path


def test_margin_with_break_runs_by_finite_differences(tmp_path):
    scenario = load_scenario(_write(tmp_path, MARGIN + BASE))
    # te up to 50 km on this small grid: much of the compensation lies beyond it
    with pytest.warns(CompensationOutsideWarning, match="compensation"):
        outcome = run_scenario(scenario)
    with xr.open_dataset(tmp_path / "out.nc") as ds:
        assert ds.attrs["solver"] == "finite-difference"
        assert ds.attrs["residual"] <= 1e-9
        assert ds.attrs["iterations"] >= 1
        w = ds["deflection"].values
    assert np.isfinite(w).all() and w.max() > 0
    assert outcome.result.attrs["plate_te_min"] == 0.0  # the break
    assert outcome.result.attrs["plate_te_max"] == pytest.approx(50e3)


def test_te_grid_file_and_mask_file(tmp_path):
    # a Te grid read from NetCDF gives the same Te as the margin it was made from
    margin_scenario = load_scenario(_write(tmp_path, MARGIN + BASE))
    like = xr.DataArray(
        np.zeros((48, 64)),
        dims=("y", "x"),
        coords={"y": (np.arange(48) - 24) * 4e3, "x": (np.arange(64) - 32) * 4e3},
    )
    te = elastic_thickness_from_scenario(margin_scenario, like)
    ds = xr.Dataset({"te": te.assign_attrs(units="m"), "mask": (te == 0).astype(np.int8)})
    ds["x"].attrs["units"] = "m"
    ds["y"].attrs["units"] = "m"
    ds.to_netcdf(tmp_path / "te.nc")
    text = BASE.replace(
        "[grid]",
        """[plate]
elastic_thickness_file = "te.nc"
elastic_thickness_variable = "te"

[[breaks]]
file = "te.nc"
variable = "mask"

[grid]""",
    )
    scenario = load_scenario(_write(tmp_path, text))
    assert tmp_path / "te.nc" in scenario.input_files
    again = elastic_thickness_from_scenario(scenario, like)
    assert_allclose(again.values, te.values, rtol=1e-12)  # round trip through the file


@pytest.mark.parametrize(
    ("plate", "match"),
    [
        (
            '[plate]\nelastic_thickness = "10 km"\nelastic_thickness_file = "te.nc"\n'
            'elastic_thickness_variable = "te"\n',
            "give only one of",
        ),
        ('[plate]\nelastic_thickness_file = "te.nc"\n', "go together"),
        (
            '[plate]\nelastic_thickness = "10 km"\n[[breaks]]\nwidth = "2 km"\n',
            r"\[\[breaks\]\] #1: give either 'line' or 'file'",
        ),
        (
            '[plate]\nelastic_thickness = "10 km"\n[solver]\nedges = "hinged"\n',
            r"\[solver\] edges must be one of .*; got 'hinged'",
        ),
    ],
)
def test_bad_structure_keys(tmp_path, plate, match):
    with pytest.raises(InputError, match=match):
        load_scenario(_write(tmp_path, plate + BASE))


def test_bad_break_line_names_the_table(tmp_path):
    text = '[plate]\nelastic_thickness = "10 km"\n[[breaks]]\nline = [[0.0, 1.0]]\n' + BASE
    with pytest.raises(InputError, match=r"\[\[breaks\]\] #1: break line 1 must be a list"):
        run_scenario(load_scenario(_write(tmp_path, text)))


INFILL_MARGIN = """
[plate]
youngs_modulus = "70 GPa"

[margin]
te_left = "25 km"
te_right = "6 km"
line = [[30000.0, -200000.0], [30000.0, 200000.0]]
width = "30 km"

[[breaks]]
file = "hinge.nc"
variable = "mask"

[[loads]]
name = "island"
kind = "elevation"
file = "bathymetry.nc"
variable = "elevation"
density = 2800
regional_elevation = "-4 km"

[infill]
sediment = "to_level"
sediment_level = "-3.8 km"

[output]
file = "out.nc"
"""


def test_infill_with_a_margin_and_a_break_through_the_command(tmp_path, capsys):
    # [infill] with a te grid ([margin] and a [[breaks]] mask file) runs by finite
    # differences and must give what the library gives for the same inputs (common
    # practice: the scenario layer only wires the calls); the fill keeps the force balance
    # of the whole solve grid (PHYSICS.md 3.1: bending carries no net force).
    from gridflex import Infill, Plate, load_from_elevation, solve_with_infill
    from gridflex.cli.main import main
    from gridflex.te_maps import margin_te
    from tests.helpers import make_grid

    grid = make_grid(56, 64, 4e3)
    r2 = (grid.y**2 + grid.x**2).values
    elevation = grid.copy(data=-4000.0 + 3800.0 * np.exp(-r2 / (2 * 12e3**2)))
    xr.Dataset({"elevation": elevation.assign_attrs(units="m")}).to_netcdf(
        tmp_path / "bathymetry.nc"
    )
    x, y = np.meshgrid(grid.x.values, grid.y.values)
    hinge = (np.abs(x + 60e3) < 1e3) & (np.abs(y) < 80e3)  # one column of cells
    xr.Dataset({"mask": grid.copy(data=hinge.astype(np.int8))}).to_netcdf(tmp_path / "hinge.nc")
    path = _write(tmp_path, INFILL_MARGIN)
    assert main(["run", str(path)]) == 0
    assert "wrote" in capsys.readouterr().out
    with xr.open_dataset(tmp_path / "out.nc") as ds:
        out = ds.load()
    assert out.attrs["solver"] == "finite-difference with self-consistent infill"
    assert out.attrs["inner_iterations"] >= out.attrs["iterations"] >= 2
    assert out.attrs["force_balance_residual"] < 1e-6
    assert out.attrs["plate_te_min"] == 0.0
    te = margin_te(elevation, 25e3, 6e3, [[30e3, -200e3], [30e3, 200e3]], 30e3)
    te = te.where(~hinge, 0.0)
    expected = solve_with_infill(
        load_from_elevation(elevation, 2800.0, -4000.0),
        Plate(te=te, youngs_modulus=70e9),
        infill=Infill(sediment="to_level", sediment_level=-3800.0),
    )
    peak = float(expected["deflection"].max())
    assert_allclose(out["deflection"].values, expected["deflection"].values, atol=1e-6 * peak)
    assert float(out["fill_sediment"].max()) > 10.0
    assert_allclose(out["fill_sediment"].values, expected["fill_sediment"].values, atol=1e-4)
