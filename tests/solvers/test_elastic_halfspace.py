"""Elastic half-space (Boussinesq) convolution: kernel, point load, free space."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate

from gridflex import InputError
from gridflex.grid import GridSpec
from gridflex.solvers.elastic_halfspace import ElasticHalfSpace, cell_inverse_distance

E, NU = 1.0e11, 0.25


def test_cell_integral_of_inverse_distance_matches_quadrature():
    # Closed form of the integral of 1/r over a rectangle against scipy's dblquad (common
    # practice), for the singular centre cell and cells on and off the axes.
    dy, dx = 2.0, 3.0
    table = cell_inverse_distance(4, 5, dy, dx)
    for i, j in [(0, 0), (0, 2), (3, 0), (1, 1), (2, 4)]:
        y0, x0 = i * dy, j * dx
        quarters = [
            integrate.dblquad(lambda y, x: 1.0 / np.hypot(x, y), a, b, c, d, epsabs=1e-11)[0]
            for a, b in ((x0 - dx / 2, x0), (x0, x0 + dx / 2))
            for c, d in ((y0 - dy / 2, y0), (y0, y0 + dy / 2))
        ]
        assert table[i, j] == pytest.approx(sum(quarters), rel=1e-7), (i, j)


def test_point_force_far_field_is_boussinesq():
    # A force P on one cell: w(r) = (1 - nu^2) P / (pi E r) (Boussinesq; Timoshenko &
    # Goodier 1951) away from the cell (the cell average of 1/r differs by ~dx^2 / (24 r^2)).
    n, dx = 64, 1000.0
    load = np.zeros((n, n))
    load[10, 12] = 1e6
    w = ElasticHalfSpace.build(GridSpec(n, n, dx, dx), E, NU).response(load)
    iy, ix = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    r = np.hypot(iy - 10, ix - 12) * dx
    far = r >= 10 * dx
    exact = (1 - NU**2) * 1e6 * dx * dx / (np.pi * E * r[far])
    assert_allclose(w[far], exact, rtol=1e-3)


def test_no_periodic_images():
    # Free-space convolution: the same load in a grid three times as wide gives the same
    # displacement on the overlap (linear, not circular convolution; common practice).
    rng = np.random.default_rng(3)
    load = rng.uniform(0.0, 1e6, (30, 40))
    small = ElasticHalfSpace.build(GridSpec(30, 40, 500.0, 700.0), E, NU).response(load)
    wide_load = np.zeros((90, 120))
    wide_load[30:60, 40:80] = load
    wide = ElasticHalfSpace.build(GridSpec(90, 120, 500.0, 700.0), E, NU).response(wide_load)
    assert_allclose(wide[30:60, 40:80], small, rtol=0, atol=1e-12 * np.abs(small).max())


@pytest.mark.parametrize(
    ("youngs", "poisson", "match"),
    [
        (0.0, 0.25, "youngs_modulus"),
        (-1e9, 0.25, "youngs_modulus"),
        (1e11, 0.0, "poisson"),
        (1e11, 0.6, "poisson"),
        (float("nan"), 0.25, "youngs_modulus"),
    ],
)
def test_bad_moduli_are_refused(youngs, poisson, match):
    with pytest.raises(InputError, match=match):
        ElasticHalfSpace.build(GridSpec(8, 8, 1.0, 1.0), youngs, poisson)
