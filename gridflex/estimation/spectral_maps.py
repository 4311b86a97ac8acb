"""Te as a map: moving-window multitaper coherence or admittance.

The grids are cut into square windows of side *window* whose centres step by *step*
(Pérez-Gussinyé, Lowry, Watts & Velicogna 2004, *JGR* 109; Audet & Mareschal 2007,
*GRL* 34 — both from memory for the details). In each window the same 2-D multitapers
and wavenumber annuli as :func:`gridflex.estimation.admittance.cross_spectra` give the
observed curve, and te is the value whose prediction fits it best by least squares over
the bands.

Prewhitening (default). The grids are differenced along x and along y (central
differences), and the products of the two differenced pairs are summed: the same
filter, sin²(k_x dx) / dx² + sin²(k_y dy) / dy² ≈ k² (per cell), multiplies every power
and cross power away from the grid's edges, so coherence and
admittance keep their meaning and the predictions (built from the same products) stay
exact, but a red spectrum is flattened by k² before the tapers smear it. Without it the
long-wavelength power a taper leaks into the bands of the rollover biased te: measured on
uniform two-load plates with amplitude ~ k^-1.5 and windows of 2400 km, +9 % at 10 km and
-12 % at 40 km, while with amplitude ~ k^-0.5 or white loads, or prewhitened, the same
plates came out within -3.3 to +2.2 % (``tests/benchmarks/te_map.py``; leakage of a red
spectrum is the textbook reason to prewhiten, Percival & Walden 1993, *Spectral Analysis
for Physical Applications*, from memory).

Interval (``te_low``, ``te_high``): two parts added in quadrature in log te.

* The misfit part: the profile-likelihood rule every te fit shares
  (:mod:`gridflex.estimation.likelihood`, PHYSICS.md 8.1) applied to the band misfit,
  the residual correlation along the bands counted — how well the band curve pins te.
* The sampling part (``jackknife=True``, default): the spectra of one window are an
  estimate from one realisation of the loads. The half plane of the window's wavenumbers
  is cut into S = 8 azimuthal sectors; te is fitted S more times, each time leaving one
  sector's Fourier coefficients out of every band sum (every band keeps its other
  sectors), and the delete-one jackknife (Thomson & Chave 1991, "Jackknifed error
  estimates for spectra, coherences, and transfer functions", in *Advances in Spectrum
  Analysis and Array Processing*, vol. 1) gives the standard error of log te,
  s_J² = (S - 1) / S Σ_j (θ_j - θ̄)²; its half-width is t_{S-1} s_J (Student's t
  quantile of the confidence). Thomson & Chave leave out tapers; with annulus averages
  every taper sees the same few Fourier components of a band, so the delete-one-taper
  estimates hardly differ: on uniform plates (te 10 and 40 km, windows of 2400 km, 150
  windows each) the taper jackknife gave a median s_J of 0.9 and 2.3 % against a
  scatter of log te of 2.2 and 5.9 %, the sector jackknife 2.1 and 3.9 %. Sectors hold
  disjoint coefficients, so their estimates are nearly independent for an isotropic
  load (neighbouring sectors share the taper's bandwidth at their borders).

Each side's half-width is sqrt(m² + (t_{S-1} s_J)²), m the misfit part's half-width on
that side, so the interval is at least as wide as either part. It covers the scatter of
the estimate; it does not cover a bias of the method (e.g. a window too short for the
plate, or a plate that changes inside the window).

Bouguer coherence (default) — Forsyth's (1985, *JGR* 90) two-load model with load
deconvolution (PHYSICS.md 8.2): for a trial te the observed topography H and Moho
relief W = B / (2 pi G (rho_m - rho_c) e^{-k z_m}) of each tapered Fourier coefficient
are split into the surface and subsurface loads that would have made them,

.. math:: H_T = \\frac{H + b W}{1 - a b}, \\qquad W_B = \\frac{W + a H}{1 - a b},
          \\qquad a = \\frac{\\rho_c}{\\Delta\\rho \\, \\xi}, \\quad
          b = \\frac{\\Delta\\rho}{\\rho_c \\, \\phi},

and the predicted coherence of a band is that of uncorrelated loads of those powers
(P_T = <|H_T|²>, P_B = <|W_B|²>): <H H*> = P_T + b² P_B, <W W*> = a² P_T + P_B,
<H W*> = -a P_T - b P_B. The prediction is thus estimated from the window's own
spectra, and the ratio of the loads is no parameter. Because a and b depend only on
|k|, the per-coefficient powers are summed first over the coefficients that share a
|k| (exact), which makes each trial te a few operations per distinct |k|.

Free-air admittance (``quantity="free_air"``): the top-loaded plate of PHYSICS.md 6.2
applied to the window's own topography and passed through the same tapers and bands
(as :func:`gridflex.estimation.admittance.fit_te_spectral` does), one FFT per taper and
trial te.

``method="fan_wavelet"``: the sums come from the fan wavelet transform at the same
centres instead of the windows' multitapers (:mod:`gridflex.estimation.fan_wavelet`,
with its measured trade-off: a step 2.4-4.9 times sharper, but te biased about -12 %
and scattered); the deconvolution, misfit, interval and jackknife are the ones here
(:mod:`gridflex.estimation.coherence_fit`). The multitaper stays the default.

Windows are processed in chunks: one batched :func:`scipy.fft.rfft2` (threaded) per
taper, grid and channel over a stack of windows, the stack's memory estimated first. The
delete-one sums are the full sums minus one sector's; the S delete-one estimates of all
windows of a chunk are sought together on a grid of log te around each window's best
(:func:`_jackknife_spread`).
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Callable, Iterable, Iterator
from typing import Any

import numpy as np
import scipy.fft
import xarray as xr

from gridflex.errors import InputError
from gridflex.estimation.admittance import (
    _band_setup,
    _detrend,
    free_air_admittance,
)
from gridflex.estimation.coherence_fit import (
    JACKKNIFE_SECTORS,
    _BouguerChunk,
    _Chunk,
    forsyth_coefficients,
    moho_filter,
)
from gridflex.estimation.fan_wavelet import fan_wavelet_chunk
from gridflex.estimation.likelihood import (
    OpenIntervalWarning,
    interval_end,
    interval_threshold,
)
from gridflex.estimation.search import check_search_bounds, grid_then_refine
from gridflex.gravity.first_order import CrustLayers
from gridflex.grid import GridSpec, check_grid, check_same_grid
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.validation import check_choice, check_flag, check_integer, check_number

__all__ = [
    "TE_MAP_BANDWIDTH",
    "TE_MAP_BOUNDS",
    "TE_MAP_METHODS",
    "TE_MAP_QUANTITIES",
    "TE_MAP_SAMPLES",
    "te_map",
]

log = logging.getLogger(__name__)

TE_MAP_QUANTITIES = ("bouguer", "free_air")
"""What :func:`te_map` fits: Bouguer coherence (Forsyth 1985) or free-air admittance."""

TE_MAP_METHODS = ("multitaper", "fan_wavelet")
"""How :func:`te_map` gets the local spectra: moving-window multitapers or the fan
wavelet transform (:mod:`gridflex.estimation.fan_wavelet`)."""

TE_MAP_BOUNDS = (1e3, 1.5e5)
"""Default te search range of :func:`te_map` (m)."""

TE_MAP_SAMPLES = 31
"""Default number of log-spaced trial te of the coarse search of every window."""

TE_MAP_BANDWIDTH = 2.0
"""Default time-bandwidth product NW of the multitapers of every window."""

_MIN_WINDOW_CELLS = 16
"""Fewest cells along a window's side."""

_CHUNK_BYTES = 256 * 2**20
"""Memory a chunk of windows may take (the chunk is at least one window)."""

_XTOL = 1e-4
"""Tolerance of the refinement and of the interval ends, in log te."""

_JK_POINTS = 11
"""Log te of the grid on which each delete-one-sector estimate is sought."""

_JK_MIN_SPAN = 0.05
"""Least half-width (in log te) of that grid; otherwise the misfit interval's wider side."""

_JK_WIDEN = 4.0
"""Factor on the half-width of the grid searched again when an estimate lies on its edge."""

_JK_ROUNDS = 3
"""Most grids searched for the delete-one-sector estimates of a window."""


def _window_cells(window: float, spacing: float, cells: int, axis: str) -> int:
    n = int(round(window / spacing))
    if n < _MIN_WINDOW_CELLS or n > cells:
        raise InputError(
            f"window ({window!r} m) spans {n} cells along {axis}; it must span "
            f"{_MIN_WINDOW_CELLS} to {cells} cells (the grid's size) of {spacing!r} m"
        )
    return n


def _starts(cells: int, size: int, step: int) -> np.ndarray:
    """First cells of the windows along an axis: every *step* cells, centred on the grid."""
    count = (cells - size) // step + 1
    offset = (cells - size - (count - 1) * step) // 2
    return offset + step * np.arange(count)


def _membership(index: np.ndarray, count: int) -> Any:
    """Sparse (count, len(index)) matrix with a 1 at (index[i], i): sums by bin as a product;
    indices outside [0, count) are dropped."""
    from scipy.sparse import csr_matrix

    keep = (index >= 0) & (index < count)
    n = index.size
    return csr_matrix(
        (np.ones(int(keep.sum())), (index[keep], np.arange(n)[keep])), shape=(count, n)
    )


def _binned(values: np.ndarray, membership: Any) -> np.ndarray:
    """Sums of the rows of *values* (windows, n) over the bins of *membership* (bins, n)."""
    return np.asarray(membership @ values.T).T


class _Runs:
    """Sums over runs of a non-decreasing bin index (groups sorted by |k| into bands);
    indices outside [0, count) are dropped."""

    def __init__(self, index: np.ndarray, count: int) -> None:
        self.starts = np.flatnonzero(np.r_[True, np.diff(index) != 0])
        self.keep = (index[self.starts] >= 0) & (index[self.starts] < count)

    def __call__(self, values: np.ndarray) -> np.ndarray:
        return np.add.reduceat(values, self.starts, axis=-1)[..., self.keep]


def _taper_parts(
    setup: _Setup, channels: list[tuple[np.ndarray, np.ndarray]]
) -> dict[str, np.ndarray]:
    """The per-sector sums of :class:`_BouguerChunk` from the multitaper transforms of
    stacks of windows, the products summed over tapers and channels."""
    bands = setup.bands
    to_moho = setup.moho_filter
    s_hh: Any = 0.0
    s_ww: Any = 0.0
    s_hw: Any = 0.0
    for h, g in channels:
        for th, tg in zip(bands.transform(h), bands.transform(g), strict=True):
            tw = tg / to_moho
            s_hh = s_hh + np.abs(th) ** 2
            s_ww = s_ww + np.abs(tw) ** 2
            s_hw = s_hw + th * tw.conj()
    return {
        "hh": setup.by_sector(s_hh, "groups"),
        "rr": setup.by_sector(s_hw.real, "groups"),
        "ww": setup.by_sector(s_ww, "groups"),
        "b_hw": setup.by_sector(s_hw, "bands"),
        "b_hh": setup.by_sector(s_hh, "bands"),
        "b_ww": setup.by_sector(s_ww, "bands"),
    }


class _FreeAirChunk(_Chunk):
    """The free-air admittance of PHYSICS.md 6.2 applied to each window's topography."""

    def __init__(self, setup: _Setup, channels: list[tuple[np.ndarray, np.ndarray]]) -> None:
        self.setup = setup
        bands = setup.bands
        self.h_spectra = [scipy.fft.rfft2(_detrend(h), workers=-1) for h, _ in channels]
        self.hs = [bands.transform(h) for h, _ in channels]
        power: Any = 0.0
        cross: Any = 0.0
        for hs, (_, g) in zip(self.hs, channels, strict=True):
            for th, tg in zip(hs, bands.transform(g), strict=True):
                power = power + np.abs(th) ** 2
                cross = cross + (tg * th.conj()).real
        by_power = setup.by_sector(power, "bands")
        by_cross = setup.by_sector(cross, "bands")
        self.power = by_power.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            self.observed = by_cross.sum(axis=0) / self.power
            # the delete-one-sector sums
            self.power_left = self.power[None] - by_power
            self.observed_left = (by_cross.sum(axis=0)[None] - by_cross) / self.power_left

    def _cross(self, z: np.ndarray, rows: Any) -> np.ndarray:
        """Band sums of each sector's model-topography cross products over the tapers and
        channels, (sectors, rows, bands)."""
        setup = self.setup
        total: Any = 0.0
        for spectrum, hs in zip(self.h_spectra, self.hs, strict=True):
            model = scipy.fft.irfft2(z * spectrum[rows], s=setup.shape, workers=-1)
            for th, tm in zip(hs, setup.bands.transform(model), strict=True):
                total = total + (tm * th[rows].conj()).real
        return setup.by_sector(np.asarray(total), "bands")

    def residuals(self, te: float, rows: slice = slice(None)) -> np.ndarray:
        predicted = self._cross(self.setup.free_air(te), rows).sum(axis=0) / self.power[rows]
        return self.observed[rows] - predicted

    def subset_rss(self, rows: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        setup = self.setup
        power, observed = self.power_left[:, rows], self.observed_left[:, rows]

        def rss(te: np.ndarray) -> np.ndarray:
            z = free_air_admittance(
                setup.bands.k, setup.plate, setup.layers, setup.contrast, te=te[:, None, None]
            )
            cross = self._cross(z, rows)
            with np.errstate(invalid="ignore", divide="ignore"):
                r = observed - (cross.sum(axis=0)[None] - cross) / power
            return np.einsum("...i,...i->...", r, r)

        return rss


class _Setup:
    """Window shape, tapers, bands and the te-independent parts of the predictions."""

    def __init__(
        self,
        spec: GridSpec,
        shape: tuple[int, int],
        plate: Plate,
        quantity: str,
        spectral: dict[str, Any],
    ) -> None:
        self.shape = shape
        self.plate = plate
        self.quantity = quantity
        window_spec = GridSpec(ny=shape[0], nx=shape[1], dy=spec.dy, dx=spec.dx)
        self.bands = _band_setup(
            window_spec, spectral["bands"], spectral["bandwidth"], spectral["tapers"]
        )
        bands = self.bands
        k = bands.k[bands.inside]
        counts = np.bincount(bands.flat, minlength=bands.nb)
        k_mean = np.bincount(bands.flat, weights=k, minlength=bands.nb) / np.maximum(counts, 1)
        use = counts > 0
        low_high = spectral["wavenumber_range"]
        if low_high is not None:
            use &= (k_mean >= low_high[0]) & (k_mean <= low_high[1])
        if use.sum() < 3:
            raise InputError(
                f"only {int(use.sum())} usable bands in a window of {shape[0]} x {shape[1]} "
                "cells (wavenumber_range, bands); need >= 3"
            )
        self.k_mean = k_mean[use]
        # bands used, numbered 0..n-1; coefficients of bands left out go to a dropped bin,
        # -1 below the used range and n above it, so the numbers still grow with |k|
        self.n_bands = int(use.sum())
        used = np.flatnonzero(use)
        number = np.where(np.arange(bands.nb) < used[0], -1, self.n_bands)
        number[use] = np.arange(self.n_bands)
        flat = number[bands.flat]
        self.coefficient_bands = _membership(flat, self.n_bands)
        # coefficients sharing |k| share every weight of the deconvolution: sum them first
        key = np.round(k / k.max() * 2.0**40).astype(np.int64)
        unique, group = np.unique(key, return_inverse=True)
        self.k_group = np.bincount(group, weights=k) / np.bincount(group)
        band_of_group = np.zeros(unique.size, dtype=np.int64)
        band_of_group[group] = flat
        self.coefficient_groups = _membership(group, unique.size)
        if np.any(np.diff(band_of_group) < 0):  # np.unique sorts by |k|; bands are |k| ranges
            raise AssertionError("groups of |k| out of band order")
        self.group_bands = _Runs(band_of_group, self.n_bands)
        # azimuthal sectors of the half plane of the rfft2 grid, the jackknife's units
        ky = np.broadcast_to(
            2.0 * math.pi * scipy.fft.fftfreq(shape[0], spec.dy)[:, None], bands.k.shape
        )[bands.inside]
        kx = np.broadcast_to(
            2.0 * math.pi * scipy.fft.rfftfreq(shape[1], spec.dx)[None, :], bands.k.shape
        )[bands.inside]
        angle = np.arctan2(ky, kx) + math.pi / 2.0  # in [0, pi]
        sector = np.minimum(
            (angle / math.pi * JACKKNIFE_SECTORS).astype(np.int64), JACKKNIFE_SECTORS - 1
        )
        self.sector_bins = {
            "bands": _membership(
                np.where((flat >= 0) & (flat < self.n_bands), sector * self.n_bands + flat, -1),
                JACKKNIFE_SECTORS * self.n_bands,
            ),
            "groups": _membership(sector * unique.size + group, JACKKNIFE_SECTORS * unique.size),
        }
        if quantity == "bouguer":
            self.moho_filter = moho_filter(k, plate, spectral["moho_depth"])
        else:
            self.layers: CrustLayers = spectral["gravity"]
            self.contrast = float(spectral["topography_contrast"])

    def by_sector(self, values: np.ndarray, bins: str) -> np.ndarray:
        """Sums of *values* (windows, coefficients) over the bands or |k| groups (*bins*)
        of each azimuthal sector, (sectors, windows, bins)."""
        summed = _binned(values, self.sector_bins[bins])
        return np.moveaxis(summed.reshape(summed.shape[0], JACKKNIFE_SECTORS, -1), 1, 0)

    def deconvolution(self, te: float) -> tuple[np.ndarray, np.ndarray]:
        """Forsyth's a = rho_c / (drho xi) and b = drho / (rho_c phi) at each distinct |k|."""
        return forsyth_coefficients(self.k_group, te, self.plate)

    def free_air(self, te: float) -> np.ndarray:
        """Free-air admittance (mGal m⁻¹) on the window's rfft2 grid."""
        return free_air_admittance(self.bands.k, self.plate.with_te(te), self.layers, self.contrast)

    def chunk(self, channels: list[tuple[np.ndarray, np.ndarray]]) -> _Chunk:
        """The spectra of stacks of windows (windows, ny, nx) of topography and anomaly,
        one pair per channel (the products of the channels are summed)."""
        if self.quantity == "bouguer":
            return _BouguerChunk(self, _taper_parts(self, channels))
        return _FreeAirChunk(self, channels)

    def bytes_per_window(self) -> int:
        """Memory (bytes) one window of a chunk needs, about."""
        ny, nx = self.shape
        coefficients = int(self.bands.inside.sum())
        tapers = len(self.bands.tapers)
        grids = 8 * ny * nx * 6 + 16 * ny * (nx // 2 + 1) * 2
        # per-sector and delete-one sums and the temporaries of a delete-one misfit
        subsets = 8 * JACKKNIFE_SECTORS * 12 * (self.k_group.size + self.n_bands)
        return grids + 16 * coefficients * (3 * tapers + 6) + subsets


def _window_fit(
    chunk: _Chunk,
    row: int,
    coarse: np.ndarray,
    log_grid: np.ndarray,
    n_bands: int,
    confidence: float,
) -> tuple[float, float, float, float, bool, bool]:
    """Best log te of one window, its interval ends and whether they closed, and its RSS."""
    known = dict(zip(log_grid.tolist(), coarse.tolist(), strict=True))
    rows = slice(row, row + 1)

    def objective(log_te: float) -> float:
        if log_te not in known:
            known[log_te] = float(chunk.rss(math.exp(log_te), rows)[0])
        return known[log_te]

    _, best = grid_then_refine(objective, log_grid, xatol=_XTOL)
    rss_min = objective(best)
    threshold, _ = interval_threshold(
        rss_min, n_bands, 1, chunk.correlation(math.exp(best), row), confidence
    )
    below = log_grid[log_grid < best][::-1]
    above = log_grid[log_grid > best]
    low, low_closed = (best, False)
    high, high_closed = (best, False)
    if below.size:
        low, low_closed = interval_end(objective, best, rss_min, threshold, below, _XTOL)
    if above.size:
        high, high_closed = interval_end(objective, best, rss_min, threshold, above, _XTOL)
    return best, low, high, rss_min, low_closed, high_closed


def _jackknife_spread(
    chunk: _Chunk,
    rows: np.ndarray,
    best: np.ndarray,
    span: np.ndarray,
    log_bounds: tuple[float, float],
) -> np.ndarray:
    """Delete-one-sector jackknife standard error of log te of the windows *rows*.

    Each delete-one estimate is the minimum of its RSS on a grid of :data:`_JK_POINTS`
    log te across ``best ± span`` (all windows at once, each at its own te), refined by
    the parabola through the grid's best point and its neighbours; windows whose minimum
    lies on the grid's edge are searched again over a span :data:`_JK_WIDEN` times wider
    (at most :data:`_JK_ROUNDS` grids). Thomson & Chave (1991): with K estimates
    theta_j, var = (K - 1) / K sum_j (theta_j - mean)² (K sectors).
    """
    offsets = np.linspace(-1.0, 1.0, _JK_POINTS)
    theta: np.ndarray | None = None
    todo = np.arange(rows.size)
    span = span.copy()
    for attempt in range(_JK_ROUNDS):
        x = np.clip(best[todo, None] + span[todo, None] * offsets, *log_bounds)
        subset_rss = chunk.subset_rss(rows[todo])
        rss = np.stack(
            [subset_rss(np.exp(x[:, i])) for i in range(_JK_POINTS)], axis=-1
        )  # (tapers, windows, points)
        if theta is None:
            theta = np.full((rss.shape[0], rows.size), np.nan)
        at = np.argmin(rss, axis=-1)  # (tapers, windows)
        inner = np.clip(at, 1, _JK_POINTS - 2)
        cols = np.arange(todo.size)[None, :]
        x3 = np.stack([x[cols, inner + d] for d in (-1, 0, 1)])
        r3 = np.stack(
            [np.take_along_axis(rss, (inner + d)[..., None], -1)[..., 0] for d in (-1, 0, 1)]
        )
        lowest = x[cols, at]
        theta[:, todo] = np.where(at == inner, _parabola_vertex(x3, r3), lowest)
        edge = (at != inner) & (lowest > log_bounds[0]) & (lowest < log_bounds[1])
        again = edge.any(axis=0)
        if not again.any() or attempt == _JK_ROUNDS - 1:
            break
        todo = todo[again]
        span[todo] *= _JK_WIDEN
    assert theta is not None
    k = theta.shape[0]
    return np.sqrt((k - 1) / k * np.sum((theta - theta.mean(axis=0)) ** 2, axis=0))


def _difference(values: np.ndarray, axis: int) -> np.ndarray:
    """Central difference of a grid along *axis* (one-sided at the edges; per cell), so
    that reversing the grid's rows or columns only reverses the result."""
    return np.asarray(np.gradient(values, axis=axis))


def _student_t(confidence: float, dof: int) -> float:
    """Two-sided *confidence* quantile of Student's t with *dof* degrees of freedom."""
    from scipy.stats import t  # imported here: scipy.stats is slow to import

    return float(t.ppf(0.5 + confidence / 2.0, dof))


def _parabola_vertex(x: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Abscissa of the minimum of the parabola through (x[i], r[i]), i = 0, 1, 2 (stacked on
    the first axis), kept within [x[0], x[2]]; x[1] where the points are collinear."""
    d0, d2 = x[1] - x[0], x[1] - x[2]
    numerator = d0**2 * (r[1] - r[2]) - d2**2 * (r[1] - r[0])
    denominator = d0 * (r[1] - r[2]) - d2 * (r[1] - r[0])
    with np.errstate(invalid="ignore", divide="ignore"):
        vertex = x[1] - 0.5 * numerator / denominator
    vertex = np.where(np.isfinite(vertex) & (denominator != 0), vertex, x[1])
    return np.asarray(np.clip(vertex, x[0], x[2]))


def te_map(
    topography: xr.DataArray,
    anomaly: xr.DataArray,
    plate: Plate,
    *,
    window: float,
    step: float | None = None,
    quantity: str = "bouguer",
    bounds: tuple[float, float] = TE_MAP_BOUNDS,
    samples: int = TE_MAP_SAMPLES,
    bands: int = 16,
    bandwidth: float = TE_MAP_BANDWIDTH,
    tapers: int | None = None,
    wavenumber_range: tuple[float, float] | None = None,
    moho_depth: float | None = None,
    gravity: CrustLayers | None = None,
    topography_contrast: float | None = None,
    confidence: float = 0.95,
    jackknife: bool = True,
    prewhiten: bool = True,
    method: str = "multitaper",
    progress: Progress | None = None,
) -> xr.Dataset:
    """Elastic thickness as a map, from moving-window multitaper spectra.

    Each square window of side *window* (centres every *step*) gets its own te and
    interval (module docstring): Forsyth's (1985) Bouguer coherence with load
    deconvolution by default, or the free-air admittance of a top-loaded plate.

    Parameters
    ----------
    topography : xarray.DataArray
        Topography H (m, up), dims ``("y", "x")``, regular grid in metres.
    anomaly : xarray.DataArray
        Bouguer (or free-air) anomaly (mGal) on the same grid.
    plate : Plate
        Moduli, ``mantle_density`` and ``crust_density`` (Forsyth's rho_m, rho_c) and,
        for the free-air admittance, the infill; its te is ignored.
    window : float
        Side of the windows (m): about 3 to 4 times the flexural wavelength of the
        stiffest plate expected (longer windows resolve stiffer plates but blur the map;
        ``tests/benchmarks/te_map.py`` measures the trade-off).
    step : float, optional
        Distance between window centres (m); default a quarter of *window*.
    quantity : {"bouguer", "free_air"}, default "bouguer"
        ``"bouguer"``: Bouguer coherence, Forsyth's two-load model with the loads
        deconvolved in each window (no load-ratio parameter). ``"free_air"``: free-air
        admittance of a top-loaded plate (PHYSICS.md 6.2, needs *gravity* and
        *topography_contrast*), its prediction estimated from each window's topography.
    bounds : tuple of float, default (1e3, 1.5e5)
        te search range (m): *samples* log-spaced trials, then bounded Brent.
    samples : int, default 31
        Trial te of the coarse search (all windows at once).
    bands, bandwidth, tapers
        Annuli and multitapers of each window, as in
        :func:`gridflex.estimation.admittance.cross_spectra`.
    wavenumber_range : tuple of float, optional
        Use only bands whose mean wavenumber lies in this range (rad m⁻¹).
    moho_depth : float, optional
        Depth of the Moho below the observation plane (m), for the Bouguer anomaly's
        continuation to Moho relief; default ``plate.crust_thickness``.
    gravity : CrustLayers, optional
        Layer depths of the free-air admittance.
    topography_contrast : float, optional
        Density contrast of the topography (kg m⁻³) of the free-air admittance.
    confidence : float, default 0.95
        Confidence of the intervals: the profile-likelihood rule of
        :func:`gridflex.estimation.likelihood.interval_threshold` with n the number of
        bands used and one parameter, and the t quantile of the jackknife.
    jackknife : bool, default True
        Add the delete-one-sector jackknife spread of te to the interval (module
        docstring). False leaves the misfit interval alone, which measures only how well
        the band curve pins te (it held the truth in 20-41 % of the interior windows of
        the benchmark's two-domain plates).
    prewhiten : bool, default True
        Difference the grids along x and y first (module docstring); False transforms
        them as they are. With ``method="fan_wavelet"`` the spectra are multiplied by
        |k| instead (the same filter, exact in the Fourier domain).
    method : {"multitaper", "fan_wavelet"}, default "multitaper"
        ``"multitaper"``: the moving windows above. ``"fan_wavelet"``: Morlet wavelets
        in a fan of azimuths (Kirby & Swain 2011; :mod:`gridflex.estimation.fan_wavelet`),
        evaluated at the same centres, Bouguer coherence only; *window* sets the longest
        equivalent wavelength, *bands* the number of scales; *bandwidth* and *tapers*
        must stay at their defaults (refused otherwise). Measured on two-domain plates
        (10 | 40 km): the step 190-200 km wide against 465-926 km, but te -12 to -14 %
        in the interiors against -2 to -14 %, and intervals 3-7 times wider
        (``tests/benchmarks/te_map.py``).
    progress : callable, optional
        ``progress(done, total)`` after each window.

    Returns
    -------
    xarray.Dataset
        On dims ``("y", "x")`` of the window centres (coordinates in the data's order and
        CRS; ``attrs["crs_wkt"]`` copied from the topography): ``te``, ``te_low``,
        ``te_high`` (m; the interval of the module docstring) and ``rms_misfit`` (of
        the coherence, or mGal m⁻¹); ``attrs["interval"]`` states the interval's rule.
        An interval that reaches a search bound ends at that bound (one
        :class:`OpenIntervalWarning` counts them).

    Raises
    ------
    InputError
        Grids that differ or hold NaN, a window shorter than 16 cells or longer than the
        grid, bad settings, fewer than 3 usable bands, or not enough memory.
    """
    spec = check_grid(topography, "topography")
    check_grid(anomaly, "anomaly")
    check_same_grid(anomaly, topography, "anomaly")
    quantity = check_choice("quantity", quantity, TE_MAP_QUANTITIES)
    window = check_number("window", window, minimum=0.0, unit="m", strict=True)
    step = (
        window / 4.0
        if step is None
        else check_number("step", step, minimum=0.0, unit="m", strict=True)
    )
    low, high = check_search_bounds("bounds", bounds, "m")
    samples = check_integer("samples", samples, minimum=3)
    confidence = check_number("confidence", confidence)
    if not 0.0 < confidence < 1.0:
        raise InputError(f"confidence must lie in (0, 1), got {confidence!r}")
    jackknife = check_flag("jackknife", jackknife)
    prewhiten = check_flag("prewhiten", prewhiten)
    method = check_choice("method", method, TE_MAP_METHODS)
    if method == "fan_wavelet" and quantity != "bouguer":
        raise InputError(
            f"method 'fan_wavelet' fits quantity 'bouguer' only, got quantity {quantity!r}"
        )
    if method == "fan_wavelet" and (tapers is not None or bandwidth != TE_MAP_BANDWIDTH):
        # refused rather than ignored: a user who set them expects them to act
        raise InputError(
            "bandwidth and tapers set the multitaper's tapers; method 'fan_wavelet' has "
            f"none (got bandwidth {bandwidth!r}, tapers {tapers!r}): leave them at their "
            "defaults"
        )
    fit = _Fit((low, high), samples, confidence, jackknife)
    shape = (
        _window_cells(window, spec.dy, spec.ny, "y"),
        _window_cells(window, spec.dx, spec.nx, "x"),
    )
    steps = (max(int(round(step / spec.dy)), 1), max(int(round(step / spec.dx)), 1))
    if quantity == "free_air" and (gravity is None or topography_contrast is None):
        raise InputError(
            "quantity 'free_air' needs gravity=CrustLayers(...) and topography_contrast (kg/m3)"
        )
    spectral: dict[str, Any] = {
        "bands": bands,
        "bandwidth": bandwidth,
        "tapers": tapers,
        "wavenumber_range": (
            None
            if wavenumber_range is None
            else check_search_bounds("wavenumber_range", wavenumber_range, "rad/m", positive=False)
        ),
        "moho_depth": plate.crust_thickness
        if moho_depth is None
        else check_number("moho_depth", moho_depth, minimum=0.0, unit="m"),
        "gravity": gravity,
        "topography_contrast": topography_contrast,
        "confidence": confidence,
        "interval": (
            "profile-likelihood band-misfit interval and delete-one-sector jackknife "
            "(Student t) added in quadrature in log te"
            if jackknife
            else "profile-likelihood band-misfit interval"
        ),
        "prewhiten": prewhiten,
    }
    starts_y = _starts(spec.ny, shape[0], steps[0])
    starts_x = _starts(spec.nx, shape[1], steps[1])
    if method == "fan_wavelet":
        chunk, attrs = fan_wavelet_chunk(
            topography, anomaly, plate, starts_y, starts_x, shape, spectral
        )
        out, open_sides = _fit_windows([(0, chunk)], chunk.observed.shape[0], fit, progress)
    else:
        setup = _Setup(spec, shape, plate, quantity, spectral)
        out, open_sides = _fit_windows(
            _multitaper_chunks(setup, topography, anomaly, starts_y, starts_x, prewhiten),
            starts_y.size * starts_x.size,
            fit,
            progress,
        )
        attrs = _multitaper_attrs(setup, spectral, shape)
    _warn_open(out, open_sides, confidence, bounds)
    attrs.update(
        window=float(window),
        window_cells=np.asarray(shape),
        step=float(step),
        confidence=float(confidence),
        interval=spectral["interval"],
    )
    if quantity == "bouguer":
        attrs["moho_depth"] = float(spectral["moho_depth"])
    return _map_dataset(topography, out, starts_y, starts_x, shape, attrs)


def _multitaper_chunks(
    setup: _Setup,
    topography: xr.DataArray,
    anomaly: xr.DataArray,
    starts_y: np.ndarray,
    starts_x: np.ndarray,
    prewhiten: bool,
) -> Iterator[tuple[int, _Chunk]]:
    """The spectra of the windows, chunk by chunk, with the index of each chunk's first
    window (the stack's memory estimated first)."""
    shape = setup.shape
    count = starts_y.size * starts_x.size
    per_window = setup.bytes_per_window() * (2 if prewhiten else 1)
    size = int(max(1, min(count, _CHUNK_BYTES // per_window)))
    check_memory(
        size * per_window,
        f"te map: a chunk of {size} windows of {shape[0]} x {shape[1]} cells",
        advice="use a smaller window or fewer bands",
    )
    fields = [np.asarray(grid.values, dtype=np.float64) for grid in (topography, anomaly)]
    if prewhiten:  # the differences along x and along y, two channels
        pairs = [[_difference(f, axis) for f in fields] for axis in (1, 0)]
    else:
        pairs = [fields]
    views = [[np.lib.stride_tricks.sliding_window_view(f, shape) for f in pair] for pair in pairs]
    iy, ix = (a.ravel() for a in np.meshgrid(starts_y, starts_x, indexing="ij"))
    for first in range(0, count, size):
        sel = slice(first, min(first + size, count))
        yield first, setup.chunk([(h[iy[sel], ix[sel]], g[iy[sel], ix[sel]]) for h, g in views])


class _Fit:
    """Settings of the te search and interval of every window."""

    def __init__(
        self, bounds: tuple[float, float], samples: int, confidence: float, jackknife: bool
    ) -> None:
        self.bounds = bounds
        self.log_grid = np.linspace(math.log(bounds[0]), math.log(bounds[1]), samples)
        self.confidence = confidence
        self.jackknife = jackknife
        self.jackknife_t = _student_t(confidence, JACKKNIFE_SECTORS - 1) if jackknife else 0.0


def _fit_windows(
    chunks: Iterable[tuple[int, _Chunk]],
    count: int,
    fit: _Fit,
    progress: Progress | None,
) -> tuple[np.ndarray, np.ndarray]:
    """te, te_low, te_high and the RSS (rows 0-3 of a (5, count) array, NaN where a window
    has no fit) of every window, and whether its interval reached a search bound."""
    log_grid = fit.log_grid
    out = np.full((5, count), np.nan)
    open_sides = np.zeros(count, dtype=bool)
    done = 0
    log_bounds = (float(log_grid[0]), float(log_grid[-1]))
    logs = np.full((3, count), np.nan)  # log te, log te_low, log te_high
    for first, chunk in chunks:
        n_bands = chunk.observed.shape[1]
        sel = slice(first, first + chunk.observed.shape[0])
        coarse = np.stack([chunk.rss(math.exp(x)) for x in log_grid], axis=1)
        for row in range(coarse.shape[0]):
            index = first + row
            if np.all(np.isfinite(coarse[row])):
                best, lo, hi, rss, lo_ok, hi_ok = _window_fit(
                    chunk, row, coarse[row], log_grid, n_bands, fit.confidence
                )
                logs[:, index] = (best, lo, hi)
                out[3, index] = rss
                open_sides[index] = not (lo_ok and hi_ok)
            done += 1
            if progress is not None:
                progress(done, count)
        fitted = np.flatnonzero(np.isfinite(logs[0, sel]))
        if fit.jackknife and fitted.size:
            centre, lower, upper = logs[:, sel][:, fitted]
            span = np.maximum(np.maximum(centre - lower, upper - centre), _JK_MIN_SPAN)
            spread = fit.jackknife_t * _jackknife_spread(chunk, fitted, centre, span, log_bounds)
            at = first + fitted
            logs[1, at] = np.maximum(centre - np.hypot(centre - lower, spread), log_bounds[0])
            logs[2, at] = np.minimum(centre + np.hypot(upper - centre, spread), log_bounds[1])
            open_sides[at] |= (logs[1, at] <= log_bounds[0]) | (logs[2, at] >= log_bounds[1])
    out[:3] = np.exp(logs)
    return out, open_sides


def _warn_open(
    out: np.ndarray, open_sides: np.ndarray, confidence: float, bounds: tuple[float, float]
) -> None:
    count = open_sides.size
    if open_sides.any():
        warnings.warn(
            f"te map: the {confidence:.0%} interval of {int(open_sides.sum())} of {count} "
            f"windows reaches a search bound {bounds!r} m (reported as that bound): the data "
            "do not constrain te there; widen the bounds or the window",
            OpenIntervalWarning,
            stacklevel=3,
        )
    blank = int((~np.isfinite(out[0])).sum())
    if blank:
        log.warning("te map: %d window(s) without power in every band left NaN", blank)


def _multitaper_attrs(setup: _Setup, spectral: dict[str, Any], shape: tuple[int, int]) -> dict:
    method = (
        "Bouguer coherence, Forsyth (1985) two-load model, load deconvolution"
        if setup.quantity == "bouguer"
        else "free-air admittance of a top-loaded plate, prediction from the window's topography"
    )
    return {
        "method": f"moving-window 2-D multitaper; {method}",
        "quantity": setup.quantity,
        "tapers_per_axis": setup.bands.count,
        "bandwidth": float(spectral["bandwidth"]),
        "bands_used": setup.n_bands,
        "prewhiten": int(spectral["prewhiten"]),
        "band_wavenumbers": setup.k_mean,
    }


def _centres(coord: np.ndarray, starts: np.ndarray, size: int) -> np.ndarray:
    """Coordinates of window centres (the coordinate's own order and spacing)."""
    spacing = (coord[-1] - coord[0]) / (coord.size - 1)
    return coord[0] + (starts + (size - 1) / 2.0) * spacing


def _map_dataset(
    topography: xr.DataArray,
    out: np.ndarray,
    starts_y: np.ndarray,
    starts_x: np.ndarray,
    shape: tuple[int, int],
    attrs: dict[str, Any],
) -> xr.Dataset:
    grid_shape = (starts_y.size, starts_x.size)
    y = _centres(np.asarray(topography["y"].values, float), starts_y, shape[0])
    x = _centres(np.asarray(topography["x"].values, float), starts_x, shape[1])
    misfit_units = "1" if attrs["quantity"] == "bouguer" else "mGal m-1"
    names = {
        "te": "elastic thickness of the window",
        "te_low": "lower end of the te interval",
        "te_high": "upper end of the te interval",
    }
    data: dict[str, Any] = {
        name: (("y", "x"), out[i].reshape(grid_shape), {"units": "m", "long_name": text})
        for i, (name, text) in enumerate(names.items())
    }
    data["rms_misfit"] = (
        ("y", "x"),
        np.sqrt(out[3].reshape(grid_shape) / attrs["bands_used"]),
        {"units": misfit_units, "long_name": "RMS misfit over the bands used"},
    )
    attrs = dict(attrs)
    crs = topography.attrs.get("crs_wkt")
    if crs:
        attrs["crs_wkt"] = crs
    coords = {
        "y": ("y", y, dict(topography["y"].attrs)),
        "x": ("x", x, dict(topography["x"].attrs)),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)
