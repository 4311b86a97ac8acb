"""Closed-form prism gravity (Nagy 1966; Nagy, Papp & Benedek 2000)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex import InputError
from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.gravity.prisms import prism_gravity


def test_reference_values():
    # Reference values of PHYSICS.md 6.5, computed there by direct triple quadrature [C]
    # for the formula of Nagy 1966 / Nagy, Papp & Benedek 2000; tolerance: their 7 digits.
    g1 = prism_gravity(300.0, -200.0, 0.0, (-1e3, 2e3, -500.0, 1.5e3, 500.0, 3e3), 1000.0)
    g2 = prism_gravity(5e3, 4e3, 0.0, (-1e3, 1e3, -1e3, 1e3, 1e3, 2e3), 500.0)
    assert_allclose(g1, 23.08495, rtol=3e-7)
    assert_allclose(g2, 0.0721305, rtol=1e-6)


def test_against_gauss_legendre_quadrature():
    # Independent check: Newton's law integrated over the prism by a 48-point Gauss-Legendre
    # product rule (common practice); the integrand is smooth for an outside point, so the
    # rule is accurate to far better than the 1e-6 tolerance.
    bounds = (-700.0, 1300.0, -400.0, 900.0, 200.0, 1500.0)
    obs = np.array([[0.0, 0.0, 0.0], [2500.0, -1800.0, -300.0], [100.0, 50.0, 50.0]])
    nodes, weights = np.polynomial.legendre.leggauss(48)

    def scaled(a, b):
        return 0.5 * (b - a) * nodes + 0.5 * (a + b), 0.5 * (b - a) * weights

    xs, wx = scaled(*bounds[0:2])
    ys, wy = scaled(*bounds[2:4])
    zs, wz = scaled(*bounds[4:6])
    X, Y, Z = np.meshgrid(xs, ys, zs, indexing="ij")
    W = wx[:, None, None] * wy[None, :, None] * wz[None, None, :]
    for x0, y0, z0 in obs:
        dz = Z - z0
        r3 = ((X - x0) ** 2 + (Y - y0) ** 2 + dz**2) ** 1.5
        quad = GRAVITATIONAL_CONSTANT * 800.0 * np.sum(W * dz / r3) / MGAL
        assert_allclose(prism_gravity(x0, y0, z0, bounds, 800.0), quad, rtol=1e-6)


def test_far_field_is_point_mass():
    # Far from the prism its field is that of a point mass G M z / r^3 (Newton); at 60 km
    # from a 2 km prism the relative difference is of order (2/60)^2 ~ 1e-3.
    g = prism_gravity(50e3, 40e3, 0.0, (-1e3, 1e3, -1e3, 1e3, 1e3, 2e3), 500.0)
    mass = 500.0 * 2e3 * 2e3 * 1e3
    r2 = 50e3**2 + 40e3**2 + 1.5e3**2
    assert_allclose(g, GRAVITATIONAL_CONSTANT * mass * 1.5e3 / r2**1.5 / MGAL, rtol=1e-3)


def test_observation_on_edge_line_is_finite():
    # The logs are guarded where x_i + r -> 0 (PHYSICS.md 6.5): an observation point on the
    # extension of a prism edge gives a finite value close to its neighbours' (continuity).
    bounds = (0.0, 1000.0, 0.0, 1000.0, 100.0, 600.0)
    on_line = prism_gravity(-500.0, 0.0, 100.0, bounds, 1000.0)
    near = prism_gravity(-500.0, 1e-3, 100.0, bounds, 1000.0)
    assert np.isfinite(on_line)
    assert_allclose(on_line, near, rtol=1e-5)


def test_bad_bounds():
    with pytest.raises(InputError, match="bounds must satisfy"):
        prism_gravity(0.0, 0.0, 0.0, (1.0, 0.0, 0.0, 1.0, 1.0, 2.0), 1000.0)
    with pytest.raises(InputError, match="six numbers"):
        prism_gravity(0.0, 0.0, 0.0, (1.0, 0.0), 1000.0)
