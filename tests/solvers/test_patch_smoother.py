"""Block Gauss-Seidel over square patches, the finest smoother of the aggregation multigrid.

References: block Gauss-Seidel (Varga 1962, "Matrix Iterative Analysis", ch. 3, recalled
from memory) computed here the slow way, one patch after another with dense matrices; the
symmetry a preconditioner of conjugate gradients needs is common practice.
"""

from __future__ import annotations

import logging

import numpy as np
import pytest
import scipy.ndimage
import scipy.sparse as sp
from numpy.testing import assert_allclose

from gridflex.errors import InputError
from gridflex.grid import GridSpec
from gridflex.plate import rigidity_from_te
from gridflex.solvers import patch_smoother
from gridflex.solvers.finite_difference import FiniteDifferenceSolver
from gridflex.solvers.patch_smoother import PatchSmoother, patch_bytes

E, NU = 1e11, 0.25
RHO_G = (3300.0 - 1030.0) * 9.81


def _operator(
    ny: int, nx: int, dx: float = 2e3, edges: str = "free"
) -> tuple[sp.csr_array, tuple[int, int]]:
    """K of an invented rough plate (te 0-60 km changing every two cells) with free (or
    periodic) edges: the grid's own shape."""
    noise = np.random.default_rng(4).standard_normal((ny, nx))
    field = scipy.ndimage.gaussian_filter(noise, 2.0)
    te = 60e3 * np.clip(0.5 + field / field.std() / 2.0, 0.0, 1.0)
    rigidity = np.maximum(rigidity_from_te(te, E, NU), 1e18)
    solver = FiniteDifferenceSolver.build(
        GridSpec(ny, nx, dx, dx), rigidity, RHO_G, NU, edges, max_band_nodes=0
    )
    return sp.csr_array(solver.operator.matrix()), solver.shape


def _patches_by_hand(
    shape: tuple[int, int], size: int, offsets: tuple[int, ...]
) -> list[frozenset[int]]:
    """The patches, as sets of nodes: for each grid starting *offset* nodes before the
    first row and column, squares of *size* x *size* nodes cut by the edges."""
    ny, nx = shape
    index = np.arange(ny * nx).reshape(shape)
    patches = []
    for offset in offsets:
        for top in range(-offset, ny, size):
            for left in range(-offset, nx, size):
                block = index[max(top, 0) : top + size, max(left, 0) : left + size]
                patches.append(frozenset(block.ravel().tolist()))
    return patches


def _patch_after_patch(dense: np.ndarray, smoother: PatchSmoother, rhs: np.ndarray) -> np.ndarray:
    """Block Gauss-Seidel the slow way: the smoother's patches in its colour order, each
    solved in turn against the residual of the present x."""
    x = np.zeros_like(rhs)
    for colour in smoother.colours:
        for patch in colour.nodes:
            nodes = patch[patch < rhs.size]
            residual = rhs - dense @ x
            x[nodes] += np.linalg.solve(dense[np.ix_(nodes, nodes)], residual[nodes])
    return x


@pytest.mark.parametrize(
    ("shape", "size", "overlap"),
    [((27, 22), 4, True), ((19, 30), 8, True), ((16, 16), 3, True), ((19, 30), 8, False)],
)
def test_a_sweep_is_block_gauss_seidel_by_patches(shape, size, overlap):
    matrix, shape = _operator(*shape)
    dense = matrix.toarray()
    rhs = np.random.default_rng(1).standard_normal(dense.shape[0])
    smoother = PatchSmoother.build(matrix, shape, size, overlap)
    offsets = (0, size // 2) if overlap else (0,)
    # the patches are the squares of each grid, each once
    built = [
        frozenset(patch[patch < rhs.size].tolist())
        for colour in smoother.colours
        for patch in colour.nodes
    ]
    assert sorted(map(sorted, built)) == sorted(map(sorted, _patches_by_hand(shape, size, offsets)))
    x, residual = smoother.smooth(rhs)
    expected = _patch_after_patch(dense, smoother, rhs)
    assert_allclose(x[:-1], expected, rtol=0, atol=1e-9 * np.abs(expected).max())
    # the residual is kept: b - K x
    assert_allclose(residual[:-1], rhs - dense @ x[:-1], atol=1e-9 * np.abs(rhs).max())
    # and the reverse sweep goes through the colours backwards
    smoother.sweep(x, residual, reverse=True)
    assert_allclose(residual[:-1], rhs - dense @ x[:-1], atol=1e-9 * np.abs(rhs).max())


@pytest.mark.parametrize(("shape", "size"), [((25, 17), 8), ((27, 22), 4), ((18, 31), 6)])
def test_periodic_edges_keep_coupled_patches_apart(shape, size):
    """On a periodic grid the stencil reaches across the edges, so a patch at one end
    must not share a colour with one at the other (odd patch counts, thin end patches):
    the sweep equals patch-after-patch Gauss-Seidel in its own colour order."""
    matrix, shape = _operator(*shape, edges="periodic")
    dense = matrix.toarray()
    ny, nx = shape
    assert dense[0, nx - 1] != 0.0  # (the operator does wrap round)
    smoother = PatchSmoother.build(matrix, shape, size)
    rhs = np.random.default_rng(8).standard_normal(dense.shape[0])
    x, _ = smoother.smooth(rhs)
    expected = _patch_after_patch(dense, smoother, rhs)
    assert_allclose(x[:-1], expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_forward_then_reverse_sweep_is_symmetric_positive_definite():
    """The smoother's two sweeps, as in the V-cycle, are each other's adjoints."""
    matrix, shape = _operator(26, 21)
    smoother = PatchSmoother.build(matrix, shape, 4)

    def both(rhs: np.ndarray) -> np.ndarray:
        x, residual = smoother.smooth(rhs)
        smoother.sweep(x, residual, reverse=True)
        return x[:-1]

    u, v = np.random.default_rng(2).standard_normal((2, matrix.shape[0]))
    assert_allclose(np.vdot(both(u), v), np.vdot(u, both(v)), rtol=1e-10)
    assert np.vdot(both(u), u) > 0


def test_one_patch_over_the_whole_grid_solves_exactly():
    matrix, shape = _operator(7, 6, 50e3)  # (well conditioned: an exact solve is exact)
    rhs = np.random.default_rng(3).standard_normal(matrix.shape[0])
    x, residual = PatchSmoother.build(matrix, shape, 8, overlap=False).smooth(rhs)
    assert_allclose(matrix @ x[:-1], rhs, atol=1e-10 * np.abs(rhs).max())
    assert np.abs(residual[:-1]).max() <= 1e-10 * np.abs(rhs).max()


def test_bad_sizes_and_memory_are_refused(monkeypatch):
    matrix, shape = _operator(12, 12)
    with pytest.raises(ValueError, match="at least 3"):
        PatchSmoother.build(matrix, shape, 2)
    with pytest.raises(ValueError, match="for a grid of"):
        PatchSmoother.build(matrix, (12, 11), 4)
    assert patch_bytes(1000, 8) > patch_bytes(1000, 4) > 0
    monkeypatch.setattr(patch_smoother, "ENTRIES_PER_NODE", 1e15)
    with pytest.raises(InputError, match="patch smoother"):
        PatchSmoother.build(matrix, shape, 4)


def test_multigrid_without_room_for_patches_smooths_pointwise(monkeypatch, caplog):
    from gridflex.solvers import multigrid

    operator = FiniteDifferenceSolver.build(
        GridSpec(40, 40, 500.0, 500.0),
        np.full((40, 40), 1e23),
        RHO_G,
        NU,
        "free",
        max_band_nodes=0,
    ).operator
    monkeypatch.setattr(patch_smoother, "ENTRIES_PER_NODE", 1e15)
    monkeypatch.setattr(multigrid, "MAX_COARSE_NODES", 200)
    pre = multigrid.AggregationPreconditioner.build(operator)
    assert pre.levels and pre.patches is None  # (built only when a solve is slow)
    with caplog.at_level(logging.WARNING, logger="gridflex.solvers.multigrid"):
        assert pre.strengthen(1.0, 10**6) is False  # the patches do not fit; no vectors
    assert pre.patches is None
    assert "point Gauss-Seidel" in caplog.text
    u = np.random.default_rng(5).standard_normal(operator.shape)
    assert np.vdot(pre.apply(u), u) > 0
