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
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import xarray as xr

from gridflex.engine import SPECTRAL_EDGES, check_edge_load, result_dataset
from gridflex.estimation.likelihood import (
    OpenIntervalWarning,
    chi2_quantile,
    correlation_factor,
    interval_end,
    interval_threshold,
    nuisance_fit,
    parameter_count,
    warn_if_open,
)
from gridflex.estimation.observation import (
    QUANTITIES,
    UNITS,
    FirstOrderGravity,
    QuantityRule,
    best_model_dataset,
    check_fit_options,
    check_plate,
    compared_cells,
    gravity_attrs,
    gravity_model,
)
from gridflex.estimation.search import check_search_bounds, grid_then_refine
from gridflex.gravity.first_order import CrustLayers
from gridflex.grid import GridSpec, check_grid, padded_shape
from gridflex.memory import check_memory
from gridflex.plate import Plate, rigidity_from_te
from gridflex.progress import Progress
from gridflex.solvers.spectral import (
    DEFAULT_PAD_FACTOR,
    SpectralProblem,
    decay_length,
    scale_spectrum,
)

__all__ = ["QUANTITIES", "TE_BOUNDS", "TE_SAMPLES", "OpenIntervalWarning", "TeFit", "fit_te"]

log = logging.getLogger(__name__)

TE_BOUNDS = (1e3, 1e5)
"""Default search range of te (m) of :func:`fit_te` (and of each side of a margin)."""

TE_SAMPLES = 25
"""Default number of log-spaced te of the coarse search of :func:`fit_te`."""

_REFINE_XTOL = 1e-4  # in ln(Te): 0.01 % of Te
_ROOT_XTOL = 1e-6  # in ln(Te)


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
        quantile = chi2_quantile(self.confidence)
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
            "unit": UNITS[self.quantity],
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
        rule: QuantityRule,
        layers: CrustLayers | None,
        periodic: bool,
        pad_factor: float,
    ) -> None:
        self.plate = plate
        self.rule = rule
        self.layers = layers
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
        self.tiers: dict[
            tuple[int, int], tuple[SpectralProblem, np.ndarray, FirstOrderGravity | None]
        ] = {}
        self.evaluations = 0

    def _rigidity(self, te: float) -> float:
        return float(rigidity_from_te(te, self.plate.youngs_modulus, self.plate.poisson_ratio))

    def _problem(self, te: float) -> tuple[SpectralProblem, np.ndarray, FirstOrderGravity | None]:
        """Problem, load spectrum and first-order gravity on the padding tier of *te*.

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
            gravity = None
            if self.layers is not None:
                gravity = FirstOrderGravity(base, spectrum, self.layers, self.plate)
            self.tiers[shape] = (base, spectrum, gravity)
        base, spectrum, gravity = self.tiers[shape]
        return base.with_rigidity(rigidity), spectrum, gravity

    def padded_shape(self, te: float) -> tuple[int, int]:
        """Shape of the FFT grid the plate of *te* is solved on."""
        return self._problem(te)[0].shape

    def _deflection_spectrum(self, te: float) -> np.ndarray:
        problem, spectrum, _ = self._problem(te)
        return scale_spectrum(spectrum, problem.transfer())

    def deflection(self, te: float) -> np.ndarray:
        """Deflection (m, positive down) of the plate of *te* under the load."""
        problem = self._problem(te)[0]
        return problem.crop(problem.inverse(self._deflection_spectrum(te)))

    def model(self, te: float) -> np.ndarray:
        """The observed quantity predicted for *te*, without offset."""
        self.evaluations += 1
        gravity = self._problem(te)[2]
        first_order = None
        if gravity is not None:
            first_order = lambda: gravity.anomaly(self._deflection_spectrum(te))  # noqa: E731
        return self.rule.predict(lambda: self.deflection(te), self.plate.with_te(te), first_order)


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
            self.cache[te] = nuisance_fit(self.data, model, self.fit_load_scale)[0]
        return self.cache[te]

    def nuisance(self, te: float) -> tuple[float, float]:
        """(load scale, offset) fitted for *te*."""
        model = self.forward.model(te)[self.inside]
        _, load_scale, offset = nuisance_fit(self.data, model, self.fit_load_scale)
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
    each was reached inside the grid (else the grid's end is returned): the coarse grid
    points beyond *best* bracket each end (their RSS is cached)."""
    lower = [float(x) for x in grid[:best_index][::-1]] or [float(grid[0])]
    upper = [float(x) for x in grid[best_index + 1 :]] or [float(grid[-1])]
    ends: list[float] = []
    closed: list[bool] = []
    for candidates in (lower, upper):
        end, reached = interval_end(rss, best, rss_min, threshold, candidates, _ROOT_XTOL)
        ends.append(math.exp(end))
        closed.append(reached)
    return ends, closed


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
        attrs={"units": UNITS[quantity], "long_name": f"RMS misfit of {quantity}"},
    )


def _model_dataset(
    fit: TeFit,
    load: xr.DataArray,
    plate: Plate,
    forward: _Forward,
    observed: np.ndarray,
    inside: np.ndarray,
    model: np.ndarray,
    series: object | None,
) -> xr.Dataset:
    """The best model of *fit* (whose ``model`` is not yet set) as a result Dataset.

    *model* is the fitted model without the offset (load scale applied).
    """
    te = fit.te
    attrs: dict[str, Any] = {
        "solver": "spectral",
        "edges": "periodic" if forward.periodic else "infinite",
        "padded_shape": np.array(forward.padded_shape(te), dtype=np.int64),
        "fit_quantity": fit.quantity,
        "fit_offset": fit.offset,
        "fit_load_scale": fit.load_scale,
        "fit_rms_misfit": fit.rms,
        "fit_te_low": fit.te_low,
        "fit_te_high": fit.te_high,
        "fit_confidence": fit.confidence,
        **gravity_attrs(forward.layers, series, plate),
    }
    result = result_dataset(
        load * fit.load_scale, fit.load_scale * forward.deflection(te), plate.with_te(te), attrs
    )
    return best_model_dataset(result, fit.quantity, observed, inside, model, fit.offset)


def fit_te(
    observed: xr.DataArray,
    load: xr.DataArray,
    plate: Plate,
    quantity: str = "deflection",
    mask: xr.DataArray | None = None,
    bounds: tuple[float, float] = TE_BOUNDS,
    *,
    confidence: float = 0.95,
    samples: int = TE_SAMPLES,
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
    check_plate(plate, "fit_te", te_grid=False)
    quantity, edges, confidence, samples = check_fit_options(
        quantity, edges, confidence, samples, SPECTRAL_EDGES
    )
    low, high = check_search_bounds("bounds", bounds, "m")
    spec = check_grid(load)
    inside = compared_cells(observed, load, mask, parameter_count(1, fit_load_scale))
    layers, series = gravity_model(quantity, gravity, plate, load, edges, fit_load_scale)
    load_values = np.asarray(load.values, dtype=np.float64)
    if edges == "infinite":
        check_edge_load(load_values, float(np.abs(load_values).sum()))
    rule = QuantityRule(quantity, series)
    forward = _Forward(
        load_values, spec, plate, high, rule, layers, edges == "periodic", pad_factor
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
        factor = correlation_factor(residual, inside, spec)
    parameters = parameter_count(1, fit_load_scale)
    threshold, s2 = interval_threshold(rss_min, n, parameters, factor, confidence)
    ends, closed = _interval(trials.rss, grid, best_index, best_x, rss_min, threshold)
    warn_if_open(closed, confidence, "te", bounds, "m")
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
    best = _model_dataset(fit, load, plate, forward, observed_values, inside, model, series)
    return replace(fit, model=best)
