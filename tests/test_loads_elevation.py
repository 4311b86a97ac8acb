"""Loads from elevation models and thickness grids (PHYSICS.md section 0, rule 3)."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import InputError, load_from_elevation, load_from_layers, regional_surface

G = 9.81


def grid(values, dx=1e3):
    ny, nx = values.shape
    return xr.DataArray(
        values, dims=("y", "x"), coords={"y": dx * np.arange(ny), "x": dx * np.arange(nx)}
    )


def test_submarine_and_emergent_parts():
    # A rock column replacing water weighs (rho_rock - rho_water) g h; above sea level it
    # weighs rho_rock g h (PHYSICS.md 0 rule 3; Turcotte & Schubert 2002, ch. 3, from memory).
    z = np.full((6, 6), -4000.0)
    z[2, 2] = -1000.0  # submarine: 3000 m of rock under water
    z[3, 3] = 500.0  # emergent: 4000 m under water + 500 m in air
    ds = load_from_elevation(grid(z), 2800.0, -4000.0)
    q = ds["load"].values
    assert_allclose(q[2, 2], (2800.0 - 1030.0) * G * 3000.0, rtol=1e-12)
    assert_allclose(q[3, 3], ((2800.0 - 1030.0) * 4000.0 + 2800.0 * 500.0) * G, rtol=1e-12)
    assert_allclose(q[0, 0], 0.0)
    assert_allclose(ds["initial_surface"].values, z)
    assert_allclose(ds["load_height"].values[3, 3], 4500.0)
    assert ds.attrs["load_density"] == 2800.0
    assert ds["load"].attrs["units"] == "Pa"


def test_below_regional_is_no_load():
    # The edifice is the rock ABOVE the reference surface (issue definition): a moat below the
    # regional level adds no (negative) load (common practice for initial-load mode).
    z = np.full((5, 5), -4000.0)
    z[1, 1] = -4500.0
    ds = load_from_elevation(grid(z), 2800.0, -4000.0)
    assert ds["load"].values[1, 1] == 0.0


def test_regional_surface_removes_a_narrow_edifice():
    # Median smoothing over a radius wider than the edifice returns the regional trend: a
    # tilted plane (1 m per km) plus a cone of radius 8 km. The median of a plane over a
    # disc is the plane at the centre (symmetry); the cone covers < 1/4 of a 20 km disc.
    n = 96
    x = np.arange(n) * 1e3
    X, Y = np.meshgrid(x, x)
    plane = -4000.0 + 1e-3 * X
    cone = np.clip(3000.0 * (1.0 - np.hypot(X - 48e3, Y - 48e3) / 8e3), 0.0, None)
    regional = regional_surface(grid(plane + cone), 20e3)
    inner = (slice(25, 71), slice(25, 71))
    # Where the cone replaces the disc's middle values the median shifts by at most slope x
    # cone radius = 8 m (derived); far below the 3000 m edifice, and exact away from it.
    assert np.abs(regional.values[inner] - plane[inner]).max() < 8.0
    far = np.hypot(X - 48e3, Y - 48e3) > 32e3  # disc and cone apart (+ one coarse cell)
    far &= (X > 15e3) & (X < 81e3) & (Y > 15e3) & (Y < 81e3)  # clear of the grid edges
    assert np.abs(regional.values[far] - plane[far]).max() < 1.0
    ds = load_from_elevation(grid(plane + cone), 2800.0, regional)
    assert_allclose(ds["load_height"].values[48, 48], 3000.0, atol=8.0)


def test_ice_and_sediment_layers():
    # Layers stacked on a bed: ice on land presses rho_i g H; sediment deposited in water
    # presses (rho_s - rho_w) g h below sea level (PHYSICS.md 0 rule 3; 9.1).
    bed = np.tile(np.array([[100.0, -300.0], [100.0, -300.0]]), (2, 2))
    sediment = grid(np.tile(np.array([[0.0, 200.0], [0.0, 500.0]]), (2, 2)))
    ice = grid(np.tile(np.array([[1000.0, 0.0], [1000.0, 0.0]]), (2, 2)))
    ds = load_from_layers(grid(bed), {"sediment": (sediment, 2000.0), "ice": (ice, 910.0)})
    q = ds["load"].values
    assert_allclose(q[0, 0], 910.0 * G * 1000.0)
    assert_allclose(q[0, 1], (2000.0 - 1030.0) * G * 200.0)
    assert_allclose(q[1, 1], ((2000.0 - 1030.0) * 300.0 + 2000.0 * 200.0) * G)
    assert "load_density" not in ds.attrs  # two densities: no single load density
    assert_allclose(ds["initial_surface"].values[:2, :2], [[1100.0, -100.0], [1100.0, 200.0]])


def test_bad_input():
    z = grid(np.full((5, 5), -4000.0))
    with pytest.raises(InputError, match=r"radius must be a finite number > 0 \(m\)"):
        regional_surface(z, -1.0)
    with pytest.raises(InputError, match="rock_density"):
        load_from_elevation(z, -5.0, -4000.0)
    regional = r"regional must be a finite number \(m; or a grid\), got 'deep'"
    with pytest.raises(InputError, match=regional):
        load_from_elevation(z, 2800.0, "deep")
    with pytest.raises(InputError, match="thickness must be >= 0"):
        load_from_layers(0.0, [(z, 900.0)])
    with pytest.raises(InputError, match="at least one"):
        load_from_layers(0.0, [])
