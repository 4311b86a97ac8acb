"""Scenario layers onto the working grid: the automatic spacing of fine rasters."""

from __future__ import annotations

import numpy as np
import xarray as xr
from affine import Affine
from numpy.testing import assert_allclose

from gridflex.cli.main import main
from gridflex.workflows.layers import automatic_spacing
from tests.helpers import run_thickness_raster, write_float32_geotiff

N, CELL = 320, 200.0  # an invented 64 km square raster of 200 m cells


def test_automatic_spacing_only_for_inputs_much_finer_than_the_plate_needs():
    assert automatic_spacing(30.0, 60e3) == 60e3 / 16
    assert automatic_spacing(2000.0, 60e3) is None  # only 1.9 times finer: keep it
    assert automatic_spacing(30.0, 0.0) is None  # no plate stiffness: local, keep it
    assert automatic_spacing(30.0, None) is None


def _write(path, height):
    write_float32_geotiff(path, height, Affine(CELL, 0.0, 500e3, 0.0, -CELL, 4.0e6))


def _run(tmp_path, name, working):
    return run_thickness_raster(tmp_path, name, "fine.tif", "5 km", working)


def test_a_fine_raster_is_solved_on_cells_of_a_sixteenth_flexural_parameter(tmp_path):
    # reference: the raster solved on its own 200 m cells; the automatic working grid
    # (flexural parameter ~19 km / 16 = 1.2 km) stays within 0.5 % of the peak (computed:
    # 0.2 % for te 5 km, 0.4 % for te 20 km on a 600 x 600 raster), and says how it chose
    rng = np.random.default_rng(3)
    y, x = np.mgrid[0:N, 0:N] * CELL
    height = 2000.0 * np.exp(-((x - 32e3) ** 2 + (y - 32e3) ** 2) / (2 * 6e3**2))
    _write(tmp_path / "fine.tif", height * rng.uniform(0.5, 1.5, height.shape))
    direct = _run(tmp_path, "direct", '[working_grid]\nspacing = "200 m"\n')
    auto = _run(tmp_path, "auto", "")
    assert auto.attrs["working_grid_spacing_rule"] == "smallest flexural parameter / 16"
    assert 1000.0 < float(auto.attrs["working_grid_spacing"]) < 1400.0
    assert direct.attrs["working_grid_resampled"] == 0
    w, w0 = auto["deflection"].values, direct["deflection"].values
    assert np.abs(w - w0).max() <= 0.005 * np.abs(w0).max()


def test_elevation_cells_without_data_carry_no_load(tmp_path, capsys):
    # issue 14: nodata cells of an elevation model used to get the layer's median as rock
    # (a load where nothing is known); now they get the regional surface (no load), a
    # warning counts them, and they are written back as nodata. Expected load from the
    # rule rho g (z - regional) below sea level buoyed by sea water (PHYSICS.md section 0,
    # rule 3)
    y, x = np.mgrid[0:N, 0:N] * CELL
    elevation = -4000.0 + 3000.0 * np.exp(-((x - 32e3) ** 2 + (y - 32e3) ** 2) / (2 * 5e3**2))
    elevation[150:170, 150:170] = np.nan  # on the edifice's summit
    elevation[10:20, 10:20] = np.nan  # on the flat sea floor
    _write(tmp_path / "fine.tif", elevation)
    (tmp_path / "s.toml").write_text(
        """
[plate]
elastic_thickness = "5 km"

[working_grid]
spacing = "800 m"

[[loads]]
file = "fine.tif"
kind = "elevation"
density = 2800
regional_elevation = -4000
missing = "zero"

[output]
file = "out.nc"
"""
    )
    assert main(["run", str(tmp_path / "s.toml")]) == 0
    assert "500 nodata or NaN cell(s) taken as no edifice" in capsys.readouterr().err
    with xr.open_dataset(tmp_path / "out.nc") as ds:
        load = ds["load"].sortby("y", ascending=False).values
    assert np.isnan(load[150:170, 150:170]).all() and np.isnan(load[10:20, 10:20]).all()
    known = np.isfinite(elevation)
    expected = (2800.0 - 1030.0) * 9.81 * (elevation + 4000.0)
    summit = known & (elevation > -3900.0)
    assert_allclose(load[summit], expected[summit].astype(np.float32), rtol=1e-5)
