"""Tests of gridflex.estimation.fan_wavelet (te maps from the fan wavelet transform)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

import gridflex
from gridflex.errors import InputError
from gridflex.estimation.fan_wavelet import FAN_AZIMUTHS, _Points, equivalent_wavenumbers
from gridflex.estimation.likelihood import OpenIntervalWarning
from tests.helpers import two_load_plate

N, DX = 128, 30e3
WINDOW, STEP = 1200e3, 300e3
SPLIT = N // 2 * DX
MARGIN = 600e3
"""Distance of an interior point from the step and from the grid's edges (m)."""
PLATE = gridflex.Plate(te=0.0, crust_thickness=35e3)


@pytest.fixture(scope="module")
def two_domains():
    """Forsyth's (1985) two-load model (surface and Moho loads, f = 1, red spectra) on a
    plate of te 10 km (x < 1920 km) and 40 km (x >= 1920 km), finite differences on cells
    of 10 km averaged to 128² cells of 30 km, and its fan-wavelet te map. The seed (57)
    is none of the benchmark's (101-104)."""
    x = np.arange(N) * DX
    te = np.where(x < SPLIT, 10e3, 40e3)[None, :] * np.ones((N, 1))
    topography, bouguer = two_load_plate(te, N, DX, seed=57, plate=PLATE, refine=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OpenIntervalWarning)
        result = gridflex.te_map(
            topography, bouguer, PLATE, window=WINDOW, step=STEP, method="fan_wavelet"
        )
    return topography, bouguer, result


def _interior(result, low, high):
    x = result["x"].values
    inside = (x - MARGIN >= low) & (x + MARGIN <= high)
    return [result[name].values[:, inside].ravel() for name in ("te", "te_low", "te_high")]


def test_two_domains_recovered(two_domains):
    """Issue 19 target: te of each domain's interior within 25 % (synthetic recovery of
    Forsyth's 1985 two-load model; Kirby & Swain 2011, "Improving the spatial resolution
    of effective elastic thickness estimation with the fan wavelet transform", for the
    method). The fan wavelet has no window to average over, so single points scatter
    (seen on this seed: te 10 km -46..+27 %, 40 km -53..+27 %): the domain's median is
    checked (seen -16 % and -10 %), and most points."""
    _, _, result = two_domains
    for low, high, truth in ((0.0, SPLIT, 10e3), (SPLIT, N * DX, 40e3)):
        te, te_low, te_high = _interior(result, low, high)
        assert te.size >= 18
        assert_allclose(np.median(te), truth, rtol=0.25)
        assert np.mean(np.abs(te / truth - 1) <= 0.25) >= 0.6
        assert np.all((te_low <= te) & (te <= te_high))


def test_interval_covers_most_points(two_domains):
    """The interval (band-misfit profile likelihood and delete-one-sector jackknife,
    Thomson & Chave 1991) holds the truth at most interior points (issue 19: "the truth
    inside the interval for most windows"). Seen on this seed: 0.93 (10 km), 0.89 (40 km)."""
    _, _, result = two_domains
    for low, high, truth in ((0.0, SPLIT, 10e3), (SPLIT, N * DX, 40e3)):
        _, te_low, te_high = _interior(result, low, high)
        assert np.mean((te_low <= truth) & (truth <= te_high)) >= 0.7


def test_same_points_as_the_multitaper_map(two_domains):
    """Both methods map the same window centres, in the data's coordinates (common
    practice: maps to compare point by point)."""
    topography, bouguer, result = two_domains
    multitaper = gridflex.te_map(
        topography, bouguer, PLATE, window=WINDOW, step=STEP, jackknife=False, samples=5
    )
    assert_allclose(result["x"].values, multitaper["x"].values)
    assert_allclose(result["y"].values, multitaper["y"].values)
    assert "fan wavelet" in result.attrs["method"]
    assert result.attrs["bands_used"] == result.attrs["band_wavenumbers"].size
    assert result.attrs["prewhiten"] == 1 and result.attrs["azimuths"] == 16


def test_equivalent_wavenumbers():
    """Scales from 2 pi / window to 2 pi / (3 cells), log-spaced (Kirby 2005's
    equivalent wavenumber |k0| / s picks them; common practice)."""
    k = equivalent_wavenumbers(1200e3, 30e3, 8, None)
    assert_allclose(k[[0, -1]], [2 * np.pi / 1200e3, 2 * np.pi / 90e3])
    assert_allclose(np.diff(np.log(k)), np.log(k[1] / k[0]))
    kept = equivalent_wavenumbers(1200e3, 30e3, 8, (1e-5, 3e-5))
    assert np.all((kept >= 1e-5) & (kept <= 3e-5))
    with pytest.raises(InputError, match="wavenumber_range"):
        equivalent_wavenumbers(1200e3, 30e3, 8, (1e-5, 1.1e-5))


@pytest.mark.parametrize("offset", [0.0, 0.5])
def test_products_equal_the_inverse_transform(offset):
    """The separable Morlet (a Gaussian in k_x times one in k_y) evaluated at the points
    by two matrix products equals the inverse FFT of the whole grid picked at the points
    (on and half a cell off the cells, by a phase shift): the discrete Fourier transform's
    shift theorem (common practice)."""
    rng = np.random.default_rng(3)
    ny, nx, dy, dx = 48, 60, 30e3, 25e3
    spectrum = np.fft.fft2(rng.standard_normal((ny, nx)))
    ky = 2 * np.pi * np.fft.fftfreq(ny, dy)
    kx = 2 * np.pi * np.fft.fftfreq(nx, dx)
    y = (np.arange(3, 40, 7) + offset) * dy
    x = (np.arange(5, 55, 9) + offset) * dx
    scale = 5.336 / (2 * np.pi / 200e3)
    direct = _Points(ky, kx, y, x, direct=True).coefficients(spectrum, scale)
    picked = _Points(ky, kx, y, x, direct=False).coefficients(spectrum, scale)
    assert direct.shape == (FAN_AZIMUTHS, y.size * x.size)
    assert_allclose(direct, picked, rtol=0, atol=1e-12 * np.abs(picked).max())


def test_refusals(two_domains):
    topography, bouguer, _ = two_domains
    with pytest.raises(InputError, match="method"):
        gridflex.te_map(topography, bouguer, PLATE, window=WINDOW, method="wavelet")
    # the multitaper's taper settings are refused, not silently ignored
    for taper_settings in ({"tapers": 3}, {"bandwidth": 3.0}):
        with pytest.raises(InputError, match="bandwidth and tapers.*fan_wavelet"):
            gridflex.te_map(
                topography, bouguer, PLATE, window=WINDOW, method="fan_wavelet", **taper_settings
            )
    with pytest.raises(InputError, match="fan_wavelet.*free_air"):
        gridflex.te_map(
            topography,
            bouguer,
            PLATE,
            window=WINDOW,
            method="fan_wavelet",
            quantity="free_air",
            gravity=gridflex.CrustLayers(4e3, 35e3, 2800.0),
            topography_contrast=1670.0,
        )
