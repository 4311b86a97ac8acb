"""Blocked FFT filtering (gridflex.solvers.fft_buffers) equals the whole-grid transform.

A check of numerical equivalence (common practice), not of the physics; the physics of
the solve is in tests/solvers/test_finite_difference.py.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
from numpy.testing import assert_allclose

from gridflex.solvers import fft_buffers, row_blocks
from gridflex.solvers.fft_buffers import BlockedSpectralFilter


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


@pytest.mark.parametrize("direct", [True, False])
def test_padded_forward_through_rows_equals_the_plain_transform(direct, monkeypatch):
    # common practice: the padded rows transformed straight into the spectrum (pocketfft's
    # entry point with an output array, or its fallback) give scipy.fft's own numbers,
    # bit for bit, again on a second use of the same arrays
    from gridflex.solvers.viscous import padded_forward

    if not direct:
        monkeypatch.setattr(fft_buffers, "_direct_available", lambda: False)
    rng = np.random.default_rng(5)
    shape = (48, 45)
    out = np.full((shape[0], shape[1] // 2 + 1), np.nan + 0j)
    rows = np.zeros((37, shape[1]))
    for _ in range(2):
        values = rng.standard_normal((37, 29))
        plain = padded_forward(values, shape)
        assert np.array_equal(plain, scipy.fft.rfft2(values, s=shape))
        assert np.array_equal(padded_forward(values, shape, out.copy()), plain)
        assert np.array_equal(padded_forward(values, shape, out, rows), plain)
