"""Accuracy of the finite-difference solve: the recorded accuracy and backward error against
direct solves, a 1-D te(x) beam against an independent boundary-value solution, warm starts,
and a stiff plate on fine cells at the default settings."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.integrate
import scipy.ndimage
import scipy.sparse.linalg

from gridflex.grid import GridSpec
from gridflex.plate import rigidity_from_te
from gridflex.solvers.finite_difference import (
    DEFAULT_TOLERANCE,
    FiniteDifferenceSolver,
    finite_difference_deflection,
)

NU = 0.25
STIFFNESS = 2270 * 9.81
EPS = np.finfo(np.float64).eps


def _te_map(name: str, n: int, dx: float) -> tuple[np.ndarray, np.ndarray]:
    """(te, load) of an invented case on an n x n grid of spacing dx centred on 0."""
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    if name == "weak_zone":  # a 20 km zone of te 0.5 km in a 25 km plate
        te = np.where(np.abs(xx - 20e3) < 10e3, 0.5e3, 25e3)
    elif name == "hinge_network":  # two crossing hinges and one ending inside
        te = np.full((n, n), 30e3)
        te[:, n // 2] = 0.0
        te[n // 2 + 5, :] = 0.0
        te[(np.abs(xx - 40e3) < 0.5 * dx) & (yy < 30e3)] = 0.0
    else:  # margin te 5 -> 50 km crossed by a hinge that ends inside
        te = 5e3 + 45e3 * 0.5 * (1 + np.tanh(xx / 20e3))
        te[(np.abs(yy + 10e3) < 0.5 * dx) & (xx < 60e3)] = 0.0
    load = np.where(np.hypot(xx + 30e3, yy) < 25e3, 2800 * 9.81 * 1500.0, 0.0)
    return te, load


def _direct(solver: FiniteDifferenceSolver, load: np.ndarray) -> np.ndarray:
    full = np.zeros(solver.shape)
    full[solver.window] = load
    rhs = (solver.operator.area * full).ravel()
    return scipy.sparse.linalg.spsolve(solver.operator.matrix().tocsc(), rhs).reshape(solver.shape)


def _energy_error(solver: FiniteDifferenceSolver, w: np.ndarray, exact: np.ndarray) -> float:
    error = w - exact
    return float(
        np.sqrt(
            np.vdot(error, solver.operator.apply(error))
            / np.vdot(exact, solver.operator.apply(exact))
        )
    )


@pytest.mark.parametrize("name", ["weak_zone", "hinge_network", "margin"])
def test_accuracy_and_backward_error_against_direct_and_tighter_solves(name):
    # Higham 2002, "Accuracy and Stability of Numerical Algorithms", ch. 7 (normwise backward
    # error); Strakoš & Tichý 2002 (the error estimate from the CG coefficients): at the
    # default tolerance the deflection lies within 1e-6 of its peak of a sparse direct
    # solve (issue 15 target), the recorded accuracy is at least the error against a much
    # tighter solve (seen about 100 times above it: the estimate is taken four steps back)
    # and the backward error is far below the accuracy; invented te maps on 96² of 2 km,
    # periodic (seen: largest error 1.6e-10 to 4.7e-10 of the peak, backward error 2e-16 to
    # 4e-14). The band is capped one node short of the grid, so that the solve iterates:
    # the hinge network's band covers the whole grid otherwise, and the start is then the
    # direct solve (seen with the cap: bands of 85-98 % of the nodes, 4-7 iterations,
    # accuracy 5.8e-8 to 7.4e-8 against 5.2e-10 to 7.7e-10)
    n, dx = 96, 2e3
    te, load = _te_map(name, n, dx)
    spec = GridSpec(n, n, dx, dx)
    solver = FiniteDifferenceSolver.build(
        spec, rigidity_from_te(te, 1e11, NU), STIFFNESS, NU, "periodic", max_band_nodes=n * n - 1
    )
    w, info = solver.solve(load)
    assert info["iterations"] > 0
    exact = _direct(solver, load)
    assert info["accuracy"] <= DEFAULT_TOLERANCE and not info["at_round_off"]
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()
    tight, tight_info = solver.solve(load, tolerance=1e-13)
    assert tight_info["backward_error"] <= 64 * EPS
    actual = _energy_error(solver, w, tight)
    assert actual <= info["accuracy"] <= 1e3 * max(actual, 1e-10), (actual, info["accuracy"])
    residual = np.linalg.norm((solver.operator.area * load) - solver.operator.apply(w))
    norm_k = solver.operator_norm()
    expected = residual / (norm_k * np.linalg.norm(w) + np.linalg.norm(solver.operator.area * load))
    assert info["backward_error"] == pytest.approx(expected, rel=1e-6)


def test_smooth_te_valley_near_the_west_edge_converges_fast():
    # Higham 2002 (backward error) and a sparse direct solve of the same operator: a
    # smooth Gaussian te valley (25 -> 3 km, 30 km half-width; invented) narrower than the
    # stiff plate's flexural parameter (about 70 km), 60 km west of the centre of a 128²
    # grid of 4 km, so that its band crosses the periodic solve grid's first columns.
    # Before the blend's ramp had a least span (MIN_RAMP_RATIO) and the band wrapped
    # round periodic edges, this took 121 iterations (7 after; common practice for the
    # count, seen on this machine)
    n, dx = 128, 4e3
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    te = 25e3 - 22e3 * np.exp(-(((xx + 60e3) / 30e3) ** 2))
    load = np.where(np.hypot(xx + 50e3, yy) < 80e3, 2800 * 9.81 * 2000.0, 0.0)
    solver = FiniteDifferenceSolver.build(
        GridSpec(n, n, dx, dx), rigidity_from_te(te, 1e11, NU), STIFFNESS, NU
    )
    w, info = solver.solve(load)
    assert info["iterations"] <= 10
    exact = _direct(solver, load)[solver.window]
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()


def test_warm_start_from_the_answer_costs_no_iteration():
    # common practice: a start that already meets the tolerance (the deflection of the
    # same load) is returned after at most one iteration, with an honest accuracy (8 km
    # cells: on 2 km the band round the weak zone covers the grid and nothing iterates)
    n, dx = 96, 8e3
    te, load = _te_map("weak_zone", n, dx)
    solver = FiniteDifferenceSolver.build(
        GridSpec(n, n, dx, dx), rigidity_from_te(te, 1e11, NU), STIFFNESS, NU, "periodic"
    )
    w, info = solver.solve(load, tolerance=1e-10)
    again, info_again = solver.solve(load, start=w)
    assert info_again["iterations"] <= 1
    assert info_again["accuracy"] <= DEFAULT_TOLERANCE
    assert np.abs(again - w).max() <= 1e-6 * np.abs(w).max()
    # a start from a slightly different load converges in fewer iterations than from zero
    nudged, info_nudged = solver.solve(1.01 * load, start=w)
    assert info["iterations"] >= 3
    assert info_nudged["iterations"] < info["iterations"]


def test_one_dimensional_te_profile_matches_a_boundary_value_solution():
    # Hetényi 1946, "Beams on Elastic Foundation": a plate strip in cylindrical bending
    # obeys (D w'')'' + Δρ g w = q with D(x); solved independently here by
    # scipy.integrate.solve_bvp for w, w', M = D w'', V = (D w'')' with free ends (M = V =
    # 0); invented te(x) 10 -> 40 km (tanh, half-width 30 km) under a Gaussian line load;
    # the 13-point operator is second order: within 0.2 % of the peak at dx = 2 km
    # (seen 3.3e-4)
    dx, half = 2e3, 300
    x = (np.arange(2 * half + 1) - half) * dx
    te = 10e3 + 30e3 * 0.5 * (1 + np.tanh((x - 40e3) / 30e3))
    d = rigidity_from_te(te, 1e11, NU)
    q = 2800 * 9.81 * 1000.0 * np.exp(-(((x + 20e3) / 25e3) ** 2))
    spec = GridSpec(4, x.size, dx, dx)
    w, info = finite_difference_deflection(
        np.tile(q, (4, 1)), spec, np.tile(d, (4, 1)), STIFFNESS, NU, ("periodic", "free")
    )
    assert info["accuracy"] <= DEFAULT_TOLERANCE

    # in units of length 50 km, rigidity Δρ g (50 km)^4 and deflection q0 / Δρ g, so that
    # w, w', D w'' and (D w'')' are all of order one
    length, q0 = 50e3, 2800 * 9.81 * 1000.0
    d0 = STIFFNESS * length**4

    def rhs(s, y):
        metres = s * length
        d = rigidity_from_te(10e3 + 30e3 * 0.5 * (1 + np.tanh((metres - 40e3) / 30e3)), 1e11, NU)
        load = np.exp(-(((metres + 20e3) / 25e3) ** 2))
        return np.vstack([y[1], y[2] / (d / d0), y[3], load - y[0]])

    def ends(ya, yb):
        return np.array([ya[2], ya[3], yb[2], yb[3]])

    mesh = np.linspace(x[0], x[-1], 1201) / length
    bvp = scipy.integrate.solve_bvp(
        rhs, ends, mesh, np.zeros((4, mesh.size)), tol=1e-8, max_nodes=100_000
    )
    assert bvp.success, bvp.message
    exact = bvp.sol(x / length)[0] * q0 / STIFFNESS
    assert np.abs(w[1] - exact).max() <= 2e-3 * np.abs(exact).max()


def test_stiff_plate_on_fine_cells_converges_at_the_defaults():
    # issue 15: a te 5 -> 50 km margin on 1 km cells stalled at a relative residual of 3e-8
    # under the old residual rule (round-off of the fourth differences, eps (alpha / h)^4
    # with alpha / h = 119); at the default accuracy it converges, with a backward error of
    # a few unit round-offs at most and force balance (common practice)
    n, dx = 256, 1e3
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    te = 5e3 + 45e3 * 0.5 * (1 + np.tanh(xx / 40e3))
    load = np.where(np.hypot(xx + 40e3, yy) < 40e3, 2800 * 9.81 * 2000.0, 0.0)
    w, info = finite_difference_deflection(
        load, GridSpec(n, n, dx, dx), rigidity_from_te(te, 1e11, NU), STIFFNESS, NU, "periodic"
    )
    assert info["accuracy"] <= DEFAULT_TOLERANCE
    assert info["iterations"] <= 30
    assert info["force_balance_residual"] < 1e-6
    assert np.isfinite(w).all()


def _rough_te_map(n: int, dx: float, holes: int) -> tuple[np.ndarray, np.ndarray]:
    """(te, load) of an invented rough te map in 0-100 km on an n x n grid of spacing dx:
    a smooth random field clipped to 0-100 km (patches of te = 0 reached smoothly), a
    stripe where te jumps 0 <-> 100 km, *holes* isolated te = 0 nodes, tapered to te = 0 over the
    outer tenth (so the margin of edges="infinite" stays small)."""
    rng = np.random.default_rng(15)
    field = scipy.ndimage.gaussian_filter(rng.standard_normal((n, n)), n / 16, mode="wrap")
    te = 100e3 * np.clip(0.5 + (field - field.mean()) / (2.6 * field.std()), 0.0, 1.0)
    te[:, n // 2 : n // 2 + 3] = 0.0
    te[:, n // 2 + 3 : n // 2 + 8] = 100e3
    te.ravel()[rng.choice(n * n, size=holes, replace=False)] = 0.0
    edge = np.minimum(np.arange(n), n - 1 - np.arange(n))
    taper = np.clip(edge / (0.1 * n), 0.0, 1.0)
    te *= np.minimum(taper[:, None], taper[None, :])
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    load = np.where(np.hypot(xx + 0.1 * n * dx, yy) < 0.12 * n * dx, 2800 * 9.81 * 2000.0, 0.0)
    return te, load


def test_rough_te_map_with_zeros_and_jumps_converges_at_the_defaults():
    # issue 15 target: no ConvergenceError at default settings for a te map in 0-100 km,
    # deflection within 1e-6 of its peak of a direct solve. The reference is a sparse LU
    # solve of the same discrete plate equations K w = a q (PHYSICS.md 2.2; comparing an
    # iterative solve with a direct solve of the same system is common practice). The
    # steep rises of D ~ te³ out of the te = 0 patches are banded since the steep rule
    # judges them against the weakest plate in its window (seen: 1 iteration, the band
    # holding 17.6 k of the 18.2 k nodes, largest error 3e-11 of the peak; 37 iterations
    # and 6e-8 when the window followed the grid's smallest non-zero te)
    n, dx = 128, 4e3
    te, load = _rough_te_map(n, dx, holes=8)
    spec = GridSpec(n, n, dx, dx)
    solver = FiniteDifferenceSolver.build(spec, rigidity_from_te(te, 1e11, NU), STIFFNESS, NU)
    w, info = solver.solve(load)
    assert info["accuracy"] <= DEFAULT_TOLERANCE and not info["at_round_off"]
    assert info["iterations"] <= 10
    exact = _direct(solver, load)[solver.window]
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()


def test_a_band_with_only_open_sea_outside_certifies_its_start_without_a_margin():
    # When every node outside the band has no plate next to it (band_is_exact: the rough
    # map tapered to te = 0 round the grid), band and blend are K^-1 itself, and the
    # recorded accuracy sqrt(r.K^-1 r / x.b) is the energy-norm error (common practice),
    # with no START_MARGIN on it. Before, at 1 km cells it recorded 100 times that (7.7e-6
    # here, over the tolerance: flagged at_round_off with a warning) while the deflection
    # was as good. The reference is a sparse LU of the same system (spsolve, another
    # ordering; common practice): seen 0 iterations (band of 9675 of 10 000 nodes, the
    # rest open sea), accuracy 7.7e-8 against an energy-norm difference of 1.5e-8.
    n, dx = 96, 1e3
    te, load = _rough_te_map(n, dx, holes=8)
    spec = GridSpec(n, n, dx, dx)
    solver = FiniteDifferenceSolver.build(spec, rigidity_from_te(te, 1e11, NU), STIFFNESS, NU)
    assert solver.preconditioner.exact
    full = np.zeros(solver.shape)
    full[solver.window] = load
    w, info = solver.solve_full(full)
    assert info["iterations"] <= 1
    assert info["accuracy"] <= DEFAULT_TOLERANCE and not info["at_round_off"]
    exact = _direct(solver, load)
    assert _energy_error(solver, w, exact) <= info["accuracy"]
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()
