"""Finite-difference solves in a sequence (time steps): starts from kept solutions, and the
preconditioner of an operator with a constant-coefficient spectral term (the implicit step
of a plate over a viscous half-space)."""

from __future__ import annotations

import math

import numpy as np
from numpy.testing import assert_allclose

from gridflex.grid import GridSpec, wavenumbers_squared
from gridflex.plate import rigidity_from_te
from gridflex.solvers.finite_difference import FiniteDifferenceSolver, SolutionHistory

NU = 0.25
RHO_G = 3300.0 * 9.81  # (rho_m - 0) g, Pa m^-1


def _margin(n: int, h: float, low: float = 10e3, high: float = 60e3) -> tuple[GridSpec, np.ndarray]:
    """A te margin from *low* to *high* (tanh across x, half-width 60 km) on n² cells of *h*."""
    x = (np.arange(n) - n / 2) * h
    te = low + (high - low) * 0.5 * (1.0 + np.tanh(x / 60e3))
    return GridSpec(n, n, h, h), rigidity_from_te(te[None, :] * np.ones((n, 1)), 7e10, NU)


def _disc(shape: tuple[int, int], centre: tuple[int, int], radius: int, value: float) -> np.ndarray:
    j, i = np.indices(shape)
    return np.where(np.hypot(j - centre[0], i - centre[1]) < radius, value, 0.0)


def test_history_starts_without_an_operator_product_and_keeps_exact_products() -> None:
    """A load in the span of kept solutions starts at their Galerkin combination, whose
    residual comes from the kept products (K linear: common practice), so the solve takes
    at most one product per iteration plus the final true residual; the kept products are
    K x of the kept solutions; a load outside the span is solved to the tolerance."""
    spec, rigidity = _margin(48, 10e3)
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU)
    history = SolutionHistory(3)
    loads = [_disc(solver.shape, (20, 20), 6, 2e7), _disc(solver.shape, (30, 40), 4, 3e7)]
    for q in loads:
        solver.solve_full(q, history=history)
    assert len(history.solutions) == 2
    for w, product in zip(history.solutions, history.products, strict=True):
        exact = solver.apply(w, np.empty(solver.shape))
        assert_allclose(product, exact, rtol=0, atol=1e-12 * float(np.abs(exact).max()))
    products = 0
    apply = solver.apply

    def counted(w: np.ndarray, out: np.ndarray) -> np.ndarray:
        nonlocal products
        products += 1
        return apply(w, out)

    solver.apply = counted  # type: ignore[method-assign]
    inside = 0.4 * loads[0] - 1.3 * loads[1]
    w_warm, warm = solver.solve_full(inside, history=history)
    assert warm["iterations"] <= 1
    assert products <= warm["iterations"] + 1  # no product for the start
    solver.apply = apply  # type: ignore[method-assign]
    w_plain, plain = solver.solve_full(inside)
    assert plain["iterations"] > warm["iterations"]
    peak = float(np.abs(w_plain).max())
    assert_allclose(w_warm, w_plain, rtol=0, atol=1e-6 * peak)
    outside = inside + _disc(solver.shape, (60, 30), 5, 1e7)
    w_warm, warm = solver.solve_full(outside, history=history)
    w_tight, _ = solver.solve_full(outside, tolerance=1e-10)
    assert warm["accuracy"] <= warm["tolerance"]
    assert_allclose(w_warm, w_tight, rtol=0, atol=1e-6 * float(np.abs(w_tight).max()))
    assert len(history.solutions) == 3  # the oldest dropped at the size
    history.add(w_tight, solver.apply(w_tight, np.empty(solver.shape)))
    assert len(history.solutions) == 3 and history.solutions[-1] is w_tight


def test_spectral_term_margin_preconditioner_is_spd_and_converges_fast() -> None:
    """The implicit half-space step K + 2 eta |k| / (gamma h) (Bueler, Lingle & Brown 2007,
    Ann. Glaciol. 46, 97-105) on a te margin 10 -> 60 km: the blend in difference form
    (top level unweighted) is symmetric positive definite (common practice: CG needs it)
    and a disc load converges in few iterations to the deflection of a tight solve."""
    spec, rigidity = _margin(64, 10e3)
    gamma_h = (1.0 - 1.0 / math.sqrt(2.0)) * 100.0 * 3.15576e7  # 100 yr step (s)

    def symbol(shape: tuple[int, int]) -> np.ndarray:
        ky2, kx2 = wavenumbers_squared(shape, spec.dy, spec.dx)
        return 2.0 * 1e21 * np.sqrt(ky2 + kx2) / gamma_h

    solver = FiniteDifferenceSolver.build(
        spec, rigidity, RHO_G, NU, "periodic", spectral_symbol=symbol
    )
    blend = solver.preconditioner.blend
    assert blend.levels.size == 2
    blend.single = False
    rng = np.random.default_rng(7)
    u, v = rng.standard_normal((2, *solver.shape))
    pre = solver.preconditioner
    assert_allclose(np.vdot(pre.apply(u), v), np.vdot(u, pre.apply(v)), rtol=1e-10)
    assert np.vdot(pre.apply(u), u) > 0
    blend.single = True
    load = _disc(solver.shape, (32, 30), 12, 910.0 * 9.81 * 2000.0)
    w, info = solver.solve_full(load)
    assert info["iterations"] <= 12, info["iterations"]  # measured 10 (plain blend: 29)
    w_tight, _ = solver.solve_full(load, tolerance=1e-10)
    assert_allclose(w, w_tight, rtol=0, atol=1e-6 * float(np.abs(w_tight).max()))
