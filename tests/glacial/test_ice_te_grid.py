"""The bed's response to an ice history on a plate whose te is a grid."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate, ice_response
from gridflex.synthetic import disc_height, empty_grid

RHO_W, RHO_M = 1030.0, 3300.0


def _coast() -> tuple[xr.DataArray, xr.DataArray, xr.DataArray]:
    """An ice cap on land next to an ocean (bed from +400 m to -600 m across x), growing
    then thinning, and a sea level falling by 60 m and rising back."""
    grid = empty_grid(48, 48, 16e3)
    bed = (400.0 - 1000.0 * (grid.x + 400e3) / 800e3 + 0.0 * grid).transpose("y", "x")
    cap = disc_height(grid, 160e3, 2000.0, cx=-120e3).values
    times = np.array([0.0, 500.0, 1000.0, 2000.0, 3000.0, 4000.0, 6000.0])
    share = np.array([0.0, 0.5, 1.0, 1.0, 0.7, 0.4, 0.1])
    ice = xr.DataArray(
        share[:, None, None] * cap[None],
        dims=("time", "y", "x"),
        coords={"time": times, "y": grid.y, "x": grid.x},
    )
    sea = xr.DataArray(
        [0.0, -20.0, -60.0, -60.0, -40.0, -10.0, 0.0], dims="time", coords={"time": times}
    )
    return ice, bed, sea


@pytest.mark.parametrize("model", ["half-space", "relaxing"])
def test_uniform_te_grid_equals_the_constant_te_with_floatation_and_ocean(model):
    # The ice path (floatation and the ocean over depressed bedrock, PHYSICS.md 7.1) on a
    # constant te (exact per-wavenumber update) and on a uniform te grid (finite
    # differences): half-space model of Bueler, Lingle & Brown 2007, relaxing model of
    # Le Meur & Huybrechts 1996. Issue target: 0.2 % of the peak deflection (seen: 0.12 %
    # half-space, 0.09 % relaxing, mostly the 13-point stencil at alpha / dx = 5).
    ice, bed, sea = _coast()
    te = 40e3
    # periodic: the ocean reaches the grid edge (the domain repeats, in both paths)
    exact = ice_response(ice, bed, Plate(te=te, infill_density=0.0), sea, model, edges="periodic")
    te_grid = xr.full_like(bed, te)
    grid = ice_response(
        ice, bed, Plate(te=te_grid, infill_density=0.0), sea, model, edges="periodic"
    )
    peak = np.abs(exact.deflection.values).max()
    assert np.abs(grid.deflection.values - exact.deflection.values).max() < 2e-3 * peak
    # the ocean load took part: sea-level change over the ocean cells
    assert np.abs(exact["load"].values[2][bed.values < -100]).max() > 1e5
    assert grid.attrs["solver"] == "finite-difference"


def test_no_plate_with_a_sea_level_rise_reaches_hydro_isostasy():
    # te = 0 everywhere (as a grid), in equilibrium with water h added over the ocean: the
    # water follows the depression, w = rho_w h / (rho_m - rho_w) (hydro-isostasy, common
    # practice; Turcotte & Schubert 2002, from memory); the fixed point stops at 1e-6 m.
    grid = empty_grid(16, 16, 50e3)
    ice = xr.DataArray(
        np.zeros((2, 16, 16)),
        dims=("time", "y", "x"),
        coords={"time": [0.0, 100.0], "y": grid.y, "x": grid.x},
    )
    plate = Plate(te=xr.full_like(grid, 0.0), infill_density=0.0)
    for model in ("half-space", "relaxing"):
        out = ice_response(
            ice, grid - 2000.0, plate, 10.0, model, initial="equilibrium", edges="periodic"
        )
        expected = RHO_W * 10.0 / (RHO_M - RHO_W)
        assert_allclose(out.deflection.values, expected, rtol=1e-6)
