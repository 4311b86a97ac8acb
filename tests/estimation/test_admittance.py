"""Tests of gridflex.estimation.admittance (admittance, coherence, spectral Te)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.fft
import xarray as xr
from numpy.testing import assert_allclose

import gridflex
from gridflex.constants import DEFAULT_GRAVITY, GRAVITATIONAL_CONSTANT, MGAL
from gridflex.errors import InputError
from gridflex.estimation.admittance import (
    LeakageBiasWarning,
    bouguer_admittance,
    bouguer_coherence,
    cross_spectra,
    fit_te_spectral,
    free_air_admittance,
)
from gridflex.gravity.first_order import CrustLayers

N, DX = 256, 8e3
TE = 20e3
RHO_C, RHO_W, RHO_M, DEPTH, T_C = 2800.0, 1030.0, 3300.0, 4500.0, 6000.0


def _grid(values):
    x = np.arange(N) * DX
    return xr.DataArray(values, dims=("y", "x"), coords={"y": x, "x": x})


@pytest.fixture(scope="module")
def compensated():
    """Invented random topography (power ~ k^-3) loading a plate from above, and its
    free-air anomaly computed interface by interface with the n = 1 term of Parker's (1973)
    series (PHYSICS.md 6.1): sea floor (rho_c - rho_w) at depth d, Moho (rho_m - rho_c)
    at d + t_c displaced by w; infill = crust (final-topography mode, PHYSICS.md 1.3b)."""
    rng = np.random.default_rng(3)
    ky = 2 * np.pi * scipy.fft.fftfreq(N, DX)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(N, DX)[None, :]
    k = np.hypot(ky, kx)
    amplitude = np.where(k > 0, k, np.inf) ** -1.5
    spec = (rng.standard_normal(k.shape) + 1j * rng.standard_normal(k.shape)) * amplitude
    h = scipy.fft.irfft2(spec, s=(N, N))
    h *= 1000.0 / h.std()
    plate = gridflex.Plate(te=TE, infill_density=RHO_C)
    load = _grid((RHO_C - RHO_W) * plate.gravity * h)
    w = gridflex.solve(load, plate, edges="periodic")["deflection"].values
    two_pi_g = 2 * np.pi * GRAVITATIONAL_CONSTANT
    a = two_pi_g * (
        np.exp(-k * DEPTH) * scipy.fft.rfft2((RHO_C - RHO_W) * h)
        - np.exp(-k * (DEPTH + T_C)) * scipy.fft.rfft2((RHO_M - RHO_C) * w)
    )
    anomaly = scipy.fft.irfft2(a, s=(N, N)) / MGAL
    return _grid(h), _grid(anomaly), plate, CrustLayers(DEPTH, T_C, RHO_C)


def test_admittance_recovers_te(compensated):
    topo, anomaly, plate, layers = compensated
    spectra = cross_spectra(topo, anomaly)
    assert spectra["admittance"].attrs["units"] == "mGal m-1"
    assert np.all(np.diff(spectra["wavenumber"].values) > 0)
    fit = fit_te_spectral(
        spectra,
        plate.with_te(5e3),
        gravity=layers,
        topography_contrast=RHO_C - RHO_W,
        topography=topo,
    )
    # issue requirement: te within 15 % of the truth; theory is PHYSICS.md eq. 6.2
    # (McKenzie & Bowin 1976, from memory)
    assert_allclose(fit.te, TE, rtol=0.15)
    assert (
        fit.curves["observed"].size == fit.curves["predicted"].size == spectra.sizes["wavenumber"]
    )
    # the fitted curve explains the observed one to a few percent of its peak
    assert fit.rms < 0.05 * float(np.abs(spectra["admittance"]).max())


def test_observed_admittance_short_wavelength_branch(compensated):
    topo, anomaly, plate, layers = compensated
    spectra = cross_spectra(topo, anomaly)
    short = spectra.where(spectra["wavelength"] < 100e3, drop=True)
    theory = free_air_admittance(short["wavenumber"].values, plate, layers, RHO_C - RHO_W)
    # uncompensated branch 2 pi G drho e^{-kd} (PHYSICS.md 6.2): the estimate tracks it
    # within 5 % (taper smoothing; common practice)
    assert_allclose(short["admittance"], theory, rtol=0.05)
    # a linear filter of the topography: coherence close to 1 there (Kirby 2014, review)
    assert float(short["coherence"].min()) > 0.9


def test_free_air_admittance_limits():
    plate = gridflex.Plate(te=TE, infill_density=RHO_C)
    layers = CrustLayers(DEPTH, T_C, RHO_C)
    k = np.array([0.0, 1e-2])
    z = free_air_admittance(k, plate, layers, RHO_C - RHO_W)
    # PHYSICS.md 6.3: Z_FA(0) = 0 (full compensation); Z -> 2 pi G drho e^{-kd} for large k
    assert z[0] == 0.0
    uncompensated = (
        2 * math.pi * GRAVITATIONAL_CONSTANT * (RHO_C - RHO_W) * math.exp(-1e-2 * DEPTH) / MGAL
    )
    assert_allclose(z[1], uncompensated, rtol=1e-12)
    # slab factor: 41.94 mGal per km per 1000 kg/m3 (PHYSICS.md 6.1, 4 digits given)
    slab = z[1] / math.exp(-1e-2 * DEPTH) / (RHO_C - RHO_W) * 1000.0 * 1000.0
    assert_allclose(slab, 41.94, rtol=1e-4)


def test_forsyth_limits():
    plate = gridflex.Plate(te=TE)
    k = np.geomspace(1e-7, 1e-3, 30)
    # Forsyth 1985, PHYSICS.md 8.2: f = 0 -> gamma^2 = 1 and Z_B = -2 pi G rho_c e^{-kz}/xi
    assert_allclose(bouguer_coherence(k, plate, 2800.0, 0.0), 1.0, rtol=1e-12)
    d = plate.rigidity
    xi = 1 + d * k**4 / ((3300.0 - 2800.0) * DEFAULT_GRAVITY)
    expected = -2 * math.pi * GRAVITATIONAL_CONSTANT * 2800.0 * np.exp(-k * 35e3) / xi / MGAL
    assert_allclose(bouguer_admittance(k, plate, 2800.0, 0.0, 35e3), expected, rtol=1e-12)
    # k -> 0: gamma^2 -> 1; k -> infinity: gamma^2 -> 0 for 0 < f < infinity
    g = bouguer_coherence(k, plate, 2800.0, 1.0)
    assert g[0] == pytest.approx(1.0, abs=1e-9) and g[-1] < 1e-3
    assert np.all((g >= 0) & (g <= 1 + 1e-12))


def test_bouguer_coherence_fit_recovers_te():
    """Fit the theory to itself (sampled Forsyth 1985 curve): exact recovery of te and f."""
    plate = gridflex.Plate(te=35e3)
    k = np.geomspace(2e-6, 2e-4, 25)
    spectra = xr.Dataset(
        {
            "coherence_corrected": ("wavenumber", bouguer_coherence(k, plate, 2800.0, 0.7)),
            "admittance": ("wavenumber", np.zeros_like(k)),
        },
        coords={"wavenumber": k},
    )
    with pytest.warns(LeakageBiasWarning, match="te_map"):
        fit = fit_te_spectral(spectra, plate.with_te(5e3), "bouguer_coherence")
    assert_allclose(fit.te, 35e3, rtol=1e-3)  # optimiser tolerance
    assert_allclose(fit.load_ratio, 0.7, rtol=1e-2)


def test_bad_inputs(compensated):
    topo, anomaly, plate, layers = compensated
    with pytest.raises(InputError, match="anomaly is not on the load grid|anomaly"):
        cross_spectra(topo, anomaly.isel(x=slice(0, 100)))
    with pytest.raises(InputError, match="bandwidth"):
        cross_spectra(topo, anomaly, bandwidth=0.5)
    spectra = cross_spectra(topo, anomaly, bands=8)
    with pytest.raises(InputError, match="curve must be one of"):
        fit_te_spectral(spectra, plate, "isostasy")
    with pytest.raises(InputError, match="needs gravity"):
        fit_te_spectral(spectra, plate)
    with pytest.raises(InputError, match="moho_depth"):
        fit_te_spectral(spectra, plate, "bouguer_admittance")


def test_spectral_plot_written(compensated, tmp_path):
    from matplotlib.image import imread

    from gridflex.io.plots import plot_spectral_fit

    topo, anomaly, plate, layers = compensated
    spectra = cross_spectra(topo, anomaly, bands=10)
    fit = fit_te_spectral(
        spectra, plate, gravity=layers, topography_contrast=RHO_C - RHO_W, samples=8
    )
    path = tmp_path / "admittance.png"
    assert plot_spectral_fit(fit, path) == path
    assert imread(path).shape[0] > 100


def test_forsyth_curves_from_the_two_load_model():
    """Forsyth (1985): uncorrelated initial surface (H_I) and Moho (W_I) loads, final
    topography H = H_I/(1+a) - b W_I/(1+b) and Moho relief W = -a H_I/(1+a) + W_I/(1+b)
    (PHYSICS.md 8.2, a = rho_c/(drho xi), b = drho/(rho_c phi)); the expected cross-spectra
    give the coherence and Bouguer admittance, which must equal eqs. 8.1 and 8.2."""
    plate = gridflex.Plate(te=30e3)
    rho_c, z_m, f = 2800.0, 35e3, 0.8
    drho = plate.mantle_density - rho_c
    k = np.geomspace(1e-6, 1e-3, 12)
    d, g = plate.rigidity, plate.gravity
    xi, phi = 1 + d * k**4 / (drho * g), 1 + d * k**4 / (rho_c * g)
    a, b = rho_c / (drho * xi), drho / (rho_c * phi)
    var_t, var_b = 1.0, (f * rho_c / drho) ** 2  # f = drho W_I / (rho_c H_I)
    hw = -a / (1 + a) ** 2 * var_t - b / (1 + b) ** 2 * var_b
    hh = var_t / (1 + a) ** 2 + b**2 * var_b / (1 + b) ** 2
    ww = a**2 * var_t / (1 + a) ** 2 + var_b / (1 + b) ** 2
    assert_allclose(bouguer_coherence(k, plate, rho_c, f), hw**2 / (hh * ww), rtol=1e-12)
    bouguer_per_moho = 2 * math.pi * GRAVITATIONAL_CONSTANT * drho * np.exp(-k * z_m) / MGAL
    assert_allclose(
        bouguer_admittance(k, plate, rho_c, f, z_m), bouguer_per_moho * hw / hh, rtol=1e-12
    )


def _red_compensated(n, dx, te, seed):
    """Invented red topography (amplitude ~ k^-1.5) and its first-order free-air anomaly,
    PHYSICS.md eq. 6.2 (McKenzie & Bowin 1976, from memory), on an n x n periodic grid."""
    ky = 2 * np.pi * scipy.fft.fftfreq(n, dx)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(n, dx)[None, :]
    k = np.hypot(ky, kx)
    rng = np.random.default_rng(seed)
    spec = (rng.standard_normal(k.shape) + 1j * rng.standard_normal(k.shape)) * np.where(
        k > 0, k, np.inf
    ) ** -1.5
    h = scipy.fft.irfft2(spec, s=(n, n))
    h *= 800.0 / h.std()
    plate = gridflex.Plate(te=te, infill_density=RHO_C)
    layers = CrustLayers(DEPTH, T_C, RHO_C)
    z = free_air_admittance(k, plate, layers, RHO_C - RHO_W)
    x = np.arange(n) * dx
    coords = {"y": x, "x": x}
    anomaly = scipy.fft.irfft2(z * scipy.fft.rfft2(h), s=(n, n))
    return (
        xr.DataArray(h, dims=("y", "x"), coords=coords),
        xr.DataArray(anomaly, dims=("y", "x"), coords=coords),
        plate,
        layers,
    )


def test_default_prediction_unbiased_on_red_topography():
    """Issue 19: on red topography the bare curve gave 30-38 km for 50 km; the default now
    estimates the prediction from the spectra's own topography (seen over 4 seeds at 256²
    of 8 km, tests/benchmarks/spectral_bias.py: -7.7 to -0.9 % for 50 km, -2.7 to -1.5 %
    for 25 km; bare curve -39 to -25 % and -22 to -16 %)."""
    topo, anomaly, plate, layers = _red_compensated(128, 16e3, 50e3, seed=1)
    spectra = cross_spectra(topo, anomaly, bands=16)
    assert_allclose(spectra["topography"].values, topo.values)
    options = {"gravity": layers, "topography_contrast": RHO_C - RHO_W, "samples": 12}
    fit = fit_te_spectral(spectra, plate, **options)
    # synthetic recovery, theory PHYSICS.md eq. 6.2: within 10 % (the issue's -0.4 to -8 %)
    assert_allclose(fit.te, 50e3, rtol=0.10)
    with pytest.warns(LeakageBiasWarning, match="topography="):
        bare = fit_te_spectral(spectra.drop_vars("topography"), plate, **options)
    # the bias the warning is about is real here: the bare curve is more than 15 % low
    assert bare.te < 0.85 * 50e3
