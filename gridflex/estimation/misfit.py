"""Elastic thickness from an observed grid by forward-model misfit.

For each trial Te the plate's response to the known load is computed, turned into
the observed quantity (deflection, elevation of the flexed surface or free-air
anomaly) and compared with the observation inside a mask after removing the
best constant offset (a nuisance parameter solved by least squares inside each
Te). The residual sum of squares RSS(Te) is evaluated on a log-spaced coarse grid
and refined by Brent's method; the interval is the profile-likelihood bound

.. math:: \\frac{RSS(T_e) - RSS_{min}}{s^2} \\, \\frac{n_{eff}}{n} = \\chi^2_1(c),
          \\qquad s^2 = \\frac{RSS_{min}}{n - p}

(PHYSICS.md section 8.1; p = 2 for Te and the offset). All trial plates share
one FFT grid — padded for the stiffest plate of the search — and one load
spectrum, so each trial costs one transfer function and one inverse FFT.
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import scipy.fft
import scipy.optimize
import xarray as xr

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.engine import EDGES, check_edge_load, deflection_attrs, result_dataset
from gridflex.errors import GridflexWarning, InputError
from gridflex.estimation.search import check_search_bounds, grid_then_refine
from gridflex.gravity.anomalies import model_free_air_anomaly
from gridflex.gravity.first_order import CrustLayers, gravity_terms
from gridflex.grid import GridSpec, check_grid, check_same_grid, padded_shape
from gridflex.memory import check_memory
from gridflex.plate import Plate, rigidity_from_te
from gridflex.progress import Progress
from gridflex.solvers.spectral import (
    DEFAULT_PAD_FACTOR,
    SpectralProblem,
    decay_length,
    scale_spectrum,
)
from gridflex.validation import check_choice, check_integer, check_number

__all__ = ["QUANTITIES", "OpenIntervalWarning", "TeFit", "fit_te"]

log = logging.getLogger(__name__)

QUANTITIES = ("deflection", "surface", "free_air_anomaly")
"""Accepted values of ``fit_te(quantity=...)``."""

_UNITS = {"deflection": "m", "surface": "m", "free_air_anomaly": "mGal"}
_LONG_NAMES = {
    "deflection": "plate deflection (positive downward)",
    "surface": "elevation of the flexed surface (positive upward)",
    "free_air_anomaly": "free-air gravity anomaly",
}
_REFINE_XTOL = 1e-4  # in ln(Te): 0.01 % of Te
_ROOT_XTOL = 1e-6  # in ln(Te)


class OpenIntervalWarning(GridflexWarning):
    """The Te interval reaches a search bound: the data do not limit Te on that side."""


def _chi2_quantile(confidence: float) -> float:
    """The *confidence* quantile of the chi-square law with one degree of freedom."""
    from scipy.stats import chi2  # imported here: scipy.stats is slow to import

    return float(chi2.ppf(confidence, 1))


@dataclass(frozen=True)
class TeFit:
    """Result of :func:`fit_te`.

    Attributes
    ----------
    te : float
        Best-fitting elastic thickness (m).
    te_low, te_high : float
        Bounds (m) of the *confidence* interval where the scaled misfit increase
        reaches the chi-squared (1 degree of freedom) quantile; a search bound
        when the interval is open on that side (see *interval_closed*).
    interval_closed : tuple of bool
        Whether the low and the high bound were reached inside the search range.
    offset : float
        Fitted constant added to the model (unit of the observation).
    load_scale : float
        Fitted factor on the load (1 unless ``fit_load_scale``).
    rms : float
        RMS misfit at the best Te (unit of the observation).
    quantity : str
        What was fitted, one of :data:`QUANTITIES`.
    confidence : float
        Confidence level of the interval.
    threshold : float
        RSS increase that bounds the interval (unit of the observation squared).
    n_data : int
        Number of compared cells.
    n_effective : float
        Number of independent data assumed (n divided by the residual correlation
        factor; equal to n_data for independent noise).
    misfit : xarray.DataArray
        RMS misfit against ``te`` (m) for every Te evaluated, sorted; coordinate
        ``scaled_increase`` holds (RSS - RSS_min) n_eff / (n s²).
    model : xarray.Dataset
        The best model: ``deflection``, ``load``, ``observed``, ``predicted``
        (model plus offset), ``residual`` (NaN outside the mask) and ``mask``.
    """

    te: float
    te_low: float
    te_high: float
    interval_closed: tuple[bool, bool]
    offset: float
    load_scale: float
    rms: float
    quantity: str
    confidence: float
    threshold: float
    n_data: int
    n_effective: float
    misfit: xr.DataArray = field(repr=False)
    model: xr.Dataset = field(repr=False)

    @property
    def criterion(self) -> str:
        """The rule that bounds the interval, in words and numbers."""
        quantile = _chi2_quantile(self.confidence)
        return (
            f"profile likelihood: (RSS - RSS_min) / s^2 * n_eff / n = chi2_1({self.confidence:g})"
            f" = {quantile:.4g}, s^2 = RSS_min / (n - p), n = {self.n_data}, "
            f"n_eff = {self.n_effective:.4g}"
        )

    def summary(self) -> dict[str, Any]:
        """JSON-ready summary (SI units; the offset and RMS in the observation's unit)."""
        return {
            "interval_criterion": self.criterion,
            "quantity": self.quantity,
            "unit": _UNITS[self.quantity],
            "te": self.te,
            "te_low": self.te_low,
            "te_high": self.te_high,
            "interval_closed": list(self.interval_closed),
            "confidence": self.confidence,
            "offset": self.offset,
            "load_scale": self.load_scale,
            "rms_misfit": self.rms,
            "rss_threshold": self.threshold,
            "n_data": self.n_data,
            "n_effective": self.n_effective,
            "misfit_curve": {
                "te": [float(v) for v in self.misfit["te"].values],
                "rms_misfit": [float(v) for v in self.misfit.values],
            },
        }


class _Forward:
    """Model of the observed quantity for any Te, on one shared FFT grid."""

    def __init__(
        self,
        load: np.ndarray,
        spec: GridSpec,
        plate: Plate,
        te_max: float,
        quantity: str,
        layers: CrustLayers | None,
        periodic: bool,
        pad_factor: float,
        series: tuple[xr.DataArray, dict[str, Any]] | None = None,
    ) -> None:
        self.plate = plate
        self.quantity = quantity
        self.layers = layers
        self.series = series  # (load grid, model_free_air_anomaly keywords) for the full series
        self.load = load
        self.spec = spec
        self.periodic = periodic
        self.pad_factor = pad_factor
        stiffness = plate.restoring_stiffness
        # built (and memory-checked) for the stiffest plate: the largest FFT grid
        self.problem = SpectralProblem.build(
            spec, self._rigidity(te_max), stiffness, periodic=periodic, pad_factor=pad_factor
        )
        self.max_pad = pad_factor * decay_length(self._rigidity(te_max), stiffness)
        # the cached load spectra of the padding tiers add up to about two of the largest
        cells = self.problem.shape[0] * self.problem.shape[1]
        check_memory(8.0 * cells * (3.5 + 2.0), f"fit_te on FFT grids up to {self.problem.shape}")
        self.tiers: dict[tuple[int, int], tuple[SpectralProblem, np.ndarray, Any]] = {}
        self.evaluations = 0

    def _rigidity(self, te: float) -> float:
        return float(rigidity_from_te(te, self.plate.youngs_modulus, self.plate.poisson_ratio))

    def _problem(self, te: float) -> tuple[SpectralProblem, np.ndarray, Any]:
        """Problem, load spectrum and (scaled) gravity terms on the padding tier of *te*.

        Padding distances come in steps of sqrt(2) below the largest one, so a
        trial plate gets at least its own pad_factor decay lengths (more is only
        more accurate) and the load spectrum is computed once per tier.
        """
        rigidity = self._rigidity(te)
        if self.periodic:
            shape = self.problem.shape
        else:
            need = self.pad_factor * decay_length(rigidity, self.problem.stiffness)
            steps = math.floor(2.0 * math.log2(self.max_pad / need)) if need > 0 else 60
            shape = padded_shape(self.spec, self.max_pad / math.sqrt(2.0) ** min(steps, 60))
        if shape not in self.tiers:
            base = replace(self.problem, shape=shape)
            spectrum = base.load_spectrum(self.load)
            spectrum.flags.writeable = False
            terms = None
            if self.quantity == "free_air_anomaly" and self.series is None:
                assert self.layers is not None
                top, interfaces = gravity_terms(base.wavenumber(), self.layers, self.plate)
                scale = 2.0 * math.pi * GRAVITATIONAL_CONSTANT / (self.plate.gravity * MGAL)
                terms = (top * scale, interfaces * scale)
            self.tiers[shape] = (base, spectrum, terms)
        base, spectrum, k = self.tiers[shape]
        return base.with_rigidity(rigidity), spectrum, k

    def padded_shape(self, te: float) -> tuple[int, int]:
        """Shape of the FFT grid the plate of *te* is solved on."""
        return self._problem(te)[0].shape

    def deflection(self, te: float) -> np.ndarray:
        """Deflection (m, positive down) of the plate of *te* under the load."""
        problem, spectrum, _ = self._problem(te)
        return problem.crop(problem.inverse(scale_spectrum(spectrum, problem.transfer())))

    def model(self, te: float) -> np.ndarray:
        """The observed quantity predicted for *te*, without offset."""
        self.evaluations += 1
        if self.quantity == "deflection":
            return self.deflection(te)
        if self.quantity == "surface":
            return -self.deflection(te)
        if self.series is not None:
            load_grid, options = self.series
            trial = self.plate.with_te(te)
            result = result_dataset(load_grid, self.deflection(te), trial, {})
            return np.asarray(model_free_air_anomaly(result, **options).values, dtype=np.float64)
        problem, spectrum, terms = self._problem(te)
        assert terms is not None
        top, interfaces = terms  # both scaled by 2 pi G / (g mGal)
        factor = top - problem.transfer() * problem.stiffness * interfaces
        return problem.crop(problem.inverse(scale_spectrum(spectrum, factor)))


def _check_mask(mask: Any, observed: xr.DataArray, load: xr.DataArray) -> np.ndarray:
    values = np.asarray(observed.values, dtype=np.float64)
    if np.isinf(values).any():
        raise InputError(
            f"observed has {int(np.isinf(values).sum())} infinite value(s); "
            "use NaN for cells without data"
        )
    valid = ~np.isnan(values)
    if mask is None:
        return valid
    check_same_grid(mask, load, "mask")
    values = np.asarray(mask.values)
    if values.dtype != bool:
        if not np.all(np.isin(values, (0, 1))):
            raise InputError("mask must be boolean (True where the data are compared)")
        values = values.astype(bool)
    return values & valid


def _nuisance_fit(data: np.ndarray, model: np.ndarray, scale: bool) -> tuple[float, float, float]:
    """Least-squares offset (and load scale) of ``data ≈ s model + c``: (rss, s, c)."""
    d_mean = float(data.mean())
    dc = data - d_mean
    if not scale:
        r = dc - (model - model.mean())
        # einsum, not the BLAS dot: its thread start-up costs ms per call here
        return float(np.einsum("i,i", r, r)), 1.0, d_mean - float(model.mean())
    m_mean = float(model.mean())
    mc = model - m_mean
    mm = float(np.einsum("i,i", mc, mc))
    dm = float(np.einsum("i,i", dc, mc))
    s = dm / mm if mm > 0 else 0.0
    rss = max(float(np.einsum("i,i", dc, dc)) - s * dm, 0.0)
    return rss, s, d_mean - s * m_mean


def _correlation_factor(residual: np.ndarray, inside: np.ndarray, spec: GridSpec) -> float:
    """Sum of the residual autocorrelation over the lags of its first correlation ring.

    This is the number of data per independent datum, n / n_eff, for residuals
    correlated over an area (common practice: the correlation area taken as the
    region where the radially averaged autocorrelation is still significantly
    positive).
    """
    r = np.where(inside, residual - residual[inside].mean(), 0.0)
    m = inside.astype(np.float64)
    shape = tuple(scipy.fft.next_fast_len(2 * n, real=True) for n in r.shape)
    power = scipy.fft.rfft2(r, s=shape, workers=-1)
    pairs = scipy.fft.rfft2(m, s=shape, workers=-1)
    auto = scipy.fft.irfft2(power * power.conj(), s=shape, workers=-1)
    count = scipy.fft.irfft2(pairs * pairs.conj(), s=shape, workers=-1)
    n = float(inside.sum())
    usable = count > 0.25 * n
    rho = np.zeros(shape)
    rho[usable] = auto[usable] / count[usable]
    rho /= rho[0, 0]
    ly = np.minimum(np.arange(shape[0]), shape[0] - np.arange(shape[0]))[:, None] * spec.dy
    lx = np.minimum(np.arange(shape[1]), shape[1] - np.arange(shape[1]))[None, :] * spec.dx
    dist = np.hypot(ly, lx)
    ring = np.rint(dist / max(spec.dx, spec.dy)).astype(np.int64)
    sums = np.bincount(ring[usable], weights=rho[usable])
    counts = np.bincount(ring[usable])
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / counts
    # first ring whose mean correlation is not significantly positive (2 standard errors of
    # a mean over that ring's lags for uncorrelated residuals, ~1/sqrt(n * lags))
    with np.errstate(invalid="ignore", divide="ignore"):
        noise_level = 2.0 / np.sqrt(n * counts)
    flat = np.nonzero((counts > 0) & (mean <= noise_level))[0]
    flat = flat[flat > 0]
    stop = int(flat[0]) if flat.size else len(mean)
    factor = float(sums[:stop].sum())
    return min(max(factor, 1.0), n / 4.0)


def _check_options(
    plate: Any, quantity: Any, edges: Any, confidence: Any, samples: Any
) -> tuple[str, str, float, int]:
    """The scalar arguments of :func:`fit_te`, checked: (quantity, edges, confidence, samples)."""
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if plate.is_variable:
        raise InputError("fit_te needs a plate of constant te; got a te grid")
    quantity = check_choice("quantity", quantity, QUANTITIES)
    edges = check_choice("edges", edges, EDGES)
    level = check_number("confidence", confidence)
    if not 0.0 < level < 1.0:
        raise InputError(f"confidence must lie in (0, 1), got {confidence!r}")
    return quantity, edges, level, check_integer("samples", samples, minimum=5)


def _compared_cells(
    observed: Any, load: xr.DataArray, mask: Any, fit_load_scale: bool
) -> np.ndarray:
    """Where the data are compared: inside *mask* and finite in *observed*."""
    if not isinstance(observed, xr.DataArray):
        raise InputError(f"observed must be an xarray.DataArray, got {type(observed).__name__}")
    check_same_grid(observed, load, "observed")
    inside = _check_mask(mask, observed, load)
    n = int(inside.sum())
    if n < _parameters(fit_load_scale) + 2:
        raise InputError(f"only {n} cells are compared (mask and finite observed); need >= 4")
    return inside


def _parameters(fit_load_scale: bool) -> int:
    """Parameters fitted: te and the offset, and the load scale."""
    return 3 if fit_load_scale else 2


def _gravity_model(
    quantity: str,
    gravity: Any,
    plate: Plate,
    load: xr.DataArray,
    edges: str,
    fit_load_scale: bool,
) -> tuple[CrustLayers | None, tuple[xr.DataArray, dict[str, Any]] | None]:
    """The gravity model of a free-air fit: (first-order layers, None) or (None, series)."""
    if quantity != "free_air_anomaly":
        return None, None
    if isinstance(gravity, CrustLayers):
        gravity.check_plate(plate)
        return gravity, None
    if isinstance(gravity, Mapping):
        if fit_load_scale:
            raise InputError(
                "fit_load_scale needs a model linear in the load: use "
                "gravity=CrustLayers(...) (first order), not the full series"
            )
        return None, (load, {"edges": edges, **dict(gravity)})
    raise InputError(
        "quantity 'free_air_anomaly' needs gravity=CrustLayers(seafloor_depth=...) "
        "(first-order model) or a mapping of gridflex.model_free_air_anomaly keywords "
        f"(full Parker series); got {gravity!r}"
    )


class _Trials:
    """Residual sum of squares of trial plates, after the nuisance fit, cached by Te."""

    def __init__(
        self, forward: _Forward, observed: np.ndarray, inside: np.ndarray, fit_load_scale: bool
    ) -> None:
        self.forward = forward
        self.inside = inside
        self.data = observed[inside]
        self.fit_load_scale = fit_load_scale
        self.cache: dict[float, float] = {}

    def rss(self, log_te: float) -> float:
        """RSS of the plate of Te = exp(*log_te*)."""
        te = float(math.exp(log_te))
        if te not in self.cache:
            model = self.forward.model(te)[self.inside]
            self.cache[te] = _nuisance_fit(self.data, model, self.fit_load_scale)[0]
        return self.cache[te]

    def nuisance(self, te: float) -> tuple[float, float]:
        """(load scale, offset) fitted for *te*."""
        model = self.forward.model(te)[self.inside]
        _, load_scale, offset = _nuisance_fit(self.data, model, self.fit_load_scale)
        return load_scale, offset


def _interval(
    rss: Callable[[float], float],
    grid: np.ndarray,
    best_index: int,
    best: float,
    rss_min: float,
    threshold: float,
) -> tuple[list[float], list[bool]]:
    """Te (m) where RSS rises by *threshold* below and above *best* (ln Te), and whether
    each was reached inside the grid (else the grid's end is returned)."""

    def excess(x: float) -> float:
        return rss(x) - rss_min - threshold

    ends: list[float] = []
    closed: list[bool] = []
    for side in (-1, 1):
        idx = range(best_index - 1, -1, -1) if side < 0 else range(best_index + 1, len(grid))
        outer = next((float(grid[j]) for j in idx if excess(float(grid[j])) > 0), None)
        if outer is None:
            ends.append(math.exp(float(grid[0] if side < 0 else grid[-1])))
            closed.append(False)
            continue
        root = scipy.optimize.brentq(excess, min(best, outer), max(best, outer), xtol=_ROOT_XTOL)
        ends.append(math.exp(root))
        closed.append(True)
    return ends, closed


def _warn_if_open(closed: list[bool], confidence: float, bounds: Any) -> None:
    if all(closed):
        return
    sides = [name for name, ok in zip(("lower", "upper"), closed, strict=True) if not ok]
    warnings.warn(
        f"the {confidence:.0%} interval of te reaches the {' and '.join(sides)} search "
        f"bound {bounds!r} m: the data do not constrain te there; widen bounds or "
        "report the interval as open",
        OpenIntervalWarning,
        stacklevel=3,
    )


def _misfit_curve(
    cache: dict[float, float], n: int, rss_min: float, scale: float, quantity: str
) -> xr.DataArray:
    """RMS misfit against every Te evaluated; *scale* is s^2 times the correlation factor."""
    tes = np.array(sorted(cache))
    rss_values = np.array([cache[t] for t in tes])
    return xr.DataArray(
        np.sqrt(rss_values / n),
        dims=("te",),
        coords={
            "te": ("te", tes, {"units": "m", "long_name": "elastic thickness"}),
            "scaled_increase": ("te", (rss_values - rss_min) / scale),
        },
        name="rms_misfit",
        attrs={"units": _UNITS[quantity], "long_name": f"RMS misfit of {quantity}"},
    )


def _model_dataset(
    fit: TeFit,
    load: xr.DataArray,
    plate: Plate,
    forward: _Forward,
    observed: np.ndarray,
    inside: np.ndarray,
    model: np.ndarray,
) -> xr.Dataset:
    """The best model of *fit* (whose ``model`` is not yet set) as a result Dataset.

    *model* is the fitted model without the offset (load scale applied).
    """
    quantity, te = fit.quantity, fit.te
    predicted = model + fit.offset
    attrs = _fit_attrs(fit, forward, plate)
    ds = result_dataset(
        load * fit.load_scale, fit.load_scale * forward.deflection(te), plate.with_te(te), attrs
    )
    unit_attrs = {"units": _UNITS[quantity]}
    long_name = _LONG_NAMES[quantity]
    ds["observed"] = (("y", "x"), observed, {**unit_attrs, "long_name": f"observed {long_name}"})
    ds["predicted"] = (
        ("y", "x"),
        predicted,
        {**unit_attrs, "long_name": f"best model {long_name}"},
    )
    ds["residual"] = (
        ("y", "x"),
        np.where(inside, observed - predicted, np.nan),
        {**unit_attrs, "long_name": "observed minus predicted"},
    )
    ds["mask"] = (("y", "x"), inside, {"long_name": "cells compared in the fit"})
    if quantity == "free_air_anomaly":
        ds["free_air_anomaly"] = (
            ("y", "x"),
            model,
            {"units": "mGal", "long_name": "free-air anomaly of the best model (no offset)"},
        )
    ds["deflection"].attrs = deflection_attrs()
    return ds


def _fit_attrs(fit: TeFit, forward: _Forward, plate: Plate) -> dict[str, Any]:
    """Attributes of the best model: the solve, the fit and the gravity model."""
    attrs: dict[str, Any] = {
        "solver": "spectral",
        "edges": "periodic" if forward.periodic else "infinite",
        "padded_shape": np.array(forward.padded_shape(fit.te), dtype=np.int64),
        "fit_quantity": fit.quantity,
        "fit_offset": fit.offset,
        "fit_load_scale": fit.load_scale,
        "fit_rms_misfit": fit.rms,
        "fit_te_low": fit.te_low,
        "fit_te_high": fit.te_high,
        "fit_confidence": fit.confidence,
    }
    if forward.layers is not None:
        attrs.update({f"gravity_{k}": v for k, v in forward.layers.describe(plate).items()})
        attrs["gravity_model"] = "first order (linear term of the Parker series)"
    if forward.series is not None:
        attrs["gravity_model"] = "Parker series (gridflex.model_free_air_anomaly)"
    return attrs


def fit_te(
    observed: xr.DataArray,
    load: xr.DataArray,
    plate: Plate,
    quantity: str = "deflection",
    mask: xr.DataArray | None = None,
    bounds: tuple[float, float] = (1e3, 1e5),
    *,
    confidence: float = 0.95,
    samples: int = 25,
    correlated_residuals: bool = True,
    fit_load_scale: bool = False,
    gravity: CrustLayers | Mapping[str, float] | None = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    progress: Progress | None = None,
) -> TeFit:
    """Elastic thickness that best explains an observed grid, with an interval.

    Parameters
    ----------
    observed : xarray.DataArray
        Observation on the load grid: deflection w (m, positive down), elevation
        of the flexed surface (m, positive up; e.g. a flexed horizon or moat
        bathymetry with the load's own relief masked out) or free-air anomaly
        (mGal). NaN cells are ignored.
    load : xarray.DataArray
        Vertical stress q (Pa, positive down), dims ``("y", "x")``.
    plate : Plate
        Moduli and densities; its te is ignored (it is what is searched for).
    quantity : {"deflection", "surface", "free_air_anomaly"}, default "deflection"
        What *observed* is. The models are w + c, -w + c and the first-order
        free-air anomaly of the load and the flexed crust and Moho (see
        :mod:`gridflex.gravity.first_order`) + c, with a fitted constant c.
    mask : xarray.DataArray of bool, optional
        True where the data are compared (default: everywhere *observed* is finite).
    bounds : tuple of float, default (1e3, 1e5)
        Search range of Te (m), 0 < low < high.
    confidence : float, default 0.95
        Confidence level of the interval.
    samples : int, default 25
        Number of log-spaced Te of the coarse search (>= 5).
    correlated_residuals : bool, default True
        Estimate n_eff from the autocorrelation of the best residuals (widens the
        interval when they are correlated in space); False assumes independent data.
    fit_load_scale : bool, default False
        Also fit a factor s on the load (model s m + c), a linear nuisance
        parameter re-fitted at each Te: for a load of known shape and uniform
        density, s = fitted / given density contrast (PHYSICS.md 8.1 "load scaling").
    gravity : CrustLayers or mapping, optional
        For ``free_air_anomaly``: a :class:`~gridflex.gravity.first_order.CrustLayers`
        selects the fast first-order model (linear in the relief); a mapping holds
        keywords of :func:`gridflex.model_free_air_anomaly` (``reference_surface``,
        ``load_height``, ``load_density``, ``observation_height``, ``terms``, ...)
        and selects the full Parker series, recomputed for every trial Te.
    edges : {"infinite", "periodic"}, default "infinite"
        As in :func:`gridflex.solve`; "infinite" pads for the largest Te of *bounds*.
    pad_factor : float, default 4.5
        Padding on each side in flexural parameters of the stiffest trial plate.
    progress : callable, optional
        Called as ``progress(done, total)`` during the coarse search.

    Returns
    -------
    TeFit
        ``te``, ``te_low``, ``te_high`` (m), the misfit curve and the best model.

    Raises
    ------
    InputError
        Bad grids, mask, bounds, quantity or gravity parameters, or too few data.

    Warns
    -----
    OpenIntervalWarning
        When the interval reaches a search bound.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> import gridflex
    >>> x = (np.arange(64) - 32) * 5e3
    >>> r2 = x[:, None] ** 2 + x[None, :] ** 2
    >>> load = xr.DataArray(2e7 * np.exp(-r2 / (2 * 12e3**2)), dims=("y", "x"),
    ...                     coords={"y": x, "x": x})
    >>> w = gridflex.solve(load, gridflex.Plate(te=20e3))["deflection"]
    >>> noise = np.random.default_rng(0).normal(0.0, 0.02 * float(w.max()), w.shape)
    >>> fit = gridflex.fit_te(w + noise + 3.0, load, gridflex.Plate(te=0.0))
    >>> round(fit.te / 1e3), fit.te_low < 20e3 < fit.te_high, round(fit.offset)
    (20, True, 3)
    """
    quantity, edges, confidence, samples = _check_options(
        plate, quantity, edges, confidence, samples
    )
    low, high = check_search_bounds("bounds", bounds, "m")
    spec = check_grid(load)
    inside = _compared_cells(observed, load, mask, fit_load_scale)
    layers, series = _gravity_model(quantity, gravity, plate, load, edges, fit_load_scale)
    load_values = np.asarray(load.values, dtype=np.float64)
    if edges == "infinite":
        check_edge_load(load_values, float(np.abs(load_values).sum()))
    forward = _Forward(
        load_values, spec, plate, high, quantity, layers, edges == "periodic", pad_factor, series
    )
    observed_values = np.asarray(observed.values, dtype=np.float64)
    trials = _Trials(forward, observed_values, inside, fit_load_scale)
    grid = np.linspace(math.log(low), math.log(high), samples)
    best_index, best_x = grid_then_refine(trials.rss, grid, xatol=_REFINE_XTOL, progress=progress)
    rss_min = trials.rss(best_x)
    te_best = math.exp(best_x)
    load_scale, offset = trials.nuisance(te_best)
    model = load_scale * forward.model(te_best)
    n = int(inside.sum())
    factor = 1.0
    if correlated_residuals:
        residual = np.where(inside, observed_values - (model + offset), 0.0)
        factor = _correlation_factor(residual, inside, spec)
    s2 = rss_min / (n - _parameters(fit_load_scale))
    threshold = _chi2_quantile(confidence) * s2 * factor
    ends, closed = _interval(trials.rss, grid, best_index, best_x, rss_min, threshold)
    _warn_if_open(closed, confidence, bounds)
    log.info(
        "fit_te: te = %.4g m, interval [%.4g, %.4g] m, %d forward models",
        te_best,
        ends[0],
        ends[1],
        forward.evaluations,
    )
    fit = TeFit(
        te=te_best,
        te_low=ends[0],
        te_high=ends[1],
        interval_closed=(closed[0], closed[1]),
        offset=offset,
        load_scale=load_scale,
        rms=math.sqrt(rss_min / n),
        quantity=quantity,
        confidence=confidence,
        threshold=threshold,
        n_data=n,
        n_effective=n / factor,
        misfit=_misfit_curve(trials.cache, n, rss_min, s2 * factor, quantity),
        model=xr.Dataset(),  # set below, from the fit's numbers
    )
    best = _model_dataset(fit, load, plate, forward, observed_values, inside, model)
    return replace(fit, model=best)
