"""Per-wavenumber relaxation kernels and the exact exponential update."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
from numpy.testing import assert_allclose

from gridflex import InputError
from gridflex.constants import SECONDS_PER_YEAR
from gridflex.grid import GridSpec
from gridflex.solvers.viscous import SpectralRelaxation

RHO_M, G, ETA, D = 3300.0, 9.81, 1e21, 1e24


def _cosine_mode(n: int = 32, dx: float = 100e3, m: int = 2):
    """A load cos(kx x) on a periodic grid: one Fourier mode, k = 2 pi m / (n dx)."""
    x = np.arange(n) * dx
    k = 2 * np.pi * m / (n * dx)
    load = 1e6 * np.cos(k * x)[None, :] * np.ones((n, 1))
    return GridSpec(n, n, dx, dx), load, k


def _engine(spec, model, interpolation="linear", tau_years=3000.0):
    return SpectralRelaxation.build(
        spec,
        D,
        RHO_M * G,
        model,
        ETA,
        tau_years * SECONDS_PER_YEAR,
        interpolation=interpolation,
        periodic=True,
    )


@pytest.mark.parametrize("interpolation", ["linear", "previous"])
def test_single_mode_relaxes_with_half_space_time(interpolation):
    # Bueler, Lingle & Brown 2007 (Ann. Glaciol. 46): 2 eta |k| dW/dt + (rho_m g + D k^4) W = Q,
    # so a step load gives W = Q/beta (1 - exp(-t/tau)), tau = 2 eta k / beta; for D = 0 this is
    # the half-space time 4 pi eta / (rho g lambda) (Haskell 1935, from memory).
    spec, load, k = _cosine_mode()
    beta = RHO_M * G + D * k**4
    tau = 2 * ETA * k / beta
    engine = _engine(spec, "half-space", interpolation)
    engine.set_load(load)
    t = 0.0
    for dt in (0.3 * tau, 0.7 * tau, 2.0 * tau):
        engine.step(dt, load)
        t += dt
        expected = load / beta * (1 - np.exp(-t / tau))
        # exact update: agreement to round-off (common practice: 1e-10 of the amplitude)
        scale = np.abs(load / beta).max()
        assert_allclose(engine.deflection(), expected, rtol=0, atol=1e-10 * scale)


def test_linear_ramp_is_integrated_exactly():
    # dW/dt = (Q(t)/beta - W)/tau with Q = Q1 t / T from rest has the solution
    # W = (Q1 / (beta T)) (t - tau (1 - exp(-t/tau))): calculus of the linear ODE (common practice).
    spec, load, k = _cosine_mode(m=3)
    beta = RHO_M * G + D * k**4
    tau = 2 * ETA * k / beta
    ramp = 5 * tau
    engine = _engine(spec, "half-space", "linear")
    times = np.linspace(0, ramp, 4)[1:]
    t_prev = 0.0
    for t in times:
        engine.step(t - t_prev, load * t / ramp)
        t_prev = t
    t = times[-1]
    expected = load / (beta * ramp) * (t - tau * (1 - np.exp(-t / tau)))
    assert_allclose(engine.deflection(), expected, rtol=0, atol=1e-10 * np.abs(load / beta).max())


def test_relaxing_model_has_one_time_for_all_wavelengths():
    # Le Meur & Huybrechts 1996 (Ann. Glaciol. 23): dw/dt = (w_eq - w)/tau for every wavelength.
    spec, load, k = _cosine_mode(m=1)
    spec2, load2, k2 = _cosine_mode(m=5)
    tau = 3000.0 * SECONDS_PER_YEAR
    for ld, kk in ((load, k), (load2, k2)):
        engine = _engine(spec, "relaxing", "previous")
        engine.step(tau, ld)
        expected = ld / (RHO_M * G + D * kk**4) * (1 - np.exp(-1.0))
        scale = np.abs(ld).max() / (RHO_M * G)
        assert_allclose(engine.deflection(), expected, rtol=0, atol=1e-10 * scale)


def test_pruned_transforms_equal_full_ffts():
    # The row-pruned transforms are an identity of the DFT (common practice); check to round-off.
    rng = np.random.default_rng(1)
    spec = GridSpec(20, 24, 1e4, 1e4)
    engine = SpectralRelaxation.build(spec, D, RHO_M * G, "half-space", ETA, 1.0)
    load = rng.normal(size=spec.shape)
    padded = np.zeros(engine.shape)
    padded[:20, :24] = load
    full = scipy.fft.rfft2(padded)
    assert_allclose(engine.forward(load), full, rtol=0, atol=1e-12 * np.abs(full).max())
    back = scipy.fft.irfft2(full, s=engine.shape)[:20, :24]
    assert_allclose(engine.inverse(full), back, rtol=0, atol=1e-12)


def test_half_space_mean_follows_the_load_instantly_and_has_no_rate():
    # tau(k=0) = 0 (PHYSICS.md 7.3): the domain mean is in equilibrium right away.
    spec = GridSpec(16, 16, 50e3, 50e3)
    engine = _engine(spec, "half-space")
    load = np.full(spec.shape, 2e6)
    engine.step(1.0, load)
    assert_allclose(engine.deflection(), load / (RHO_M * G), rtol=1e-12)
    assert_allclose(engine.rate(), 0.0, atol=1e-25)


def test_build_rejects_bad_parameters():
    spec = GridSpec(8, 8, 1e3, 1e3)
    with pytest.raises(InputError, match="model must be one of"):
        SpectralRelaxation.build(spec, D, RHO_M * G, "maxwell", ETA, 1.0)
    with pytest.raises(InputError, match="interpolation must be one of"):
        SpectralRelaxation.build(spec, D, RHO_M * G, "relaxing", ETA, 1.0, interpolation="cubic")
    with pytest.raises(InputError, match=r"viscosity must be a finite number > 0 .*-1.0"):
        SpectralRelaxation.build(spec, D, RHO_M * G, "half-space", -1.0, 1.0)
