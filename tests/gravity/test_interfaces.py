"""interface_gravity: Parker (1973) series checked against the slab and the prism."""

import math

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import GravitySeriesWarning, InputError, interface_gravity
from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.gravity.prisms import prism_gravity

SLAB = 2.0 * math.pi * GRAVITATIONAL_CONSTANT / MGAL  # mGal per m per kg/m^3


def grid(values, dx, x0=0.0):
    ny, nx = values.shape
    return xr.DataArray(
        values,
        dims=("y", "x"),
        coords={"y": x0 + dx * (np.arange(ny) + 0.5), "x": x0 + dx * (np.arange(nx) + 0.5)},
    )


def test_slab_factor():
    # Bouguer slab 2 pi G rho h = 0.04193 mGal per metre per 1000 kg/m^3 (the value;
    # Turcotte & Schubert 2002, Geodynamics, ch. 5, infinite-slab gravity, from memory).
    assert_allclose(SLAB * 1000.0, 0.04193, rtol=2e-4)


def test_periodic_uniform_relief_is_exact_slab():
    # A uniform relief on a periodic grid is an infinite slab: 2 pi G drho h exactly
    # (Bouguer slab; PHYSICS.md 6.5 "exact in the FFT too"); tolerance: round-off.
    h = grid(np.full((32, 48), 250.0), 1e3)
    g = interface_gravity(h, 1700.0, 3000.0, edges="periodic")
    assert_allclose(g.values, SLAB * 1700.0 * 250.0, rtol=1e-12)


def test_wide_flat_load_gives_slab_in_its_middle():
    # A 400 km wide flat relief of 100 m at 1 km depth on an infinite plane: in its middle
    # the Bouguer slab 2 pi G rho h (0.04193 mGal/m per 1000 kg/m^3). The finite width
    # lowers the value by ~ (2 sqrt 2 / pi) z / a = 0.45 %; the closed-form prism (Nagy
    # 1966) of the same block gives that value, which the series must match to 1e-4 (seen
    # 5e-7 with the periodic images taken out; 1e-3 without).
    n, dx = 240, 2e3
    values = np.zeros((n, n))
    values[20:220, 20:220] = 100.0
    h = grid(values, dx, x0=-n * dx / 2)
    g = interface_gravity(h, 1000.0, 1000.0, terms=4)
    centre = float(g.values[n // 2, n // 2])
    assert_allclose(centre, SLAB * 1000.0 * 100.0, rtol=6e-3)
    x_c = float(h["x"][n // 2])
    prism = prism_gravity(x_c, x_c, 0.0, (-200e3, 200e3, -200e3, 200e3, 900.0, 1000.0), 1000.0)
    assert_allclose(centre, prism, rtol=1e-4)


def _prism_case(contrasts):
    dx = 50.0
    n = 360
    values = np.zeros((n, n))
    rho = np.zeros((n, n))
    x = -8000.0 + dx * (np.arange(n) + 0.5)
    X, Y = np.meshgrid(x, x)
    boxes = [(-1e3, 2e3, -500.0, 1.5e3), (-3e3, -1.5e3, -2e3, 0.0)]
    reference = np.zeros((n, n))
    for (x1, x2, y1, y2), contrast in zip(boxes, contrasts, strict=False):
        inside = (X > x1) & (X < x2) & (Y > y1) & (Y < y2)
        values[inside] = 2500.0
        rho[inside] = contrast
        reference += prism_gravity(X, Y, 0.0, (x1, x2, y1, y2, 500.0, 3e3), contrast)
    return grid(values, dx, x0=-8000.0), rho, reference


def test_prism_against_closed_form():
    # Rectangular prism 3 x 2 x 2.5 km, top at 0.5 km (PHYSICS.md 6.5 case) as a relief of
    # 2.5 km above a reference level at 3 km: the series must match the closed form
    # (Nagy 1966; Nagy, Papp & Benedek 2000) within 1 % of the peak at every cell centre.
    h, _, reference = _prism_case([1000.0])
    g = interface_gravity(h, 1000.0, 3000.0, terms=12)
    assert np.abs(g.values - reference).max() < 0.01 * reference.max()


def test_laterally_varying_contrast_against_prisms():
    # Two prisms of contrast +1000 and -600 kg/m^3 given as one relief with a contrast grid;
    # closed-form prism sum (Nagy 1966) within 1 % of the largest anomaly.
    h, rho, reference = _prism_case([1000.0, -600.0])
    g = interface_gravity(h, grid(rho, 50.0, x0=-8000.0), 3000.0, terms=12)
    assert np.abs(g.values - reference).max() < 0.01 * np.abs(reference).max()


def gaussian_relief(n=256, dx=2e3):
    x = dx * (np.arange(n) - n // 2)
    X, Y = np.meshgrid(x, x)
    return xr.DataArray(
        3000.0 * np.exp(-(X**2 + Y**2) / (2 * 10e3**2)), dims=("y", "x"), coords={"y": x, "x": x}
    )


def test_mid_depth_series_converges_fast():
    # Gaussian seamount H = 3 km, sigma = 10 km, base 5 km below the plane, drho = 1700
    # (PHYSICS.md 6.2 [C]): summed about mid-depth the 4-term series is within 0.044 mGal of
    # the converged one, and the converged peak is 146.477 mGal (PHYSICS.md 6.2 [C], a
    # computed value, not published); tolerances 0.06 mGal and 0.01 mGal.
    h = gaussian_relief()
    g4 = interface_gravity(h, 1700.0, 5000.0, terms=4)
    g14 = interface_gravity(h, 1700.0, 5000.0, terms=14)
    assert np.abs(g4.values - g14.values).max() < 0.06
    assert_allclose(g14.values.max(), 146.477, atol=0.01)


def test_sign_and_observation_height():
    # Sign convention (PHYSICS.md 0): an upward bulge of denser material attracts more
    # (positive); observing 1 km higher equals a reference level 1 km deeper (geometry).
    h = gaussian_relief(n=64, dx=4e3)
    high = interface_gravity(h, 500.0, 5000.0, observation_height=1000.0)
    deep = interface_gravity(h, 500.0, 6000.0)
    assert float(high.max()) > 0.0
    assert float(interface_gravity(-h, 500.0, 9000.0).min()) < 0.0
    assert_allclose(high.values, deep.values, rtol=1e-12, atol=1e-12)
    assert high.attrs["units"] == "mGal"
    assert high.dims == ("y", "x")


def test_reference_level_choice_does_not_change_the_interface():
    # The same interface described about two reference levels (relief + 1000 m about a level
    # 1000 m deeper) differs only by the flat 1000 m layer of its contrast between them; the
    # contrast varies laterally (two blocks, zero elsewhere), and the layer's closed-form
    # prism sum (Nagy 1966) is the reference, within 0.2 % of its peak (seen 0.14 %, at the
    # blocks' corners, where the sampled relief and the prisms differ most).
    n, dx = 96, 1e3
    values = np.zeros((n, n))
    values[30:60, 40:70] = 400.0
    rho = np.zeros((n, n))
    rho[20:76, 20:55] = 800.0
    rho[20:76, 55:76] = 300.0
    h = grid(values, dx, x0=-n * dx / 2)
    c = grid(rho, dx, x0=-n * dx / 2)
    a = interface_gravity(h, c, 3000.0, terms=8)
    b = interface_gravity(h + 1000.0, c, 4000.0, terms=8)
    x = h["x"].values
    X, Y = np.meshgrid(x, x)
    edges = -n * dx / 2 + dx * np.arange(n + 1)
    layer = prism_gravity(X, Y, 0.0, (edges[20], edges[55], edges[20], edges[76], 3e3, 4e3), 800.0)
    layer += prism_gravity(X, Y, 0.0, (edges[55], edges[76], edges[20], edges[76], 3e3, 4e3), 300.0)
    assert_allclose(b.values - a.values, layer, atol=2e-3 * layer.max())


def test_isolated_relief_does_not_depend_on_the_padding():
    # An isolated relief on an infinite plane has one field, whatever artificial domain the
    # FFT uses (common practice): with the periodic copies' fields taken out, the default
    # padding and a 4x wider one agree to 2e-5 of the peak; the plain periodic sum of the
    # same padded grid is off by > 5e-4 (the copies' r^-3 fields), so the check has teeth.
    from gridflex.gravity.interfaces import gravity_padded_shape, parker_spectrum, spectrum_to_grid
    from gridflex.grid import check_grid

    n, dx = 96, 1e3
    values = np.zeros((n, n))
    values[20:76, 20:76] = 500.0
    h = grid(values, dx, x0=-n * dx / 2)
    default = interface_gravity(h, 1000.0, 4000.0, terms=6).values
    wide = interface_gravity(h, 1000.0, 4000.0, terms=6, pad_factor=40.0).values
    peak = np.abs(wide).max()
    assert np.abs(default - wide).max() < 2e-5 * peak
    spec = check_grid(h)
    shape = gravity_padded_shape(spec, 4000.0, 4.5)
    plain, _, _, _ = parker_spectrum(values, 1000.0, 4000.0, spec, 6, shape, isolated=False)
    assert np.abs(spectrum_to_grid(plain, spec, shape) - wide).max() > 5e-4 * peak


def test_errors_and_warning():
    h = gaussian_relief(n=32, dx=4e3)
    with pytest.raises(InputError, match="observation_height"):
        interface_gravity(h, 1000.0, 2000.0)
    with pytest.raises(InputError, match="terms must be"):
        interface_gravity(h, 1000.0, 5000.0, terms=0)
    with pytest.raises(InputError, match="depth must be a finite number"):
        interface_gravity(h, 1000.0, math.nan)
    with pytest.raises(InputError, match="edges must be"):
        interface_gravity(h, 1000.0, 5000.0, edges="mirror")
    with pytest.raises(InputError, match=r"pad_factor must be a finite number >= 0, got -1\.0"):
        interface_gravity(h, 1000.0, 5000.0, pad_factor=-1.0)
    with pytest.raises(InputError, match="relief must have dims"):
        interface_gravity(h.T, 1000.0, 5000.0)
    # a relief reaching close to the plane with 2 terms is not converged: warned
    with pytest.warns(GravitySeriesWarning, match="not converged"):
        interface_gravity(h, 1000.0, 3300.0, terms=2)
