"""The building blocks of the variable-rigidity solve: blocked loops, blocked FFT filtering,
the operator's sparse rows, BLAS thread limits, sharp-feature detection and the CG's
restart and stall handling.

These are checks of numerical equivalence and bookkeeping (common practice), not of the
physics; the physics of the solve is in tests/test_finite_difference.py.
"""

from __future__ import annotations

import itertools
import threading

import numpy as np
import pytest
import scipy.fft
from numpy.testing import assert_allclose
from threadpoolctl import threadpool_info

from gridflex.errors import ConvergenceError
from gridflex.grid import GridSpec
from gridflex.plate import rigidity_from_te
from gridflex.solvers import fft_buffers, row_blocks
from gridflex.solvers.blas_threads import single_threaded_blas
from gridflex.solvers.conjugate_gradient import conjugate_gradient
from gridflex.solvers.fft_buffers import BlockedSpectralFilter
from gridflex.solvers.finite_difference import (
    AXIS_EDGES,
    PlateOperator,
    finite_difference_deflection,
)
from gridflex.solvers.preconditioners import smooth_like_gaussian
from gridflex.solvers.rigidity_features import (
    BAND_FLEXURAL_PARAMETERS,
    BREAK_FLEXURAL_PARAMETERS,
    find_sharp_features,
    sharp_band,
)
from tests.helpers import random_broken_operator

NU = 0.25
STIFFNESS = 2270 * 9.81


def _filter_with_blocks(grid, fft_shape, transfer, dtype, monkeypatch, rows=None):
    if rows is not None:  # tiny blocks: many of them, shared among threads
        monkeypatch.setattr(row_blocks, "BLOCK_ELEMENTS", rows * fft_shape[1])
    spectral = BlockedSpectralFilter(grid.shape, fft_shape, dtype)
    out = np.empty(grid.shape)

    def forward(j0, j1, thread):
        spectral.row_buffer(thread, j1 - j0)[...] = grid[j0:j1]
        spectral.forward_rows(j0, j1, thread)

    def inverse(j0, j1, thread):
        out[j0:j1] = spectral.inverse_rows(j0, j1, thread)

    for _ in range(2):  # twice: the second use must not see the first's leftovers
        row_blocks.for_row_blocks(grid.shape[0], spectral.rows, forward)
        spectral.filter_columns(transfer.astype(dtype))
        row_blocks.for_row_blocks(grid.shape[0], spectral.rows, inverse)
    return out


@pytest.mark.parametrize("direct", [True, False])
@pytest.mark.parametrize(("shape", "fft_shape"), [((40, 36), (40, 36)), ((37, 29), (48, 45))])
@pytest.mark.parametrize(("dtype", "rtol"), [(np.float64, 1e-12), (np.float32, 2e-6)])
def test_blocked_filter_equals_zero_padded_fft_convolution(
    shape, fft_shape, dtype, rtol, direct, monkeypatch
):
    # common practice: the blocked row/column transforms are the real 2-D FFT; with a
    # zero-padded transform grid the result is the zero-padded circular convolution
    if not direct:
        monkeypatch.setattr(fft_buffers, "_direct_available", lambda: False)
    rng = np.random.default_rng(3)
    grid = rng.standard_normal(shape)
    transfer = rng.uniform(0.1, 2.0, (fft_shape[0], fft_shape[1] // 2 + 1))
    padded = np.zeros(fft_shape)
    padded[: shape[0], : shape[1]] = grid
    expected = scipy.fft.irfft2(scipy.fft.rfft2(padded) * transfer, s=fft_shape)
    got = _filter_with_blocks(grid, fft_shape, transfer, dtype, monkeypatch, rows=4)
    assert_allclose(
        got, expected[: shape[0], : shape[1]], rtol=0, atol=rtol * np.abs(expected).max()
    )


def test_row_blocks_return_in_block_order_and_dot_matches(monkeypatch):
    # common practice: block results come back in block order whatever the threads did
    monkeypatch.setattr(row_blocks, "BLOCK_ELEMENTS", 10)
    got = row_blocks.for_row_blocks(103, 3, lambda j0, j1, thread: (j0, j1))
    assert got == [(j, min(j + 3, 103)) for j in range(0, 103, 3)]
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((2, 50, 7))
    assert row_blocks.dot(a, b) == pytest.approx(float(np.sum(a * b)), rel=1e-13)


def test_smoothing_keeps_the_mean_and_has_the_gaussian_variance():
    # common practice: three box passes of width w have variance (w² - 1) / 4 per axis
    grid = np.zeros((41, 301))
    grid[20, 150] = 1.0
    out = smooth_like_gaussian(grid.copy(), (0.0, 8.0), ("wrap", "wrap"))
    assert out.sum() == pytest.approx(1.0, rel=1e-12)
    x = np.arange(301) - 150
    variance = float((out[20] * x**2).sum())
    assert variance == pytest.approx(8.0**2, rel=0.05)


@pytest.mark.parametrize("edges", list(itertools.product(AXIS_EDGES, repeat=2)))
def test_sparse_rows_equal_the_rows_of_the_product(edges):
    # common practice: K's rows assembled from the 13-point stencil are the rows of the
    # matrix-free product, for any node subset and on every kind of edge
    op, rng = random_broken_operator((13, 11), edges, seed=5)
    n = op.rigidity.size
    identity = np.eye(n)
    full = np.stack([op.apply(identity[k].reshape(op.shape)).ravel() for k in range(n)])
    nodes = np.sort(rng.choice(n, 40, replace=False))
    columns = np.sort(np.union1d(nodes, rng.choice(n, 60, replace=False)))
    rows = op.rows(nodes, columns).toarray()
    assert_allclose(rows, full[np.ix_(nodes, columns)], rtol=1e-13, atol=1e-13 * np.abs(full).max())
    assert_allclose(op.matrix().toarray(), full.T, rtol=1e-13, atol=1e-13 * np.abs(full).max())


def _blas_threads() -> list[int]:
    return [info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas"]


def test_single_threaded_blas_in_the_main_thread_only_and_restored():
    # common practice: the limit holds inside (nested too) and is undone after; other
    # threads leave BLAS alone
    before = _blas_threads()
    with single_threaded_blas():
        assert all(n == 1 for n in _blas_threads())
        with single_threaded_blas():
            assert all(n == 1 for n in _blas_threads())
        assert all(n == 1 for n in _blas_threads())
    assert _blas_threads() == before
    seen = {}

    def elsewhere() -> None:
        with single_threaded_blas():
            seen["inside"] = _blas_threads()

    worker = threading.Thread(target=elsewhere)
    worker.start()
    worker.join(5)
    assert seen["inside"] == before and _blas_threads() == before


def test_sharp_features_and_band_widths():
    # common practice (the band rules of gridflex.solvers.rigidity_features): a ten-fold
    # jump is sharp and widens by BAND_FLEXURAL_PARAMETERS flexural parameters of its weak
    # side; a break alone by BREAK_FLEXURAL_PARAMETERS; a constant plate has no sharp node
    n, h = 128, 2000.0
    constant = PlateOperator.build(np.full((n, n), 1e23), STIFFNESS, NU, h, h)
    assert not find_sharp_features(constant).nodes.any()
    low, high = 1e21, 1e24
    rigidity = np.full((n, n), low)
    rigidity[:, 64:] = high
    step = find_sharp_features(PlateOperator.build(rigidity, STIFFNESS, NU, h, h))
    assert step.nodes[:, 63:65].all() and not step.nodes[:, 30].any()
    alpha_low = (4 * low / STIFFNESS) ** 0.25
    assert step.band_width == pytest.approx(BAND_FLEXURAL_PARAMETERS * alpha_low, rel=1e-6)
    hinge = np.full((n, n), high)
    hinge[:, 60] = 0.0
    op = PlateOperator.build(hinge, STIFFNESS, NU, h, h)
    broken = find_sharp_features(op)
    alpha_high = (4 * high / STIFFNESS) ** 0.25
    assert broken.band_width == pytest.approx(BREAK_FLEXURAL_PARAMETERS * alpha_high, rel=1e-6)
    nodes, width, _ = sharp_band(op, broken.band_width, 10**6, broken.nodes)
    columns = np.unique(nodes % n)
    reach = int(width // h)
    assert columns.min() == 60 - 1 - reach and columns.max() == 60 + 1 + reach


def test_conjugate_gradient_restarts_then_reports_a_stall():
    # common practice: when the recurrence residual meets the tolerance but the true one
    # does not, the iteration restarts (telling the caller); a restart that does not halve
    # the true residual is round-off, reported at once instead of at the iteration limit
    n = 64
    second = np.diag(np.full(n, 2.0)) - np.diag(np.ones(n - 1), 1) - np.diag(np.ones(n - 1), -1)
    matrix = 1e6 * second @ second + 1e-3 * np.eye(n)
    rhs = np.random.default_rng(0).standard_normal((n, 1))

    def apply(x, out):
        out[...] = matrix @ x
        return out

    def identity(r, out, norm):
        out[...] = r
        return out

    x, _, residual = conjugate_gradient(apply, rhs, identity, 1e-8, 5000)
    assert residual <= 1e-8
    assert_allclose(x, np.linalg.solve(matrix, rhs), rtol=0, atol=1e-6 * np.abs(x).max())
    restarts = []
    with pytest.raises(ConvergenceError, match="stalled at a true relative residual"):
        conjugate_gradient(apply, rhs, identity, 1e-22, 5000, on_restart=lambda: restarts.append(1))
    assert restarts


def test_unreachable_tolerance_stops_early_with_the_round_off_limit():
    # common practice: a tolerance below the round-off floor of a stiff plate on fine cells
    # is reported as such after a couple of restarts, not after max_iterations
    n, h = 96, 1000.0
    x = np.arange(n) * h
    te = 30e3 + 25e3 * np.sin(2 * np.pi * x / (n * h))[None, :] * np.ones((n, 1))
    load = np.zeros((n, n))
    load[40:56, 40:56] = 2800 * 9.81 * 1000.0
    with pytest.raises(ConvergenceError, match="stalled.*round-off alone limits"):
        finite_difference_deflection(
            load,
            GridSpec(n, n, h, h),
            rigidity_from_te(te, 1e11, NU),
            STIFFNESS,
            NU,
            edges="periodic",
            tolerance=1e-12,
        )
