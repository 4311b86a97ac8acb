"""Local spectra of a te map from the fan wavelet transform (``te_map(method="fan_wavelet")``).

Instead of cutting the grids into windows, each grid is transformed with 2-D Morlet
wavelets (Kirby 2005, "Which wavelet best reproduces the Fourier power spectrum?",
*Computers & Geosciences* 31; Kirby & Swain 2011, "Improving the spatial resolution of
effective elastic thickness estimation with the fan wavelet transform", *Computers &
Geosciences* 37 — both from memory for the details). In the Fourier domain the Morlet
of scale s and azimuth alpha is the Gaussian

.. math:: \\hat\\psi_{s,\\alpha}(\\mathbf k) = e^{-|s\\mathbf k - \\mathbf k_0|^2 / 2},
          \\qquad \\mathbf k_0 = |k_0| (\\cos\\alpha, \\sin\\alpha), \\quad |k_0| = 5.336,

and the wavelet coefficient of a grid f at a point x is the inverse transform of
F(k) psi(s k) there. Its equivalent Fourier wavenumber is k_e = |k0| / s. The fan sums
the products of the coefficients over :data:`FAN_AZIMUTHS` azimuths spanning the half
plane (spacing pi/16 = 0.20 rad, finer than the 0.28 rad Kirby gives for |k0| = 5.336,
so the fan's response is isotropic). The wavelet's width in space grows with its
wavelength (s = |k0| / k_e, about 0.85 of the equivalent wavelength), so short
wavelengths are resolved at short distances and long ones at long distances; a window
mixes both at one size.

From the coefficients H (topography) and W (Moho relief: the Bouguer anomaly divided by
2 pi G drho e^{-k z_m}, in the Fourier domain) at each map point and scale, the sums
<|H|²>, <|W|²>, <H W*> over the fan feed the same Forsyth (1985) load deconvolution and
prediction as the multitaper map (:mod:`gridflex.estimation.coherence_fit`),
with Forsyth's a and b at k_e; the scales play the bands' part. The interval is the
same: the band-misfit profile likelihood along the scales, and the delete-one-sector
jackknife with the 16 azimuths in 8 sectors of two.

The grids are detrended (least-squares plane) and mirrored to twice their size before
the transforms (even extension: no jump at the edges), and the coefficients are taken at
the centres of the windows the multitaper map would use, so both methods give maps on
the same points; *window* sets the longest equivalent wavelength used (k_e from
2 pi / window up to 2 pi / (3 cells), *bands* scales evenly spaced in log k_e).

Measured against the multitaper on the benchmark's two-domain plates
(``tests/benchmarks/te_map.py``; see :func:`gridflex.te_map` and the README for the
numbers and the choice of the default).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.fft
import xarray as xr

from gridflex.errors import InputError
from gridflex.estimation.admittance import _detrend
from gridflex.estimation.coherence_fit import (
    JACKKNIFE_SECTORS,
    _BouguerChunk,
    forsyth_coefficients,
    moho_filter,
)
from gridflex.memory import check_memory
from gridflex.plate import Plate

__all__ = ["FAN_AZIMUTHS", "FAN_K0", "fan_wavelet_chunk"]

FAN_K0 = 5.336
"""Central wavenumber |k0| of the Morlet wavelets (Kirby 2005; Kirby & Swain 2011)."""

FAN_AZIMUTHS = 16
"""Azimuths of the fan, evenly spaced over the half plane (two per jackknife sector)."""

_SHORTEST_CELLS = 3.0
"""Shortest equivalent wavelength used, in cells."""

_BATCH_BYTES = 256 * 2**20
"""Memory the transforms of one batch of azimuths may take."""


class _Scales:
    """The scales' equivalent wavenumbers in the part of a multitaper setup: Forsyth's
    coefficients at each k_e, one scale per band."""

    def __init__(self, k: np.ndarray, plate: Plate) -> None:
        self.k = k
        self.plate = plate

    def deconvolution(self, te: Any) -> tuple[np.ndarray, np.ndarray]:
        return forsyth_coefficients(self.k, te, self.plate)

    @staticmethod
    def group_bands(values: np.ndarray) -> np.ndarray:
        return values


def equivalent_wavenumbers(
    window: float, spacing: float, count: int, wavenumber_range: tuple[float, float] | None
) -> np.ndarray:
    """The scales' k_e (rad m⁻¹): *count* log-spaced from 2 pi / *window* to
    2 pi / (3 *spacing*), those inside *wavenumber_range* kept (at least 3)."""
    k = np.geomspace(2.0 * math.pi / window, 2.0 * math.pi / (_SHORTEST_CELLS * spacing), count)
    if wavenumber_range is not None:
        k = k[(k >= wavenumber_range[0]) & (k <= wavenumber_range[1])]
    if k.size < 3:
        raise InputError(
            f"only {k.size} wavelet scales (bands={count!r}, wavenumber_range="
            f"{wavenumber_range!r}) between 2 pi / window and 2 pi / (3 cells); need >= 3"
        )
    return k


def fan_wavelet_chunk(
    topography: xr.DataArray,
    anomaly: xr.DataArray,
    plate: Plate,
    starts_y: np.ndarray,
    starts_x: np.ndarray,
    shape: tuple[int, int],
    spectral: dict[str, Any],
) -> tuple[_BouguerChunk, dict[str, Any]]:
    """The fan-wavelet sums at the centres of the windows (first cells *starts_y*,
    *starts_x*, *shape* cells) as a chunk of :func:`gridflex.te_map`, and the map's
    attributes.

    Parameters
    ----------
    topography, anomaly : xarray.DataArray
        Topography (m) and Bouguer anomaly (mGal), checked grids of the same shape.
    plate : Plate
        Densities and moduli (Forsyth's rho_m, rho_c).
    starts_y, starts_x : numpy.ndarray
        First cells of the windows along y and x.
    shape : tuple of int
        Cells of a window (ny, nx); the longest equivalent wavelength is its side.
    spectral : dict
        ``bands`` (number of scales), ``wavenumber_range`` (rad m⁻¹ or None) and
        ``moho_depth`` (m), as :func:`gridflex.te_map` checked them.
    """
    h = np.asarray(topography.values, dtype=np.float64)
    g = np.asarray(anomaly.values, dtype=np.float64)
    ny, nx = h.shape
    dy = abs(float(topography["y"][1] - topography["y"][0]))
    dx = abs(float(topography["x"][1] - topography["x"][0]))
    k_e = equivalent_wavenumbers(
        min(shape[0] * dy, shape[1] * dx),
        max(dx, dy),
        int(spectral["bands"]),
        spectral["wavenumber_range"],
    )
    cells = 4 * ny * nx
    per_azimuth = cells * (8 + 3 * 16)
    batch = int(max(1, min(FAN_AZIMUTHS, _BATCH_BYTES // per_azimuth)))
    check_memory(
        cells * 16 * 4 + batch * per_azimuth,
        f"te map (fan wavelet): {batch} azimuths of a {2 * ny} x {2 * nx} mirrored grid",
        advice="use a coarser grid",
    )
    ky = 2.0 * math.pi * scipy.fft.fftfreq(2 * ny, dy)[:, None]
    kx = 2.0 * math.pi * scipy.fft.fftfreq(2 * nx, dx)[None, :]
    k = np.hypot(ky, kx)
    # window centres: whole cells plus, for an even window, half a cell (a phase shift)
    offset = ((shape[0] - 1) / 2.0, (shape[1] - 1) / 2.0)
    iy = starts_y + int(offset[0])
    ix = starts_x + int(offset[1])
    shift = np.exp(1j * (ky * dy * (offset[0] % 1.0) + kx * dx * (offset[1] % 1.0)))
    spectra = []
    for field in (h, g):
        mirrored = np.pad(_detrend(field), ((0, ny), (0, nx)), mode="symmetric")
        spectra.append(scipy.fft.fft2(mirrored, workers=-1) * shift)
    f_h, f_w = spectra[0], spectra[1] / moho_filter(k, plate, spectral["moho_depth"])
    if spectral["prewhiten"]:  # the same filter on both: coherence and deconvolution keep
        f_h *= k
        f_w *= k
    del spectra
    azimuths = -0.5 * math.pi + math.pi * np.arange(FAN_AZIMUTHS) / FAN_AZIMUTHS
    points = iy.size * ix.size
    s_hh = np.zeros((FAN_AZIMUTHS, points, k_e.size))
    s_ww = np.zeros_like(s_hh)
    s_hw = np.zeros(s_hh.shape, dtype=np.complex128)
    for j, wavenumber in enumerate(k_e):
        scale = FAN_K0 / wavenumber
        for first in range(0, FAN_AZIMUTHS, batch):
            alpha = azimuths[first : first + batch, None, None]
            psi = np.exp(
                -0.5
                * (
                    (scale * kx - FAN_K0 * np.cos(alpha)) ** 2
                    + (scale * ky - FAN_K0 * np.sin(alpha)) ** 2
                )
            )
            at = slice(first, first + batch)
            w_h = scipy.fft.ifft2(psi * f_h, workers=-1)[:, iy[:, None], ix[None, :]]
            w_w = scipy.fft.ifft2(psi * f_w, workers=-1)[:, iy[:, None], ix[None, :]]
            w_h = w_h.reshape(w_h.shape[0], points)
            w_w = w_w.reshape(w_w.shape[0], points)
            s_hh[at, :, j] = np.abs(w_h) ** 2
            s_ww[at, :, j] = np.abs(w_w) ** 2
            s_hw[at, :, j] = w_h * w_w.conj()
    if FAN_AZIMUTHS % JACKKNIFE_SECTORS:
        raise AssertionError("the fan's azimuths do not fill the jackknife's sectors evenly")

    def by_sector(values: np.ndarray) -> np.ndarray:
        return values.reshape(JACKKNIFE_SECTORS, -1, points, k_e.size).sum(axis=1)

    hh, ww, hw = by_sector(s_hh), by_sector(s_ww), by_sector(s_hw)
    part = {"hh": hh, "rr": hw.real, "ww": ww, "b_hw": hw, "b_hh": hh, "b_ww": ww}
    attrs: dict[str, Any] = {
        "method": (
            f"fan wavelet transform (Kirby & Swain 2011), Morlet |k0| = {FAN_K0}, "
            f"{FAN_AZIMUTHS} azimuths, grids mirrored; Bouguer coherence, Forsyth (1985) "
            "two-load model, load deconvolution at the equivalent wavenumbers"
        ),
        "quantity": "bouguer",
        "bands_used": int(k_e.size),
        "band_wavenumbers": k_e,
        "azimuths": FAN_AZIMUTHS,
        "central_wavenumber": FAN_K0,
    }
    return _BouguerChunk(_Scales(k_e, plate), part), attrs
