"""Tests of gridflex.estimation.search (the coarse-grid-then-Brent search and its range check)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from gridflex.errors import InputError
from gridflex.estimation.search import (
    check_search_bounds,
    grid_then_refine,
    refine_least_squares,
    scan_groups,
)


def test_refines_between_the_best_grid_point_and_its_neighbours():
    # a parabola with its minimum between grid points: exact algebra, Brent's tolerance
    calls = []
    grid = np.linspace(0.0, 10.0, 11)
    index, best = grid_then_refine(lambda x: (x - 3.3) ** 2, grid, xatol=1e-8, progress=None)
    assert index == 3
    assert best == pytest.approx(3.3, abs=1e-6)
    grid_then_refine(lambda x: (x - 3.3) ** 2, grid, progress=lambda d, t: calls.append((d, t)))
    assert calls == [(i, 11) for i in range(1, 12)]


def test_a_minimum_on_the_grid_edge_stays_there():
    # a monotone misfit: the best grid point is the first; Brent cannot do better there
    index, best = grid_then_refine(lambda x: x, np.linspace(1.0, 2.0, 5))
    assert index == 0
    assert best == pytest.approx(1.0, abs=1e-4)


@pytest.mark.parametrize(
    ("bounds", "match"),
    [
        ((5.0, 1.0), r"bounds must satisfy 0 < low < high \(m\).*\(5.0, 1.0\)"),
        ((0.0, 1.0), "bounds must satisfy"),
        ((1.0, math.inf), "both finite"),
        ((1.0,), r"bounds must be two numbers \(m\), got \(1.0,\)"),
        ("ab", "bounds must be two numbers"),
    ],
)
def test_bad_bounds_are_named_with_their_value(bounds, match):
    with pytest.raises(InputError, match=match):
        check_search_bounds("bounds", bounds, "m")


def test_good_bounds_come_back_as_floats():
    assert check_search_bounds("bounds", (np.int64(1), 2)) == (1.0, 2.0)


def test_scans_then_least_squares_find_a_two_parameter_minimum():
    # residuals r = A u - b, linear least squares (exact algebra): the scans reach the
    # right neighbourhood, the refinement the minimiser, its Jacobian is A
    a = np.array([[2.0, 0.5], [0.3, 1.5], [1.0, -1.0]])
    truth = np.array([0.37, 0.62])
    b = a @ truth + np.array([0.01, -0.02, 0.015])

    def residuals(u):
        return a @ u - b

    calls = []
    start = scan_groups(
        lambda u: float(residuals(u) @ residuals(u)),
        np.array([0.5, 0.5]),
        [(0, 1), (0,), (1,)],
        5,
        progress=lambda d, t: calls.append((d, t)),
    )
    assert calls[-1] == (15, 15)
    point, jacobian = refine_least_squares(residuals, start, diff_step=1e-3, xtol=1e-10, ftol=1e-12)
    expected = np.linalg.lstsq(a, b, rcond=None)[0]
    assert point == pytest.approx(expected, abs=1e-6)
    assert jacobian == pytest.approx(a, abs=1e-6)


def test_bounds_of_a_linear_range_may_be_negative():
    assert check_search_bounds("shift", (-3.0, 2.0), "m", positive=False) == (-3.0, 2.0)
    with pytest.raises(InputError, match=r"shift must satisfy low < high \(m\)"):
        check_search_bounds("shift", (2.0, -3.0), "m", positive=False)
