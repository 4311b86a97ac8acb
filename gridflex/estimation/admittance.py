"""Admittance and coherence between topography and gravity, and Te from them.

Spectra are estimated with 2-D multitapers (products of 1-D discrete prolate
spheroidal sequences along y and x; Thomson 1982, *Proc. IEEE* 70; Simons, Zuber
& Korenaga 2000, *JGR* 105) and averaged over annuli of radial wavenumber
(PHYSICS.md 8.2):

.. math:: Z(k) = \\frac{\\Re \\langle A H^* \\rangle}{\\langle H H^* \\rangle}, \\qquad
          \\gamma^2(k) = \\frac{|\\langle A H^* \\rangle|^2}
                               {\\langle A A^* \\rangle \\langle H H^* \\rangle}

Te is then the value whose theoretical curve fits the observed one best in the
least-squares sense over the bands: the free-air admittance of a top-loaded
plate (McKenzie & Bowin 1976; PHYSICS.md 6.2) or Forsyth's (1985) Bouguer
coherence and admittance for uncorrelated surface and subsurface loads
(PHYSICS.md 8.1, 8.2).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.fft
import scipy.optimize
import xarray as xr

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.errors import GridflexWarning, InputError
from gridflex.estimation.search import check_search_bounds, grid_then_refine
from gridflex.gravity.first_order import CrustLayers, compensation_factor
from gridflex.grid import GridSpec, check_grid, check_same_grid, wavenumbers_squared
from gridflex.memory import check_memory
from gridflex.plate import Plate, rigidity_from_te
from gridflex.validation import check_choice, check_integer, check_number

__all__ = [
    "CURVES",
    "LeakageBiasWarning",
    "SpectralFit",
    "bouguer_admittance",
    "bouguer_coherence",
    "cross_spectra",
    "fit_te_spectral",
    "free_air_admittance",
]

CURVES = ("free_air_admittance", "bouguer_admittance", "bouguer_coherence")
"""Theoretical curves accepted by :func:`fit_te_spectral`."""

_TWO_PI_G = 2.0 * math.pi * GRAVITATIONAL_CONSTANT


class LeakageBiasWarning(GridflexWarning):
    """A spectral prediction could not be estimated like the data: taper leakage of a
    red topography spectrum pulls the fitted te low."""


def _detrend(values: np.ndarray) -> np.ndarray:
    """Remove the least-squares plane a + b i + c j (common practice before tapering)
    from a grid, or from each grid of a stack (the last two axes)."""
    ny, nx = values.shape[-2:]
    j, i = np.meshgrid(np.arange(nx, dtype=np.float64), np.arange(ny, dtype=np.float64))
    design = np.column_stack([np.ones(ny * nx), i.ravel(), j.ravel()])
    flat = values.reshape(-1, ny * nx)
    coef, *_ = np.linalg.lstsq(design, flat.T, rcond=None)
    return values - (design @ coef).T.reshape(values.shape)


class _Bands:
    """Multitaper transform of grids and averaging of products over wavenumber annuli."""

    def __init__(self, spec: GridSpec, edges: np.ndarray, bandwidth: float, count: int) -> None:
        ky2, kx2 = wavenumbers_squared(spec.shape, spec.dy, spec.dx)
        self.shape = spec.shape
        self.k = np.sqrt(ky2 + kx2)
        index = np.digitize(self.k, edges) - 1
        self.inside = (index >= 0) & (index < edges.size - 1)
        self.flat = index[self.inside]
        self.nb = edges.size - 1
        self.edges = edges
        from scipy.signal import windows  # imported here: slow, and only tapers need it

        vy = np.atleast_2d(windows.dpss(spec.ny, bandwidth, count))
        vx = np.atleast_2d(windows.dpss(spec.nx, bandwidth, count))
        self.tapers = [(ty, tx) for ty in vy for tx in vx]
        self.count = count
        check_memory(16.0 * len(self.tapers) * self.flat.size * 2, "multitaper spectra")

    def transform(self, values: np.ndarray) -> list[np.ndarray]:
        """Band-selected Fourier coefficients of the detrended grid (or of each grid of a
        stack, the last two axes), one array per taper."""
        v = _detrend(np.asarray(values, dtype=np.float64))
        return [
            scipy.fft.rfft2(ty[:, None] * tx[None, :] * v, workers=-1)[..., self.inside]
            for ty, tx in self.tapers
        ]

    def _sum(self, weights: np.ndarray) -> np.ndarray:
        return np.bincount(self.flat, weights=weights, minlength=self.nb)

    def averages(
        self, h: list[np.ndarray], a: list[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Band sums of A H*, |H|² and |A|² over all tapers."""
        cross = np.zeros(self.nb, dtype=np.complex128)
        power_h = np.zeros(self.nb)
        power_a = np.zeros(self.nb)
        for hh, aa in zip(h, a, strict=True):
            product = aa * hh.conj()
            cross += self._sum(product.real) + 1j * self._sum(product.imag)
            power_h += self._sum(np.abs(hh) ** 2)
            power_a += self._sum(np.abs(aa) ** 2)
        return cross, power_h, power_a


def _band_setup(spec: GridSpec, bands: Any, bandwidth: Any, tapers: Any) -> _Bands:
    """Check the band and taper settings of :func:`cross_spectra` and build its bands."""
    bandwidth = check_number("bandwidth (NW)", bandwidth, minimum=1.0)
    if tapers is None:
        count = max(int(round(2 * bandwidth - 1)), 1)
    else:
        count = check_integer("tapers", tapers, minimum=1)
    if count > 2 * bandwidth:
        raise InputError(
            f"tapers must lie in [1, 2 bandwidth]; got {tapers!r} for NW {bandwidth!r}"
        )
    k_nyquist = min(math.pi / spec.dx, math.pi / spec.dy)
    if isinstance(bands, (int, np.integer)):
        bands = check_integer("bands", bands, minimum=1)
        length = min(spec.nx * spec.dx, spec.ny * spec.dy)
        edges = np.geomspace(2.0 * math.pi * bandwidth / length, k_nyquist, int(bands) + 1)
    else:
        edges = np.asarray(bands, dtype=np.float64)
        if edges.ndim != 1 or edges.size < 2 or np.any(np.diff(edges) <= 0) or edges[0] < 0:
            raise InputError("bands must be an int or increasing band edges (rad/m) >= 0")
    return _Bands(spec, edges, bandwidth, count)


def cross_spectra(
    topography: xr.DataArray,
    anomaly: xr.DataArray,
    *,
    bands: int | Sequence[float] = 20,
    bandwidth: float = 2.0,
    tapers: int | None = None,
) -> xr.Dataset:
    """Multitaper admittance and coherence averaged in wavenumber annuli.

    Parameters
    ----------
    topography : xarray.DataArray
        Topography or load height H (m), dims ``("y", "x")``, regular grid in metres.
    anomaly : xarray.DataArray
        Gravity anomaly A (mGal) on the same grid.
    bands : int or sequence of float, default 20
        Number of log-spaced annuli between ``2 pi bandwidth / L`` (L the shorter
        side of the window) and the smaller Nyquist wavenumber, or the band edges
        themselves (rad m⁻¹, increasing).
    bandwidth : float, default 2.0
        Time-bandwidth product NW of the 1-D tapers.
    tapers : int, optional
        Tapers per axis (default ``2 NW - 1``); the 2-D set is their products.

    Returns
    -------
    xarray.Dataset
        On dim ``wavenumber`` (mean rad m⁻¹ of the band): ``admittance`` (mGal
        m⁻¹), ``coherence`` (raw), ``coherence_corrected`` ((n γ² - 1)/(n - 1),
        an approximate bias correction [from memory, PHYSICS.md 8.2]), ``estimates``
        (Fourier coefficients in the band), ``wavelength`` (m), ``band_low`` and
        ``band_high`` (rad m⁻¹), and ``topography`` (dims ``("y", "x")``, the grid
        given), from which :func:`fit_te_spectral` estimates its prediction like the
        data (drop it to save memory; the fit then warns). Empty bands are dropped. Both grids are
        detrended (plane removed) first. Attributes keep the taper settings and
        the band edges.

    Raises
    ------
    InputError
        Grids that differ or are invalid, bad band edges or taper settings.
    """
    spec = check_grid(topography, "topography")
    check_grid(anomaly, "anomaly")
    check_same_grid(anomaly, topography, "anomaly")
    setup = _band_setup(spec, bands, bandwidth, tapers)
    cross, power_h, power_a = setup.averages(
        setup.transform(topography.values), setup.transform(anomaly.values)
    )
    nb, edges = setup.nb, setup.edges
    estimates = np.bincount(setup.flat, minlength=nb)
    k_sum = np.bincount(setup.flat, weights=setup.k[setup.inside], minlength=nb)
    keep = (estimates > 0) & (power_h > 0) & (power_a > 0)
    k_mean = k_sum[keep] / estimates[keep]
    n = estimates[keep].astype(np.float64)
    admittance = cross[keep].real / power_h[keep]
    coherence = np.abs(cross[keep]) ** 2 / (power_h[keep] * power_a[keep])
    with np.errstate(invalid="ignore", divide="ignore"):
        corrected = np.where(n > 1, (n * coherence - 1.0) / (n - 1.0), np.nan)
    return xr.Dataset(
        {
            "admittance": (
                "wavenumber",
                admittance,
                {"units": "mGal m-1", "long_name": "admittance Re<A H*>/<H H*>"},
            ),
            "coherence": ("wavenumber", coherence, {"units": "1", "long_name": "coherence"}),
            "coherence_corrected": (
                "wavenumber",
                np.clip(corrected, 0.0, 1.0),
                {"units": "1", "long_name": "coherence corrected for estimation bias"},
            ),
            "estimates": ("wavenumber", estimates[keep], {"long_name": "coefficients in band"}),
            "wavelength": ("wavenumber", 2.0 * math.pi / k_mean, {"units": "m"}),
            "band_low": ("wavenumber", edges[:-1][keep], {"units": "rad m-1"}),
            "band_high": ("wavenumber", edges[1:][keep], {"units": "rad m-1"}),
            "topography": (
                ("y", "x"),
                np.asarray(topography.values, dtype=np.float64),
                {"units": topography.attrs.get("units", "m"), "long_name": "topography given"},
            ),
        },
        coords={
            "wavenumber": (
                "wavenumber",
                k_mean,
                {"units": "rad m-1", "long_name": "mean radial wavenumber of the band"},
            ),
            "y": topography["y"].values,
            "x": topography["x"].values,
        },
        attrs={
            "tapers_per_axis": setup.count,
            "bandwidth": float(bandwidth),
            "band_edges": edges,
            "detrend": "plane",
            "method": "2-D multitaper (DPSS products), annulus average",
        },
    )


def _flexural_ratio(k: np.ndarray, te: Any, plate: Plate, density: float) -> np.ndarray:
    """1 + D k⁴ / (density g): Forsyth's xi (density = rho_m - rho_c) or phi (rho_c)."""
    d = rigidity_from_te(te, plate.youngs_modulus, plate.poisson_ratio)
    return 1.0 + d * k**4 / (density * plate.gravity)


def free_air_admittance(
    wavenumber: np.ndarray,
    plate: Plate,
    layers: CrustLayers,
    topography_contrast: float,
    te: np.ndarray | None = None,
) -> np.ndarray:
    """Free-air admittance (mGal m⁻¹) of topography that loads the plate from above.

    .. math:: Z(k) = 2 \\pi G \\, \\Delta\\rho_t \\, C(k)

    with C the compensation factor of :func:`gridflex.gravity.first_order.compensation_factor`
    and Φ(k) = (D k⁴ / ((rho_m - rho_f) g) + 1)⁻¹. With infill = crust = load
    density this is PHYSICS.md eq. 6.2 (McKenzie & Bowin 1976; Watts 2001).

    Parameters
    ----------
    wavenumber : numpy.ndarray
        Radial wavenumber k (rad m⁻¹).
    plate : Plate
        te, moduli, mantle and infill densities.
    layers : CrustLayers
        Sea-floor depth below the observation plane, crustal thickness and density.
    topography_contrast : float
        Density of the topography minus that of what it displaces (kg m⁻³), e.g.
        rho_c - rho_w at sea.
    te : numpy.ndarray, optional
        Several te (m) instead of ``plate.te``, shaped to broadcast against
        *wavenumber* (e.g. ``te[:, None, None]`` for one admittance grid per te).
    """
    k = np.asarray(wavenumber, dtype=np.float64)
    thickness = float(plate.te) if te is None else np.asarray(te, dtype=np.float64)
    response = 1.0 / _flexural_ratio(k, thickness, plate, plate.density_contrast)
    factor = compensation_factor(k, response, layers, plate)
    return _TWO_PI_G * topography_contrast * factor / MGAL


def _forsyth_terms(k, plate, crust_density, load_ratio):
    drho = plate.mantle_density - crust_density
    if not drho > 0:
        raise InputError(
            f"crust_density ({crust_density!r}) must be less than mantle_density "
            f"({plate.mantle_density!r})"
        )
    xi = _flexural_ratio(k, float(plate.te), plate, drho)
    phi = _flexural_ratio(k, float(plate.te), plate, crust_density)
    fr2 = (load_ratio * crust_density / drho) ** 2
    return xi, phi, fr2


def bouguer_coherence(
    wavenumber: np.ndarray, plate: Plate, crust_density: float, load_ratio: float
) -> np.ndarray:
    """Forsyth (1985) Bouguer coherence for uncorrelated surface and Moho loads.

    .. math:: \\gamma^2 = \\frac{(\\xi + f^2 r^2 \\phi)^2}
              {(\\xi^2 + f^2 r^2)(1 + f^2 r^2 \\phi^2)}

    with xi = 1 + D k⁴/((rho_m - rho_c) g), phi = 1 + D k⁴/(rho_c g), r = rho_c /
    (rho_m - rho_c) and f the ratio of subsurface to surface load (PHYSICS.md 8.1).
    The plate's infill density is not used (the crust fills the flexure).
    """
    k = np.asarray(wavenumber, dtype=np.float64)
    xi, phi, fr2 = _forsyth_terms(k, plate, crust_density, load_ratio)
    return (xi + fr2 * phi) ** 2 / ((xi**2 + fr2) * (1.0 + fr2 * phi**2))


def bouguer_admittance(
    wavenumber: np.ndarray,
    plate: Plate,
    crust_density: float,
    load_ratio: float,
    moho_depth: float,
) -> np.ndarray:
    """Forsyth (1985) Bouguer admittance (mGal m⁻¹), PHYSICS.md eq. 8.2.

    .. math:: Z_B = -2 \\pi G \\rho_c e^{-k z_m} \\frac{\\xi + f^2 r^2 \\phi}{\\xi^2 + f^2 r^2}
    """
    k = np.asarray(wavenumber, dtype=np.float64)
    xi, phi, fr2 = _forsyth_terms(k, plate, crust_density, load_ratio)
    return (
        -_TWO_PI_G
        * crust_density
        * np.exp(-k * moho_depth)
        * (xi + fr2 * phi)
        / (xi**2 + fr2)
        / MGAL
    )


def _matched_free_air(
    spectra: xr.Dataset,
    topography: xr.DataArray,
    plate: Plate,
    layers: CrustLayers,
    contrast: float,
    use: np.ndarray,
) -> Callable[[float, float], np.ndarray]:
    """Band admittance of the theory applied to *topography*, estimated like the data."""
    spec = check_grid(topography, "topography")
    try:
        edges = np.asarray(spectra.attrs["band_edges"], dtype=np.float64)
        setup = _band_setup(
            spec, edges, float(spectra.attrs["bandwidth"]), int(spectra.attrs["tapers_per_axis"])
        )
    except KeyError as exc:
        raise InputError(f"spectra lack attribute {exc}; make them with cross_spectra") from exc
    bands = np.searchsorted(edges, np.asarray(spectra["band_low"].values), side="left")[use]
    h_detrended = _detrend(np.asarray(topography.values, dtype=np.float64))
    h_spectrum = scipy.fft.rfft2(h_detrended, workers=-1)
    h_bands = setup.transform(h_detrended)

    def model(te: float, f: float) -> np.ndarray:  # noqa: ARG001
        z = free_air_admittance(setup.k, plate.with_te(te), layers, contrast)
        anomaly = scipy.fft.irfft2(z * h_spectrum, s=spec.shape, workers=-1)
        cross, power_h, _ = setup.averages(h_bands, setup.transform(anomaly))
        return cross.real[bands] / power_h[bands]

    return model


@dataclass(frozen=True)
class SpectralFit:
    """Result of :func:`fit_te_spectral`.

    Attributes
    ----------
    te : float
        Best elastic thickness (m).
    curve : str
        The fitted curve, one of :data:`CURVES`.
    load_ratio : float or None
        Fitted ratio f of subsurface to surface load (Forsyth curves), else None.
    rms : float
        RMS misfit over the bands used (mGal m⁻¹ or dimensionless).
    misfit : xarray.DataArray
        RMS misfit against ``te`` (m), sorted.
    curves : xarray.Dataset
        ``observed`` and ``predicted`` against ``wavenumber`` for the bands used.
    """

    te: float
    curve: str
    load_ratio: float | None
    rms: float
    misfit: xr.DataArray = field(repr=False)
    curves: xr.Dataset = field(repr=False)

    def summary(self) -> dict[str, Any]:
        """JSON-ready summary."""
        return {
            "te": self.te,
            "curve": self.curve,
            "load_ratio": self.load_ratio,
            "rms_misfit": self.rms,
        }


def _observed_curve(
    spectra: xr.Dataset, curve: str, wavenumber_range: tuple[float, float] | None
) -> tuple[str, np.ndarray, np.ndarray, np.ndarray]:
    """The observed curve on the bands used: (variable name, band selection, k, values)."""
    k = np.asarray(spectra["wavenumber"].values, dtype=np.float64)
    use = np.ones(k.shape, dtype=bool)
    if wavenumber_range is not None:
        use = (k >= wavenumber_range[0]) & (k <= wavenumber_range[1])
    name = "coherence_corrected" if curve == "bouguer_coherence" else "admittance"
    observed = np.asarray(spectra[name].values, dtype=np.float64)
    use &= np.isfinite(observed)
    if use.sum() < 3:
        raise InputError(f"only {int(use.sum())} usable bands in wavenumber_range; need >= 3")
    return name, use, k[use], observed[use]


Theory = Callable[[float, float], np.ndarray]
"""A theoretical curve on the bands used, as a function of (te (m), load ratio f)."""


def _theory(
    curve: str,
    k: np.ndarray,
    plate: Plate,
    options: dict[str, Any],
    spectra: xr.Dataset,
    use: np.ndarray,
) -> Theory:
    """The curve to fit; *options* holds the keywords of :func:`fit_te_spectral`."""
    crust_density = options["crust_density"]
    if curve == "bouguer_coherence":
        warnings.warn(
            "fit_te_spectral: the Bouguer coherence is fitted with Forsyth's analytic curve "
            "(one load ratio at all wavenumbers, no taper leakage); on red two-load "
            "synthetics it was off by -27 to +95 % (tests/benchmarks/spectral_bias.py). "
            "gridflex.te_map(topography, anomaly, plate, window=<the grid's side>) "
            "estimates the prediction from the data's own spectra (load deconvolution)",
            LeakageBiasWarning,
            stacklevel=3,
        )
        return lambda te, f: bouguer_coherence(k, plate.with_te(te), crust_density, f)
    if curve == "bouguer_admittance":
        if options["moho_depth"] is None:
            raise InputError("curve 'bouguer_admittance' needs moho_depth (m)")
        depth = float(options["moho_depth"])
        return lambda te, f: bouguer_admittance(k, plate.with_te(te), crust_density, f, depth)
    layers, contrast = options["gravity"], options["topography_contrast"]
    if layers is None or contrast is None:
        raise InputError(
            "curve 'free_air_admittance' needs gravity=CrustLayers(...) "
            "and topography_contrast (kg/m3)"
        )
    topography = options["topography"]
    if topography is None and "topography" in spectra.data_vars:
        topography = spectra["topography"]
    if topography is not None:
        return _matched_free_air(spectra, topography, plate, layers, contrast, use)
    warnings.warn(
        "fit_te_spectral: the spectra carry no topography and none was given, so the "
        "free-air prediction is the bare theoretical curve; taper leakage of red "
        "topography spectra then pulls te low (seen: 30-38 km for 50 km). Pass "
        "topography= or keep the spectra's 'topography' variable",
        LeakageBiasWarning,
        stacklevel=3,
    )
    return lambda te, f: free_air_admittance(k, plate.with_te(te), layers, float(contrast))


class _Profile:
    """Sum of squared misfits of a curve at trial Te, the load ratio fitted inside each."""

    def __init__(
        self,
        theory: Theory,
        observed: np.ndarray,
        with_ratio: bool,
        ratio_bounds: tuple[float, float],
    ) -> None:
        self.theory = theory
        self.observed = observed
        self.with_ratio = with_ratio
        self.ratio_grid = np.linspace(math.log(ratio_bounds[0]), math.log(ratio_bounds[1]), 9)
        self.ratios: dict[float, float] = {}
        self.cache: dict[float, float] = {}

    def squares(self, te: float, f: float) -> float:
        """Sum of squared differences between the observed and the curve of (te, f)."""
        r = self.observed - self.theory(te, f)
        return float(np.einsum("i,i", r, r))

    def _best_ratio(self, te: float) -> float:
        if not self.with_ratio:
            self.ratios[te] = float("nan")
            return self.squares(te, 0.0)
        _, best = grid_then_refine(lambda g: self.squares(te, math.exp(g)), self.ratio_grid)
        self.ratios[te] = math.exp(best)
        return self.squares(te, self.ratios[te])

    def objective(self, log_te: float) -> float:
        """The misfit at Te = exp(*log_te*) with the best load ratio (cached by Te)."""
        te = math.exp(log_te)
        if te not in self.cache:
            self.cache[te] = self._best_ratio(te)
        return self.cache[te]

    def misfit(self, bands: int, name: str) -> xr.DataArray:
        """RMS misfit against every Te evaluated, sorted."""
        tes = np.array(sorted(self.cache))
        return xr.DataArray(
            np.sqrt(np.array([self.cache[t] for t in tes]) / bands),
            dims=("te",),
            coords={"te": ("te", tes, {"units": "m"})},
            name="rms_misfit",
            attrs={"long_name": f"RMS misfit of {name}"},
        )


def fit_te_spectral(
    spectra: xr.Dataset,
    plate: Plate,
    curve: str = "free_air_admittance",
    *,
    bounds: tuple[float, float] = (1e3, 1e5),
    samples: int = 25,
    wavenumber_range: tuple[float, float] | None = None,
    gravity: CrustLayers | None = None,
    topography_contrast: float | None = None,
    crust_density: float = 2800.0,
    moho_depth: float | None = None,
    load_ratio_bounds: tuple[float, float] = (1e-2, 1e2),
    topography: xr.DataArray | None = None,
) -> SpectralFit:
    """Te whose theoretical admittance or coherence curve fits observed spectra best.

    Parameters
    ----------
    spectra : xarray.Dataset
        Output of :func:`cross_spectra`.
    plate : Plate
        Moduli and densities (its te is ignored).
    curve : {"free_air_admittance", "bouguer_admittance", "bouguer_coherence"}
        Theory to fit: :func:`free_air_admittance` (needs *gravity* and
        *topography_contrast*), :func:`bouguer_admittance` (needs *moho_depth*) or
        :func:`bouguer_coherence` (fitted to ``coherence_corrected``). For the
        Forsyth curves the load ratio f is a nuisance parameter fitted inside each Te.
        The analytic coherence curve is biased on red loads and warns
        (:class:`LeakageBiasWarning`); :func:`gridflex.te_map` with one window the size
        of the grid deconvolves the loads instead.
    bounds : tuple of float, default (1e3, 1e5)
        Te search range (m): log-spaced coarse grid of *samples*, then Brent.
    wavenumber_range : tuple of float, optional
        Use only bands with mean wavenumber in this range (rad m⁻¹).
    gravity : CrustLayers, optional
        Layer depths for the free-air curve.
    topography_contrast : float, optional
        Topography density contrast (kg m⁻³) for the free-air curve.
    crust_density : float, default 2800
        rho_c (kg m⁻³) of the Forsyth curves.
    moho_depth : float, optional
        Moho depth z_m below the observation plane (m) for the Bouguer admittance.
    load_ratio_bounds : tuple of float, default (0.01, 100)
        Search range of f.
    topography : xarray.DataArray, optional
        The topography the spectra were estimated from; by default the spectra's own
        ``topography`` variable (kept by :func:`cross_spectra`). With the free-air
        curve the prediction is estimated like the data: the theoretical admittance
        is applied to this topography and the model anomaly passes through the same
        tapers and bands. This removes most of the bias of taper leakage, which
        pulls Te low for red (steep) topography spectra. Without either, the bare
        curve is fitted and :class:`LeakageBiasWarning` is issued.

    Returns
    -------
    SpectralFit

    Raises
    ------
    InputError
        Unknown curve, missing curve parameters, bad bounds or too few bands.
    """
    curve = check_choice("curve", curve, CURVES)
    low, high = check_search_bounds("bounds", bounds, "m")
    name, use, k, observed = _observed_curve(spectra, curve, wavenumber_range)
    options = {
        "crust_density": crust_density,
        "moho_depth": moho_depth,
        "gravity": gravity,
        "topography_contrast": topography_contrast,
        "topography": topography,
    }
    theory = _theory(curve, k, plate, options, spectra, use)
    ratio_bounds = check_search_bounds("load_ratio_bounds", load_ratio_bounds)
    profile = _Profile(theory, observed, curve != "free_air_admittance", ratio_bounds)
    grid = np.linspace(math.log(low), math.log(high), check_integer("samples", samples, minimum=2))
    _, best_log = grid_then_refine(profile.objective, grid)
    te = math.exp(best_log)
    ss_min = profile.objective(best_log)
    f_best = profile.ratios[te] if profile.with_ratio else None
    predicted = theory(te, f_best if f_best is not None else 0.0)
    units = spectra[name].attrs.get("units", "")
    curves = xr.Dataset(
        {
            "observed": ("wavenumber", observed, {"units": units}),
            "predicted": ("wavenumber", predicted, {"units": units}),
        },
        coords={"wavenumber": ("wavenumber", k, {"units": "rad m-1"})},
        attrs={"curve": curve, "quantity": name, "te": te},
    )
    return SpectralFit(
        te=te,
        curve=curve,
        load_ratio=f_best,
        rms=math.sqrt(ss_min / k.size),
        misfit=profile.misfit(k.size, name),
        curves=curves,
    )
