"""The aggregation multigrid that replaces band and blend when the band is over its caps.

Reference: the exact solution of the same discrete equations (a sparse direct solve,
SuperLU), common practice for checking an iterative solver; the multigrid method is that of
Vaněk, Mandel & Brezina (1996, Computing 56, "Algebraic multigrid by smoothed aggregation
for second and fourth order elliptic problems"), recalled from memory.
"""

from __future__ import annotations

import logging

import numpy as np
import pytest
import scipy.ndimage
import scipy.sparse
import scipy.sparse.linalg as spla
from numpy.testing import assert_allclose

from gridflex.errors import ConvergenceError
from gridflex.grid import GridSpec
from gridflex.plate import rigidity_from_te
from gridflex.solvers import multigrid
from gridflex.solvers.conjugate_gradient import SLOW_EVERY
from gridflex.solvers.finite_difference import FiniteDifferenceSolver
from gridflex.solvers.multigrid import MULTIGRID_TOLERANCE_FACTOR, AggregationPreconditioner
from gridflex.solvers.rigidity_features import find_sharp_features, sharp_band

E, NU = 1e11, 0.25
RHO_G = (3300.0 - 1030.0) * 9.81
N, DX = 96, 1e3


def _rough_map() -> tuple[np.ndarray, np.ndarray]:
    """Invented: te 0 or 60 km in patches with sharp jumps (a smooth random field
    thresholded), tapered to 0 at the edges; a disc load of 2 km of rock."""
    noise = np.random.default_rng(3).standard_normal((N, N))
    field = scipy.ndimage.gaussian_filter(noise, N / 16, mode="wrap")
    te = np.where(field > 0.0, 60e3, 0.0)
    i = np.arange(N)
    taper = np.clip(np.minimum(i, N - 1 - i) / (0.1 * N), 0.0, 1.0)
    te *= np.minimum(taper[:, None], taper[None, :])
    x = (i - N / 2 + 0.5) * DX
    xx, yy = np.meshgrid(x, x)
    load = np.where(np.hypot(xx + 8e3, yy) < 12e3, 2800.0 * 9.81 * 2000.0, 0.0)
    return rigidity_from_te(te, E, NU), load


def _quarter_of_band(spec: GridSpec, rigidity: np.ndarray) -> int:
    """A quarter of the band the features ask for (nodes): over the caps at any width."""
    probe = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=0)
    found = find_sharp_features(probe.operator)
    nodes, _, _ = sharp_band(
        probe.operator, found.band_width, 10**12, found.nodes, found.widths, 1e18
    )
    return nodes.size // 4


def _direct(solver: FiniteDifferenceSolver, load: np.ndarray) -> np.ndarray:
    full = np.zeros(solver.shape)
    full[solver.window] = load
    factor = spla.splu(
        solver.operator.matrix().tocsc(),
        permc_spec="MMD_AT_PLUS_A",
        diag_pivot_thresh=0.0,
        options={"SymmetricMode": True},
    )
    exact = factor.solve((solver.operator.area * full).ravel()).reshape(solver.shape)
    return np.asarray(exact[solver.window])


@pytest.fixture(scope="module")
def capped() -> tuple[FiniteDifferenceSolver, np.ndarray, int]:
    spec = GridSpec(N, N, DX, DX)
    rigidity, load = _rough_map()
    cap = _quarter_of_band(spec, rigidity)
    return FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap), load, cap


def test_band_over_its_caps_takes_multigrid_and_matches_a_direct_solve(capped):
    solver, load, _ = capped
    assert isinstance(solver.preconditioner, AggregationPreconditioner)
    w, info = solver.solve(load)
    assert info["preconditioner"] == "aggregation multigrid"
    assert info["band_nodes"] == 0 and info["blend_levels"].size == 0
    assert not info["at_round_off"]
    # the iteration stops at a tenth of the tolerance (the energy-norm estimate let larger
    # pointwise errors through with multigrid than with the band and blend)
    assert info["accuracy"] <= MULTIGRID_TOLERANCE_FACTOR * info["tolerance"]
    exact = _direct(solver, load)
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()


def test_the_case_is_hard_for_the_blend_alone(capped):
    """The blend without a band does not converge on this map (why the fallback exists)."""
    solver, load, _ = capped
    spec = GridSpec(N, N, DX, DX)
    rigidity, _ = _rough_map()
    blend = FiniteDifferenceSolver.build(
        spec, rigidity, RHO_G, NU, max_band_nodes=0, max_iterations=150
    )
    with pytest.raises(ConvergenceError):
        blend.solve(load)


def test_free_edges_over_the_caps_match_a_direct_solve():
    """A plate ending at the grid's edges (free, Kirchhoff: no margin) takes the multigrid
    just as well: its rigid-body modes are the near null space the coarse levels carry."""
    spec = GridSpec(N, N, DX, DX)
    rigidity, load = _rough_map()
    rigidity = np.maximum(rigidity, float(rigidity.max()) * 1e-3)  # no te = 0 at the edges
    probe = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, "free", max_band_nodes=0)
    found = find_sharp_features(probe.operator)
    nodes, _, _ = sharp_band(
        probe.operator, found.band_width, 10**12, found.nodes, found.widths, 1e18
    )
    solver = FiniteDifferenceSolver.build(
        spec, rigidity, RHO_G, NU, "free", max_band_nodes=nodes.size // 4
    )
    w, info = solver.solve(load)
    assert info["preconditioner"] == "aggregation multigrid"
    exact = _direct(solver, load)
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()


def test_multigrid_preconditioner_is_symmetric_positive_definite(capped):
    """CG needs a symmetric positive-definite preconditioner (common practice): one
    V-cycle whose smoothing after the coarse correction is the adjoint of that before
    (patch colours in reverse order, symmetric Gauss-Seidel below) is."""
    solver, _, _ = capped
    pre = solver.preconditioner
    rng = np.random.default_rng(11)
    u, v = rng.standard_normal((2, *solver.shape))
    assert_allclose(np.vdot(pre.apply(u), v), np.vdot(u, pre.apply(v)), rtol=1e-10)
    assert np.vdot(pre.apply(u), u) > 0
    out = np.empty(solver.shape)
    assert pre.apply(u, out) is out
    assert_allclose(out, pre.apply(u), rtol=0, atol=0)


def test_a_warm_start_is_used(capped):
    """Started from the solution of a nearby load, the solve takes fewer iterations."""
    solver, load, _ = capped
    w, info = solver.solve(load)
    again, info2 = solver.solve(1.01 * load, start=w)
    assert info2["iterations"] < info["iterations"]
    exact = _direct(solver, 1.01 * load)
    assert np.abs(again - exact).max() <= 1e-6 * np.abs(exact).max()


def test_a_band_that_fits_keeps_band_and_blend():
    spec = GridSpec(N, N, DX, DX)
    rigidity, load = _rough_map()
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU)
    _, info = solver.solve(load)
    assert info["preconditioner"] == "band and blend"
    assert info["band_nodes"] > 0


def test_multigrid_that_does_not_fit_falls_back_to_the_partial_band(monkeypatch, caplog):
    """When the multigrid's estimated memory does not fit, the partial band and blend are
    used as before, with a warning naming the step."""
    spec = GridSpec(N, N, DX, DX)
    rigidity, _ = _rough_map()
    cap = _quarter_of_band(spec, rigidity)
    monkeypatch.setattr(multigrid, "AGGREGATION_BYTES_PER_NODE", 1e15)
    with caplog.at_level(logging.WARNING, logger="gridflex.solvers.finite_difference"):
        solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    assert solver.preconditioner.description == "band and blend"
    assert 0 < solver.preconditioner.band_size <= cap
    assert "multigrid set-up" in caplog.text and "partial band" in caplog.text


def _first_level(capped_solver: FiniteDifferenceSolver):
    """K, its strength of connection, T and the coarse modes of the finest level, built
    as the set-up builds them."""
    from pyamg.aggregation.aggregate import standard_aggregation
    from pyamg.aggregation.tentative import fit_candidates
    from pyamg.strength import symmetric_strength_of_connection

    matrix = capped_solver.operator.matrix()
    modes = multigrid.rigid_body_modes(capped_solver.shape)
    strength = symmetric_strength_of_connection(matrix, theta=multigrid.STRENGTH_THRESHOLD)
    aggregates, _ = standard_aggregation(strength)
    tentative, coarse_modes = fit_candidates(aggregates, modes)
    return matrix, strength, tentative, coarse_modes, modes


def test_energy_minimised_prolongation_matches_the_library_and_keeps_the_modes(capped):
    """The set-up's own energy minimisation (one pattern, value arrays) gives pyamg's
    prolongation to round-off, and P B_c = B_f: the rigid-body modes stay exactly in the
    coarse space (Olson, Schroder & Tuminaro 2011, SIAM J. Sci. Comput. 33, the
    constraint of the method; recalled from memory)."""
    from pyamg.aggregation.smooth import energy_prolongation_smoother

    solver, _, _ = capped
    matrix, strength, tentative, coarse_modes, modes = _first_level(solver)
    reference = energy_prolongation_smoother(
        matrix, tentative.copy(), strength, coarse_modes, None, (False, {})
    )
    indptr, indices, values = multigrid._pattern(strength, tentative)
    ours = multigrid.smoothed_prolongation(matrix, indptr, indices, values, coarse_modes)
    assert ours.shape == reference.shape
    scale = np.abs(reference.toarray()).max()
    assert np.abs(ours.toarray() - reference.toarray()).max() <= 1e-10 * scale
    # the modes: T B_c = B_f exactly where aggregated (fit_candidates), and P keeps it
    aggregated = np.diff(tentative.indptr) > 0
    assert_allclose((ours @ coarse_modes)[aggregated], modes[aggregated], rtol=0, atol=1e-10)


def test_galerkin_product_in_blocks_equals_the_whole_product(capped, monkeypatch):
    """Pᵀ K P summed over blocks of K's rows equals the product taken whole (common
    practice: the sum over rows of a matrix product)."""
    solver, _, _ = capped
    matrix, strength, tentative, coarse_modes, _ = _first_level(solver)
    indptr, indices, values = multigrid._pattern(strength, tentative)
    prolongation = multigrid.smoothed_prolongation(matrix, indptr, indices, values, coarse_modes)
    monkeypatch.setattr(multigrid, "GALERKIN_BLOCK_ROWS", 500)
    monkeypatch.setattr(multigrid, "GALERKIN_BLOCKS", 7)
    blocked = multigrid._galerkin(matrix, prolongation, 3)
    whole = (prolongation.T @ matrix @ prolongation).toarray()
    assert blocked.blocksize == (3, 3)
    assert np.abs(blocked.toarray() - whole).max() <= 1e-12 * np.abs(whole).max()
    assert_allclose(
        blocked.toarray(), blocked.toarray().T, rtol=0, atol=1e-12 * np.abs(whole).max()
    )


def _fine_rough_map(n: int = 160, dx: float = 500.0) -> tuple[GridSpec, np.ndarray, np.ndarray]:
    """Invented: te 0-100 km changing every 1.5 cells of *dx* (a random field of
    correlation 1.5 cells, clipped), tapered at the edges; a disc load of 2 km of rock.
    Its many small stiff patches hinged by te = 0 have near-null modes the rigid-body
    modes do not span."""
    noise = np.random.default_rng(17).standard_normal((n, n))
    field = scipy.ndimage.gaussian_filter(noise, 1.5, mode="wrap")
    te = 100e3 * np.clip(0.5 + (field - field.mean()) / field.std() / 2.0, 0.0, 1.0)
    i = np.arange(n)
    taper = np.clip(np.minimum(i, n - 1 - i) / (0.1 * n), 0.0, 1.0)
    te *= np.minimum(taper[:, None], taper[None, :])
    x = (i - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    load = np.where(np.hypot(xx + 0.08 * n * dx, yy) < 0.12 * n * dx, 2800.0 * 9810.0 * 2.0, 0.0)
    return GridSpec(n, n, dx, dx), rigidity_from_te(te, E, NU), load


@pytest.fixture(scope="module")
def fine_rough() -> tuple[GridSpec, np.ndarray, np.ndarray, int]:
    spec, rigidity, load = _fine_rough_map()
    return spec, rigidity, load, _quarter_of_band(spec, rigidity)


def test_slow_convergence_strengthens_the_multigrid(fine_rough, monkeypatch):
    """Adaptive smoothed aggregation (Brezina, Falgout, MacLachlan, Manteuffel, McCormick &
    Ruge 2004, SIAM J. Sci. Comput. 25, recalled from memory): when the iteration would
    not converge within its limit, the errors the levels reduce slowest join the rigid-body
    modes; the solve then converges within the limit, matches a direct solve (common
    practice) and the next solve takes far fewer iterations than with the modes alone."""
    spec, rigidity, load, cap = fine_rough
    # point Gauss-Seidel: with the patch smoother this map converges too fast to need it
    monkeypatch.setattr(multigrid, "_patch_smoother", lambda *args: None)
    with monkeypatch.context() as patch:
        patch.setattr(multigrid, "MAX_ADDED_MODES", 0)  # the rigid-body modes alone
        plain = FiniteDifferenceSolver.build(
            spec, rigidity, RHO_G, NU, max_band_nodes=cap, max_iterations=2000
        )
        _, alone = plain.solve(load)
    assert plain.preconditioner.added_modes is None
    limit = int(0.8 * alone["iterations"])  # too few for the rigid-body modes alone
    solver = FiniteDifferenceSolver.build(
        spec, rigidity, RHO_G, NU, max_band_nodes=cap, max_iterations=limit
    )
    assert isinstance(solver.preconditioner, AggregationPreconditioner)
    w, info = solver.solve(load)
    added = solver.preconditioner.added_modes
    assert added is not None and added.shape == (solver.operator.rigidity.size, 3)
    exact = _direct(solver, load)
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()
    _, again = solver.solve(load)
    assert again["iterations"] < 0.5 * alone["iterations"]
    pre = solver.preconditioner  # still symmetric positive definite (common practice)
    u, v = np.random.default_rng(5).standard_normal((2, *solver.shape))
    assert_allclose(np.vdot(pre.apply(u), v), np.vdot(u, pre.apply(v)), rtol=1e-10)
    assert np.vdot(pre.apply(u), u) > 0


def test_patch_smoother_halves_the_iterations_on_a_rough_map(fine_rough, monkeypatch):
    """Block Gauss-Seidel over overlapping patches (tests/solvers/test_patch_smoother.py)
    removes the errors that sit on a few cells, which point Gauss-Seidel and the rigid-body
    modes leave: measured 43 against 118 iterations here (56 with one grid of patches).
    The result matches a direct solve (common practice), and the V-cycle stays symmetric
    positive definite."""
    spec, rigidity, load, cap = fine_rough
    monkeypatch.setattr(multigrid, "MAX_ADDED_MODES", 0)
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    pre = solver.preconditioner
    assert isinstance(pre, AggregationPreconditioner) and pre.patches is None
    assert pre.strengthen(multigrid.PATCH_HORIZON + 1, 10**6)  # the patches from the start
    assert pre.patches is not None
    w, info = solver.solve(load)
    exact = _direct(solver, load)
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()
    u, v = np.random.default_rng(6).standard_normal((2, *solver.shape))
    assert_allclose(np.vdot(pre.apply(u), v), np.vdot(u, pre.apply(v)), rtol=1e-10)
    assert np.vdot(pre.apply(u), u) > 0
    monkeypatch.setattr(multigrid, "_patch_smoother", lambda *args: None)
    pointwise = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    assert pointwise.preconditioner.patches is None
    _, plain = pointwise.solve(load)
    assert info["iterations"] < 0.5 * plain["iterations"]


def test_a_solve_calls_in_the_patches_only_when_it_is_slow(capped, fine_rough):
    """A map the point smoother handles within SLOW_EVERY iterations keeps it (the patches
    would cost more than they save, measured in multigrid.PATCH_HORIZON); the rough map,
    still short of its tolerance there, gets the patches at the first check and still
    matches a direct solve (common practice)."""
    quick, load, _ = capped
    _, info = quick.solve(load)
    assert info["iterations"] <= SLOW_EVERY and quick.preconditioner.patches is None
    spec, rigidity, rough_load, cap = fine_rough
    slow = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    w, info = slow.solve(rough_load)
    assert info["iterations"] > SLOW_EVERY and slow.preconditioner.patches is not None
    exact = _direct(slow, rough_load)
    assert np.abs(w - exact).max() <= 1e-6 * np.abs(exact).max()


def test_patches_come_first_and_stay_when_vectors_are_added(fine_rough):
    spec, rigidity, load, cap = fine_rough
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    pre = solver.preconditioner
    assert pre.patches is None
    # not slow enough for either (no further iterations projected beyond the horizon)
    assert not pre.strengthen(multigrid.PATCH_HORIZON, 10**6)
    assert pre.patches is None and pre.added_modes is None
    # slow: the patches alone first
    assert pre.strengthen()
    patches = pre.patches
    assert patches is not None and pre.added_modes is None
    # slower than SLOW_HORIZON: vectors too, the patches kept
    assert not pre.strengthen(multigrid.SLOW_HORIZON - 1, 10**6)
    assert pre.strengthen(multigrid.SLOW_HORIZON + 1, 10**6)
    assert pre.patches is patches and pre.added_modes is not None
    u, v = np.random.default_rng(7).standard_normal((2, *solver.shape))
    assert_allclose(np.vdot(pre.apply(u), v), np.vdot(u, pre.apply(v)), rtol=1e-10)


def test_a_strengthening_that_does_not_fit_keeps_the_multigrid(fine_rough, monkeypatch, caplog):
    spec, rigidity, load, cap = fine_rough
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU, max_band_nodes=cap)
    pre = solver.preconditioner
    assert isinstance(pre, AggregationPreconditioner)
    assert pre.strengthen() and pre.patches is not None  # (the patches first)
    levels = pre.levels
    cycles = []
    cycle = pre._cycle
    monkeypatch.setattr(pre, "_cycle", lambda *args: cycles.append(1) or cycle(*args))
    with monkeypatch.context() as patch:
        patch.setattr(multigrid, "AGGREGATION_BYTES_PER_NODE", 1e18)
        with caplog.at_level(logging.WARNING, logger="gridflex.solvers.multigrid"):
            assert pre.strengthen() is False
    assert "stays as it is" in caplog.text
    assert pre.levels is levels and pre.added_modes is None
    # refused before its V-cycles, and not tried again (each try would cost
    # CANDIDATE_CYCLES cycles and a warning every SLOW_EVERY iterations)
    caplog.clear()
    assert pre.strengthen() is False
    assert cycles == [] and "stays as it is" not in caplog.text


def test_band_and_blend_have_nothing_to_strengthen():
    spec = GridSpec(N, N, DX, DX)
    rigidity, _ = _rough_map()
    solver = FiniteDifferenceSolver.build(spec, rigidity, RHO_G, NU)
    assert not isinstance(solver.preconditioner, AggregationPreconditioner)
    assert solver.preconditioner.strengthen() is False


def test_coarsest_factor_solves_around_an_empty_row():
    """A zero column of P leaves an all-zero row and column in the coarsest operator; its
    factor still exists, solves the rest exactly (common practice: a direct solve of the
    reduced system) and returns zero on the empty unknown."""
    rng = np.random.default_rng(2)
    basis = rng.standard_normal((5, 5))
    reduced = basis @ basis.T + 5.0 * np.eye(5)  # symmetric positive definite
    full = np.zeros((6, 6))
    keep = [0, 1, 3, 4, 5]
    full[np.ix_(keep, keep)] = reduced
    rhs = np.zeros(6)
    rhs[keep] = rng.standard_normal(5)
    x = multigrid.coarsest_factor(scipy.sparse.bsr_array(full, blocksize=(3, 3))).solve(rhs)
    assert x[2] == 0.0
    assert_allclose(x[keep], np.linalg.solve(reduced, rhs[keep]), rtol=1e-12)
