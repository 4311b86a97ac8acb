"""Forsyth's (1985) Bouguer coherence with load deconvolution, from sums of local spectra.

The part every te map shares (:func:`gridflex.te_map`, both methods): given, for each
map point, the sums over a set of Fourier or wavelet coefficients of |H|², |W|² and
H W* (H topography, W Moho relief) in every wavenumber group and band and every
azimuthal sector, the misfit of a trial te between the observed coherence and the one
Forsyth's two-load model predicts from the loads deconvolved at that te (see
:mod:`gridflex.estimation.spectral_maps` for the equations), and the same misfit with
each sector left out in turn (the jackknife's estimates).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.estimation.admittance import _flexural_ratio
from gridflex.estimation.likelihood import correlation_factor
from gridflex.grid import GridSpec
from gridflex.plate import Plate

__all__ = ["JACKKNIFE_SECTORS", "forsyth_coefficients", "moho_filter"]

JACKKNIFE_SECTORS = 8
"""Azimuthal sectors of the wavenumber half plane left out in turn by the jackknife."""


class _Chunk:
    """The spectra of a stack of windows and the misfit of a trial te for each of them."""

    observed: np.ndarray
    """Observed coherence or admittance, (windows, bands used)."""

    def residuals(self, te: float, rows: slice = slice(None)) -> np.ndarray:
        """Observed minus predicted curve at *te* (m) of the windows *rows*, (rows, bands)."""
        raise NotImplementedError

    def subset_rss(self, rows: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        """For the windows *rows* (indices): the RSS of every delete-one-sector estimate,
        (sectors, len(rows)), as a function of te (m, one per row)."""
        raise NotImplementedError

    def rss(self, te: float, rows: slice = slice(None)) -> np.ndarray:
        """Sum of squared band misfits at *te* (m) of the windows *rows*."""
        r = self.residuals(te, rows)
        return np.einsum("ij,ij->i", r, r)

    def correlation(self, te: float, row: int) -> float:
        """n / n_eff of the band residuals of window *row* at *te* (m): the residual
        correlation factor of every te fit, along the bands."""
        r = self.residuals(te, slice(row, row + 1))
        return correlation_factor(r, np.ones(r.shape, dtype=bool), GridSpec(1, r.size, 1.0, 1.0))


class _BouguerChunk(_Chunk):
    """Forsyth (1985) load deconvolution of each window (see the module docstring)."""

    def __init__(self, setup: Any, part: dict[str, np.ndarray]) -> None:
        """*setup* gives ``deconvolution(te)`` (Forsyth's a, b at each |k| group) and
        ``group_bands`` (sums of groups into bands); *part* holds the sums of each
        sector, (sectors, windows, bins): ``hh``, ``rr`` (real part of H W*), ``ww`` over
        the |k| groups and ``b_hw``, ``b_hh``, ``b_ww`` over the bands."""
        self.setup = setup
        total = {name: values.sum(axis=0) for name, values in part.items()}
        self.hh, self.rr, self.ww = total["hh"], total["rr"], total["ww"]
        self.observed = _coherence(total["b_hw"], total["b_hh"], total["b_ww"])
        # the delete-one-sector sums
        left = {name: total[name][None] - part[name] for name in part}
        self.subsets = (
            left["hh"],
            left["rr"],
            left["ww"],
            _coherence(left["b_hw"], left["b_hh"], left["b_ww"]),
        )

    def _misfit(
        self, te: Any, hh: np.ndarray, rr: np.ndarray, ww: np.ndarray, observed: np.ndarray
    ) -> np.ndarray:
        setup = self.setup
        a, b = setup.deconvolution(te)
        u = 1.0 / (1.0 - a * b) ** 2
        p_t = u * (hh + 2.0 * b * rr + b * b * ww)  # <|H_T|²>
        p_b = u * (ww + 2.0 * a * rr + a * a * hh)  # <|W_B|²>
        groups = setup.group_bands
        pred_hh = groups(p_t + b * b * p_b)
        pred_ww = groups(a * a * p_t + p_b)
        pred_hw = groups(-a * p_t - b * p_b)
        return observed - pred_hw**2 / (pred_hh * pred_ww)

    def residuals(self, te: float, rows: slice = slice(None)) -> np.ndarray:
        return self._misfit(te, self.hh[rows], self.rr[rows], self.ww[rows], self.observed[rows])

    def subset_rss(self, rows: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        hh, rr, ww, observed = (values[:, rows] for values in self.subsets)

        def rss(te: np.ndarray) -> np.ndarray:
            r = self._misfit(te[None, :, None], hh, rr, ww, observed)
            return np.einsum("...i,...i->...", r, r)

        return rss


def _coherence(cross: np.ndarray, power_h: np.ndarray, power_w: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.asarray(np.abs(cross) ** 2 / (power_h * power_w))


def forsyth_coefficients(k: np.ndarray, te: Any, plate: Plate) -> tuple[np.ndarray, np.ndarray]:
    """Forsyth's (1985) load-deconvolution coefficients a = rho_c / (drho xi) and
    b = drho / (rho_c phi) at wavenumbers *k* (rad m⁻¹) for elastic thickness *te* (m)."""
    rho_c = plate.crust_density
    drho = plate.mantle_density - rho_c
    xi, phi = _flexural_ratio(k, te, plate, drho), _flexural_ratio(k, te, plate, rho_c)
    return rho_c / (drho * xi), drho / (rho_c * phi)


def moho_filter(k: np.ndarray, plate: Plate, moho_depth: float) -> np.ndarray:
    """Bouguer anomaly (mGal) per metre of Moho relief at wavenumbers *k* (rad m⁻¹):
    2 pi G (rho_m - rho_c) e^{-k z_m} (PHYSICS.md 8.2, first order)."""
    drho = plate.mantle_density - plate.crust_density
    return np.asarray(
        2.0 * math.pi * GRAVITATIONAL_CONSTANT * drho * np.exp(-k * moho_depth) / MGAL
    )
