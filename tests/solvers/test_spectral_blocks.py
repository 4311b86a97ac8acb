"""The blocked spectral solve (``SpectralProblem.response``) equals the plain zero-padded FFT solve.

Checks of numerical equivalence (common practice), not of the physics: the physics of the
spectral solve is checked against published solutions in tests/solvers/test_spectral.py.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
from numpy.testing import assert_allclose

from gridflex import InputError
from gridflex.grid import GridSpec, wavenumbers_squared
from gridflex.solvers import fft_buffers, row_blocks, spectral
from gridflex.solvers.spectral import SpectralProblem, transfer_function

STIFFNESS = 2300.0 * 9.81  # (rho_m - rho_w) g, Pa/m
RIGIDITY = 1e22  # N m (te about 12 km)


def _plain_solve(problem: SpectralProblem, load: np.ndarray) -> np.ndarray:
    """Zero-pad, rfft2, times the transfer function, irfft2, crop: the textbook solve."""
    padded = np.zeros(problem.shape)
    padded[: load.shape[0], : load.shape[1]] = load
    spectrum = scipy.fft.rfft2(padded) * problem.transfer()
    full = scipy.fft.irfft2(spectrum, s=problem.shape)
    return full[: load.shape[0], : load.shape[1]]


@pytest.mark.parametrize("direct", [True, False])
@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("block_rows", [None, 4])
@pytest.mark.parametrize("forces", [(0.0, 0.0), (-2e12, 1e12)])
def test_response_equals_plain_fft_solve(direct, periodic, block_rows, forces, monkeypatch):
    # common practice: the row/column transforms in blocks are the real 2-D FFT, the rows
    # of zero padding contribute nothing to the transforms along x
    if not direct:
        monkeypatch.setattr(fft_buffers, "_direct_available", lambda: False)
    if block_rows is not None:  # many tiny blocks, shared among threads
        monkeypatch.setattr(row_blocks, "BLOCK_ELEMENTS", 1)
    rng = np.random.default_rng(7)
    load = rng.standard_normal((37, 29)) * 1e6 + 3e5
    spec = GridSpec(ny=37, nx=29, dy=3e3, dx=2e3)
    problem = SpectralProblem.build(spec, RIGIDITY, STIFFNESS, *forces, periodic=periodic)
    assert periodic or (problem.shape[0] > 37 and problem.shape[1] > 29)
    response = problem.response(load)
    expected = _plain_solve(problem, load)
    assert_allclose(response.deflection, expected, rtol=0, atol=1e-12 * np.abs(expected).max())
    assert response.deflection.flags.c_contiguous and response.deflection.dtype == np.float64
    assert response.load_magnitude == pytest.approx(np.abs(load).sum(), rel=1e-13)
    # Σ w over the FFT domain (read from the k = 0 terms) against the sum of the full grid
    padded = np.zeros(problem.shape)
    padded[:37, :29] = load
    full = scipy.fft.irfft2(scipy.fft.rfft2(padded) * problem.transfer(), s=problem.shape)
    plain = abs(STIFFNESS * full.sum() - load.sum()) / np.abs(load).sum()
    assert response.force_balance < 1e-12 and plain < 1e-12
    w, balance = problem.deflection(load)
    assert_allclose(w, response.deflection, rtol=0, atol=0)
    assert balance == response.force_balance


def test_response_casts_the_load_and_keeps_a_given_magnitude():
    # common practice: a float32 or integer load is solved as its float64 values
    rng = np.random.default_rng(8)
    load = rng.integers(-1000, 1000, (20, 24))
    problem = SpectralProblem.build(GridSpec(ny=20, nx=24, dy=2e3, dx=2e3), RIGIDITY, STIFFNESS)
    as_float = problem.response(load.astype(np.float64))
    for values in (load, load.astype(np.float32)):
        assert_allclose(problem.response(values).deflection, as_float.deflection, rtol=0, atol=0)
    scaled = problem.response(load.astype(np.float64), load_magnitude=1.0)
    assert scaled.load_magnitude == 1.0
    assert scaled.force_balance == pytest.approx(
        as_float.force_balance * np.abs(load).sum(), rel=1e-12, abs=1e-300
    )


def test_local_response_and_shape_check():
    # te = 0 without in-plane force: w = q / (drho g), local (Airy) isostasy (common practice)
    load = np.arange(30.0).reshape(5, 6) - 10.0
    problem = SpectralProblem.build(GridSpec(ny=5, nx=6, dy=1e3, dx=1e3), 0.0, STIFFNESS)
    response = problem.response(load)
    assert_allclose(response.deflection, load / STIFFNESS, rtol=1e-15)
    assert response.load_magnitude == np.abs(load).sum()
    assert response.force_balance < 1e-14
    with pytest.raises(InputError, match=r"load has shape \(6, 5\)"):
        problem.response(load.T)


@pytest.mark.parametrize("shape", [(4, 4), (7, 9), (6, 8), (65, 64), (64, 33)])
def test_transfer_function_mirrored_rows(shape, monkeypatch):
    # common practice: the rows built once and mirrored equal the formula on every row
    monkeypatch.setattr(spectral, "_BLOCK_ROWS", 2)  # many blocks, shared among threads
    transfer_function.cache_clear()
    ky2, kx2 = wavenumbers_squared(shape, 1.5e3, 2e3)
    for force_x, force_y in ((0.0, 0.0), (-3e12, 2e12)):
        built = transfer_function(shape, 1.5e3, 2e3, RIGIDITY, STIFFNESS, force_x, force_y)
        k2 = ky2 + kx2
        direct = 1.0 / (RIGIDITY * k2 * k2 + force_x * kx2 + force_y * ky2 + STIFFNESS)
        assert_allclose(built, direct, rtol=1e-15, atol=0)
    transfer_function.cache_clear()
