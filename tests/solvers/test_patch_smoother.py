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


def _operator(ny: int, nx: int, dx: float = 2e3) -> tuple[sp.csr_array, tuple[int, int]]:
    """K of an invented rough plate (te 0-60 km changing every two cells) with free
    edges: the grid's own shape."""
    noise = np.random.default_rng(4).standard_normal((ny, nx))
    field = scipy.ndimage.gaussian_filter(noise, 2.0)
    te = 60e3 * np.clip(0.5 + field / field.std() / 2.0, 0.0, 1.0)
    rigidity = np.maximum(rigidity_from_te(te, E, NU), 1e18)
    solver = FiniteDifferenceSolver.build(
        GridSpec(ny, nx, dx, dx), rigidity, RHO_G, NU, "free", max_band_nodes=0
    )
    return sp.csr_array(solver.operator.matrix()), solver.shape


def _slow_sweep(
    matrix: np.ndarray,
    shape: tuple[int, int],
    size: int,
    rhs: np.ndarray,
    x: np.ndarray,
    offsets: tuple[int, ...],
) -> np.ndarray:
    """Block Gauss-Seidel by hand: for each grid of patches (starting *offset* nodes before
    the first row and column), colours (patch row parity, patch column parity) in the
    order (0, 0), (0, 1), (1, 0), (1, 1), each patch solved in turn against the residual of
    the present x."""
    ny, nx = shape
    index = np.arange(ny * nx).reshape(shape)
    for offset in offsets:
        for row_parity, column_parity in [(0, 0), (0, 1), (1, 0), (1, 1)]:
            for patch_row in range(row_parity, (ny + offset) // size + 1, 2):
                for patch_column in range(column_parity, (nx + offset) // size + 1, 2):
                    top, left = patch_row * size - offset, patch_column * size - offset
                    rows = slice(max(top, 0), max(top + size, 0))
                    columns = slice(max(left, 0), max(left + size, 0))
                    nodes = index[rows, columns].ravel()
                    if nodes.size == 0:
                        continue
                    residual = rhs - matrix @ x
                    block = matrix[np.ix_(nodes, nodes)]
                    x[nodes] += np.linalg.solve(block, residual[nodes])
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
    assert len(smoother.colours) == (8 if overlap else 4)
    x, residual = smoother.smooth(rhs)
    offsets = (0, size // 2) if overlap else (0,)
    expected = _slow_sweep(dense, shape, size, rhs, np.zeros_like(rhs), offsets)
    assert_allclose(x[:-1], expected, rtol=0, atol=1e-9 * np.abs(expected).max())
    # the residual is kept: b - K x
    assert_allclose(residual[:-1], rhs - dense @ x[:-1], atol=1e-9 * np.abs(rhs).max())
    # and the reverse sweep goes through the colours backwards
    smoother.sweep(x, residual, reverse=True)
    assert_allclose(residual[:-1], rhs - dense @ x[:-1], atol=1e-9 * np.abs(rhs).max())


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

    matrix, shape = _operator(40, 40, 500.0)
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
    with caplog.at_level(logging.WARNING, logger="gridflex.solvers.multigrid"):
        pre = multigrid.AggregationPreconditioner.build(operator)
    assert pre.levels and pre.patches is None
    assert "point Gauss-Seidel" in caplog.text
    u = np.random.default_rng(5).standard_normal(operator.shape)
    assert np.vdot(pre.apply(u), u) > 0
