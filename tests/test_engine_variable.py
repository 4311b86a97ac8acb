"""solve() with a te grid or method="finite-difference": dispatch, attributes, accuracy."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import ConvergenceError, InputError, Plate, solve
from tests.helpers import make_grid


def _disc_load(n: int = 96, dx: float = 4e3) -> xr.DataArray:
    grid = make_grid(n, n, dx)
    r = np.hypot(grid.x, grid.y).transpose("y", "x")
    return xr.where(r < 40e3, 2800 * 9.81 * 2000.0, 0.0).transpose("y", "x")


def _te_step(load: xr.DataArray, west: float, east: float) -> xr.DataArray:
    """te = west for x <= 0, east for x > 0, on the load grid."""
    return load.copy(data=np.where(load.x.values[None, :] > 0, east, west) * np.ones(load.shape))


def test_constant_te_finite_difference_matches_spectral():
    # issue 3: constant te by finite differences against the spectral solver within 0.5 % of
    # the maximum deflection (the two differ by the O((dx/alpha)^2) error of the 13-point
    # stencil; PHYSICS.md 2.2); dx = 4 km, alpha = 66 km
    load = _disc_load()
    plate = Plate(te=20e3)
    spectral = solve(load, plate)["deflection"].values
    result = solve(load, plate, method="finite-difference")
    w = result["deflection"].values
    assert_allclose(w, spectral, rtol=0, atol=5e-3 * spectral.max())
    assert result.attrs["solver"] == "finite-difference"
    assert result.attrs["accuracy"] <= result.attrs["tolerance"]
    assert result.attrs["iterations"] <= 2  # constant D: the preconditioner is exact


def test_te_grid_selects_finite_difference_and_records_the_solve():
    load = _disc_load()
    te = _te_step(load, 4e3, 40e3)
    result = solve(load, Plate(te=te))
    attrs = result.attrs
    assert attrs["solver"] == "finite-difference"
    assert attrs["edges"] == "infinite"
    assert attrs["pad_factor"] == 4.5
    assert attrs["accuracy"] <= attrs["tolerance"] == 1e-6
    assert attrs["backward_error"] < 1e-6 and attrs["at_round_off"] == 0
    assert 1 <= attrs["iterations"] <= 30
    assert attrs["band_nodes"] > 0 and attrs["preconditioner"] == "band and blend"
    assert attrs["force_balance_residual"] < 1e-6  # issue 3: force balance to 1e-6
    assert tuple(attrs["padded_shape"]) >= load.shape


def test_variable_te_limits():
    # PHYSICS.md 4.1: te = 0 everywhere is local (Airy) isostasy, w = q / (drho g), for
    # every edge option
    load = _disc_load(32)
    plate = Plate(te=xr.zeros_like(load))
    for edges in ("infinite", "clamped", "free", "periodic"):
        w = solve(load, plate, edges=edges)["deflection"].values
        assert_allclose(w, load.values / plate.restoring_stiffness, rtol=1e-7, atol=1e-9)


def test_stiffer_side_deflects_less():
    # Turcotte & Schubert 2002, Geodynamics, ch. 3: w0 = V0 alpha^3 / (8 D) falls with D^(1/4)
    load = _disc_load()
    te = _te_step(load, 6e3, 60e3)
    w = solve(load, Plate(te=te))["deflection"]
    west, east = (float(w.sel(x=x, y=0, method="nearest")) for x in (-20e3, 20e3))
    assert west > east


def test_progress_and_iteration_limit():
    load = _disc_load(64)
    te = _te_step(load, 6e3, 60e3)
    seen = []
    solve(load, Plate(te=te), progress=lambda done, total: seen.append(done))
    assert seen[:-1] == list(range(1, len(seen))) and seen[-1] == seen[-2]  # last: done
    with pytest.raises(ConvergenceError, match="did not converge"):
        solve(load, Plate(te=te), max_iterations=1)


def test_bad_combinations_raise():
    load = _disc_load(32)
    te = xr.full_like(load, 10e3)
    with pytest.raises(InputError, match="method='spectral' needs a constant te"):
        solve(load, Plate(te=te), method="spectral")
    with pytest.raises(InputError, match="edges='clamped' needs method='finite-difference'"):
        solve(load, Plate(te=10e3), edges="clamped")
    with pytest.raises(InputError, match="in-plane forces are not available"):
        solve(load, Plate(te=te), inplane_force_x=1e12)
    with pytest.raises(InputError, match="te grid is not on the load grid"):
        solve(load, Plate(te=te.assign_coords(x=te.x + 1e3)))
