"""Te maps fitted to an observed grid by forward-model misfit: a margin, or a factor on a grid.

Two models of a plate whose te varies in space, each with a few parameters:

* a margin (:func:`fit_te_margin`): te_left and te_right on either side of a straight
  line (:func:`gridflex.te_maps.margin_te`), and optionally the line's position, moved
  perpendicular to itself by ``line_shift`` (m, positive towards the right side);
* a factor on a given te grid (:func:`fit_te_scale`): te = s te_grid.

Each trial map is solved by :func:`gridflex.solve` (finite differences) and turned into
the observed quantity by the rule the constant-te fit uses
(:class:`~gridflex.estimation.observation.QuantityRule`); the offset (and optionally a
factor on the load) is fitted by least squares at every trial. Thicknesses and the
scale are searched in their logarithm, the line's shift linearly, all mapped onto
[0, 1]: coarse scans along each parameter (for a margin first along te_left = te_right),
then a bounded trust-region least-squares refinement (:mod:`gridflex.estimation.search`).
Each parameter's interval is the profile-likelihood bound of
:mod:`gridflex.estimation.likelihood` — the same rule as :func:`gridflex.fit_te` — where
the profile minimises the misfit over the other parameters at each value; its search
starts from the quadratic (Gauss-Newton) prediction of the end and of the other
parameters along the profile. Every forward model is cached; the count is reported.
"""

from __future__ import annotations

import logging
import math
import warnings
from collections import OrderedDict
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from gridflex.engine import EDGES, check_edge_load, solve
from gridflex.errors import EdgeLoadWarning, InputError
from gridflex.estimation.likelihood import (
    chi2_quantile,
    correlation_factor,
    interval_end,
    interval_threshold,
    nuisance_fit,
    parameter_count,
    warn_if_open,
)
from gridflex.estimation.misfit import TE_BOUNDS
from gridflex.estimation.observation import (
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
from gridflex.estimation.search import check_search_bounds, refine_least_squares, scan_groups
from gridflex.gravity.first_order import CrustLayers
from gridflex.gravity.interfaces import DEFAULT_GRAVITY_PAD_FACTOR, gravity_padded_shape
from gridflex.grid import GridSpec, check_grid, check_same_grid
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.finite_difference import DEFAULT_MAX_ITERATIONS, DEFAULT_TOLERANCE
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, SpectralProblem
from gridflex.te_maps import broken_te, margin_te

__all__ = [
    "MAP_SAMPLES",
    "SCALE_BOUNDS",
    "Estimate",
    "MarginFit",
    "ScaleFit",
    "TeMapFit",
    "check_shift_width",
    "fit_te_margin",
    "fit_te_scale",
]

log = logging.getLogger(__name__)

SCALE_BOUNDS = (0.1, 10.0)
"""Default search range of the factor of :func:`fit_te_scale`."""

MAP_SAMPLES = 7
"""Default number of coarse values per parameter of the te-map fits."""

_DIFF_STEP = 2e-3  # forward-difference step of the Jacobian, in [0, 1] coordinates
_REFINE_XTOL = 1e-4  # relative step tolerance of the refinement, [0, 1] coordinates
_REFINE_SHARE = 1e-3  # the refinement ends on RSS changes below this share of the threshold
_RECENT_MODELS = 64  # residual vectors kept for repeated requests, at most ...
_RECENT_BYTES = 256 * 2**20  # ... and at most this much memory (but always 4)
_END_XTOL = 5e-4  # tolerance of an interval's end, [0, 1] coordinates
_END_SHARE = 0.01  # ... and at most this share of the predicted half-width
_CONDITIONAL_STEPS = 6  # Gauss-Newton steps of the other parameters at one profile value
_END_STEPS = (1.0, 2.0, 4.0)  # candidate ends, in predicted half-widths


@dataclass(frozen=True)
class Estimate:
    """One fitted parameter and its profile-likelihood interval.

    Attributes
    ----------
    value : float
        Best value (in *unit*).
    low, high : float
        Ends of the interval; a search bound where it is open (see *interval_closed*).
    interval_closed : tuple of bool
        Whether the low and the high end were reached inside the search range.
    unit : str
        ``"m"`` for thicknesses and shifts, ``"1"`` for a factor.
    profile : xarray.DataArray
        The profile evaluated: (RSS - RSS_min) n_eff / (n s²), the other parameters
        re-fitted, against the parameter's value (sorted; 0 at the best value). The
        interval's ends are where it reaches the chi-squared (1) quantile.
    """

    value: float
    low: float
    high: float
    interval_closed: tuple[bool, bool]
    unit: str
    profile: xr.DataArray = field(repr=False)

    def summary(self) -> dict[str, Any]:
        """JSON-ready: value, low, high, interval_closed, unit."""
        return {
            "value": self.value,
            "low": self.low,
            "high": self.high,
            "interval_closed": list(self.interval_closed),
            "unit": self.unit,
        }


@dataclass(frozen=True, kw_only=True)
class TeMapFit:
    """What every te-map fit returns (:class:`MarginFit`, :class:`ScaleFit`).

    Attributes
    ----------
    offset : float
        Fitted constant added to the model (unit of the observation).
    load_scale : float
        Fitted factor on the load (1 unless ``fit_load_scale``).
    rms : float
        RMS misfit of the best model (unit of the observation).
    quantity : str
        What was fitted (see :data:`gridflex.estimation.misfit.QUANTITIES`).
    confidence : float
        Confidence level of every interval.
    threshold : float
        RSS increase that bounds the intervals (unit of the observation squared).
    n_data : int
        Number of compared cells.
    n_effective : float
        Number of independent data assumed (n over the residual correlation factor).
    forward_models : int
        Number of plate solves the fit made.
    trials : xarray.Dataset
        Every model evaluated (dimension ``trial``): its parameters and ``rms_misfit``.
    model : xarray.Dataset
        The best model: ``elastic_thickness`` (m), ``deflection``, ``load``,
        ``observed``, ``predicted`` (model plus offset), ``residual`` and ``mask``;
        the attributes record the solve and the fit.
    """

    offset: float
    load_scale: float
    rms: float
    quantity: str
    confidence: float
    threshold: float
    n_data: int
    n_effective: float
    forward_models: int
    trials: xr.Dataset = field(repr=False)
    model: xr.Dataset = field(repr=False)

    @property
    def kind(self) -> str:
        """``"margin"`` or ``"scale"``."""
        raise NotImplementedError

    @property
    def estimates(self) -> dict[str, Estimate]:
        """The fitted parameters by name, in the order they were searched."""
        raise NotImplementedError

    @property
    def quantile(self) -> float:
        """The chi-squared (1 degree of freedom) quantile the scaled profiles end at."""
        return chi2_quantile(self.confidence)

    @property
    def criterion(self) -> str:
        """The rule that bounds every interval, in words and numbers."""
        quantile = self.quantile
        names = ", ".join(self.estimates)
        return (
            f"profile likelihood of each of {names} (the others re-fitted): "
            f"(RSS - RSS_min) / s^2 * n_eff / n = chi2_1({self.confidence:g}) = {quantile:.4g}, "
            f"s^2 = RSS_min / (n - p), n = {self.n_data}, n_eff = {self.n_effective:.4g}"
        )

    def summary(self) -> dict[str, Any]:
        """JSON-ready summary (SI units; the offset and RMS in the observation's unit)."""
        trials = {name: [float(v) for v in self.trials[name].values] for name in self.estimates}
        trials["rms_misfit"] = [float(v) for v in self.trials["rms_misfit"].values]
        return {
            "fit": self.kind,
            "interval_criterion": self.criterion,
            "quantity": self.quantity,
            "unit": UNITS[self.quantity],
            "parameters": {name: e.summary() for name, e in self.estimates.items()},
            "confidence": self.confidence,
            "offset": self.offset,
            "load_scale": self.load_scale,
            "rms_misfit": self.rms,
            "rss_threshold": self.threshold,
            "n_data": self.n_data,
            "n_effective": self.n_effective,
            "forward_models": self.forward_models,
            "trials": trials,
        }


@dataclass(frozen=True, kw_only=True)
class MarginFit(TeMapFit):
    """Result of :func:`fit_te_margin` (see :class:`TeMapFit` for the shared fields).

    Attributes
    ----------
    te_left, te_right : Estimate
        te (m) on the left and on the right of the line, looking from its first point
        to its second.
    line_shift : Estimate or None
        How far the line moved, perpendicular to itself (m, positive towards the right
        side); None when its position was not fitted.
    line : tuple of two (x, y) pairs
        The best line (m): the given one moved by the shift.
    width : float
        Width of the transition (m), as given.
    """

    te_left: Estimate
    te_right: Estimate
    line_shift: Estimate | None
    line: tuple[tuple[float, float], tuple[float, float]]
    width: float

    @property
    def kind(self) -> str:
        """``"margin"``."""
        return "margin"

    @property
    def estimates(self) -> dict[str, Estimate]:
        """te_left, te_right (and line_shift when fitted)."""
        out = {"te_left": self.te_left, "te_right": self.te_right}
        if self.line_shift is not None:
            out["line_shift"] = self.line_shift
        return out

    def summary(self) -> dict[str, Any]:
        """JSON-ready summary, with the best line and the transition width (m)."""
        return {**super().summary(), "line": [list(p) for p in self.line], "width": self.width}


@dataclass(frozen=True, kw_only=True)
class ScaleFit(TeMapFit):
    """Result of :func:`fit_te_scale` (see :class:`TeMapFit` for the shared fields).

    Attributes
    ----------
    scale : Estimate
        The factor s on the given te grid (te = s te_grid), dimensionless.
    """

    scale: Estimate

    @property
    def kind(self) -> str:
        """``"scale"``."""
        return "scale"

    @property
    def estimates(self) -> dict[str, Estimate]:
        """scale."""
        return {"scale": self.scale}

    def summary(self) -> dict[str, Any]:
        """JSON-ready summary, with the range of the best te grid (m)."""
        te = self.model["elastic_thickness"].values
        return {**super().summary(), "te_min": float(te.min()), "te_max": float(te.max())}


@dataclass(frozen=True)
class _Parameter:
    """A searched parameter and its map onto [0, 1] (logarithmic or linear)."""

    name: str
    low: float
    high: float
    log: bool
    unit: str

    def value(self, u: float) -> float:
        """The parameter at coordinate *u* in [0, 1]."""
        if self.log:
            return math.exp(math.log(self.low) + u * (math.log(self.high) - math.log(self.low)))
        return self.low + u * (self.high - self.low)

    def coordinate(self, value: float) -> float:
        """The coordinate in [0, 1] of *value*."""
        if self.log:
            return (math.log(value) - math.log(self.low)) / (
                math.log(self.high) - math.log(self.low)
            )
        return (value - self.low) / (self.high - self.low)


class _MapForward:
    """The observed quantity of a te map: one finite-difference solve per map."""

    def __init__(
        self,
        load: xr.DataArray,
        spec: GridSpec,
        plate: Plate,
        rule: QuantityRule,
        layers: CrustLayers | None,
        edges: str,
        solve_options: dict[str, Any],
    ) -> None:
        self.load = load
        self.plate = plate
        self.rule = rule
        self.edges = edges
        self.solve_options = solve_options
        self.solves = 0
        self.gravity: FirstOrderGravity | None = None
        if layers is not None:
            periodic = edges == "periodic"
            geometry = SpectralProblem.build(
                spec, 0.0, plate.restoring_stiffness, periodic=periodic, pad_factor=0.0
            )
            if not periodic:  # an isolated relief: pad for the field's slow decay
                deepest = layers.seafloor_depth + layers.crust(plate)[0]
                shape = gravity_padded_shape(spec, deepest, DEFAULT_GRAVITY_PAD_FACTOR)
                geometry = SpectralProblem(
                    spec, 0.0, geometry.stiffness, 0.0, 0.0, shape, periodic=False
                )
            spectrum = geometry.load_spectrum(np.asarray(load.values, dtype=np.float64))
            self.gravity = FirstOrderGravity(geometry, spectrum, layers, plate)

    def solve(self, te: xr.DataArray) -> xr.Dataset:
        """Solve the plate of te map *te* under the load (the one call of the solver)."""
        self.solves += 1
        with warnings.catch_warnings():
            # the load's edge share is checked once, before the search
            warnings.simplefilter("ignore", EdgeLoadWarning)
            return solve(self.load, self.plate.with_te(te), edges=self.edges, **self.solve_options)

    def predict(self, te: xr.DataArray) -> tuple[np.ndarray, xr.Dataset]:
        """(the quantity without offset, the solve's Dataset) of the plate of *te*."""
        result = self.solve(te)
        deflection = np.asarray(result["deflection"].values, dtype=np.float64)
        first_order = None
        gravity = self.gravity
        if gravity is not None:
            first_order = lambda: gravity.anomaly(  # noqa: E731
                gravity.problem.load_spectrum(deflection)
            )
        trial = self.plate.with_te(te)
        return self.rule.predict(lambda: deflection, trial, first_order), result


@dataclass
class _Best:
    """The best model evaluated so far."""

    rss: float = math.inf
    point: np.ndarray = field(default_factory=lambda: np.zeros(0))
    residual: np.ndarray = field(default_factory=lambda: np.zeros(0))
    model: np.ndarray = field(default_factory=lambda: np.zeros(0))
    result: xr.Dataset = field(default_factory=xr.Dataset)
    te: xr.DataArray = field(default_factory=xr.DataArray)
    load_scale: float = 1.0
    offset: float = 0.0


class _MapTrials:
    """Residuals of trial te maps after the nuisance fit, cached by their coordinates."""

    def __init__(
        self,
        forward: _MapForward,
        parameters: Sequence[_Parameter],
        te_map: Callable[[list[float]], xr.DataArray],
        observed: np.ndarray,
        inside: np.ndarray,
        fit_load_scale: bool,
    ) -> None:
        self.forward = forward
        self.parameters = parameters
        self.te_map = te_map
        self.inside = inside
        self.data = observed[inside]
        self.fit_load_scale = fit_load_scale
        self.rss_cache: dict[tuple[float, ...], float] = {}
        # the residual vectors of the latest models (n floats each): bounded in memory
        self.recent: OrderedDict[tuple[float, ...], np.ndarray] = OrderedDict()
        self.keep = int(min(_RECENT_MODELS, max(4, _RECENT_BYTES // (8 * self.data.size))))
        self.best = _Best()

    def values(self, point: np.ndarray) -> list[float]:
        """The parameters at a point of [0, 1]^p."""
        return [p.value(float(u)) for p, u in zip(self.parameters, point, strict=True)]

    def residuals(self, point: np.ndarray) -> np.ndarray:
        """Observed minus fitted model on the compared cells, at *point*."""
        key = tuple(float(u) for u in np.clip(point, 0.0, 1.0))
        if key in self.recent:
            self.recent.move_to_end(key)
            return self.recent[key]
        if key == tuple(self.best.point):
            return self.best.residual
        te = self.te_map(self.values(np.array(key)))
        model, result = self.forward.predict(te)
        inside = model[self.inside]
        rss, load_scale, offset = nuisance_fit(self.data, inside, self.fit_load_scale)
        residual = self.data - (load_scale * inside + offset)
        self.rss_cache[key] = rss
        self.recent[key] = residual
        if len(self.recent) > self.keep:
            self.recent.popitem(last=False)
        if rss < self.best.rss:
            self.best = _Best(rss, np.array(key), residual, model, result, te, load_scale, offset)
        return residual

    def rss(self, point: np.ndarray) -> float:
        """Residual sum of squares at *point*."""
        key = tuple(float(u) for u in np.clip(point, 0.0, 1.0))
        if key not in self.rss_cache:
            self.residuals(point)
        return self.rss_cache[key]

    def table(self) -> xr.Dataset:
        """Every model evaluated: its parameters and RMS misfit, in evaluation order."""
        points = np.array(list(self.rss_cache), dtype=np.float64).reshape(len(self.rss_cache), -1)
        rss = np.array(list(self.rss_cache.values()))
        data: dict[str, Any] = {}
        for i, p in enumerate(self.parameters):
            values = [p.value(float(u)) for u in points[:, i]]
            data[p.name] = ("trial", np.array(values), {"units": p.unit})
        data["rms_misfit"] = ("trial", np.sqrt(rss / self.data.size))
        return xr.Dataset(data)


class _Profiles:
    """Profile RSS of each parameter: the others re-fitted at each of its values.

    Along one side of a profile the others are re-fitted by Gauss-Newton steps whose
    Jacobian starts as the refinement's and is corrected after every evaluation by
    Broyden's rank-one update (Broyden 1965, from memory): each new value of the
    parameter starts from the linearised conditional optimum, and a fit ends when the
    linearised model promises less than *tolerance* more decrease of the RSS.
    """

    def __init__(
        self,
        trials: _MapTrials,
        best: np.ndarray,
        jacobian: np.ndarray,
        tolerance: float,
    ) -> None:
        self.trials = trials
        self.best = best
        self.jacobian = jacobian
        self.tolerance = tolerance
        normal = jacobian.T @ jacobian  # Gauss-Newton: RSS ~ RSS_min + du^T (J^T J) du
        self.inverse = np.linalg.pinv(normal)
        self.points: dict[int, dict[float, float]] = {}

    def half_width(self, i: int, threshold: float) -> float:
        """Predicted distance (coordinates) from the best to the end of parameter *i*."""
        variance = float(self.inverse[i, i])
        return math.sqrt(threshold * variance) if variance > 0 else math.inf

    def profile(self, i: int) -> Callable[[float], float]:
        """The profile RSS of parameter *i* at a coordinate (one side of the interval)."""
        others = [j for j in range(len(self.best)) if j != i]
        seen = self.points.setdefault(i, {})
        jacobian = self.jacobian.copy()
        residual = self.trials.residuals(self.best)
        state = {"point": self.best.copy(), "residual": residual}

        def evaluate(u: float) -> float:
            if u in seen:
                return seen[u]
            rss = self._conditional_fit(i, u, others, state, jacobian)
            seen[u] = rss
            return rss

        return evaluate

    def _conditional_fit(
        self,
        i: int,
        u: float,
        others: list[int],
        state: dict[str, np.ndarray],
        jacobian: np.ndarray,
    ) -> float:
        """Minimise the RSS over the coordinates *others* with coordinate *i* at *u*."""
        point, residual = state["point"], state["residual"]
        rss = math.inf
        for step in range(_CONDITIONAL_STEPS):
            proposal = point.copy()
            proposal[i] = u
            if others:
                # linearised residual at the proposal, then the best move of the others
                base = residual + jacobian @ (proposal - point)
                move = np.linalg.lstsq(jacobian[:, others], -base, rcond=None)[0]
                proposal[others] = np.clip(proposal[others] + move, 0.0, 1.0)
                if step > 0:
                    linear = residual + jacobian @ (proposal - point)
                    if rss - float(linear @ linear) <= self.tolerance:
                        break
            new = self.trials.residuals(proposal)
            change = proposal - point
            norm = float(change @ change)
            if norm > 0:
                jacobian += np.outer(new - residual - jacobian @ change, change / norm)
            new_rss = float(new @ new)
            if step > 0 and new_rss >= rss:
                break
            point, residual, rss = proposal, new, new_rss
            if not others:
                break
        state["point"], state["residual"] = point, residual
        return rss


def _candidates(best: float, side: int, half_width: float) -> Iterator[float]:
    """Coordinates beyond *best* towards the bound of *side* (-1: 0, +1: 1), ending there."""
    bound = 0.0 if side < 0 else 1.0
    for step in _END_STEPS:
        u = best + side * step * half_width
        if (u - bound) * side >= 0 or not math.isfinite(u):
            break
        yield u
    if best != bound:
        yield bound


@dataclass(frozen=True)
class _Search:
    """What a te-map search produced, before it is dressed as a result."""

    estimates: dict[str, Estimate]
    best: _Best
    rss_min: float
    factor: float
    threshold: float
    n: int
    trials: xr.Dataset


def _search_map(
    trials: _MapTrials,
    start: np.ndarray,
    groups: Sequence[Sequence[int]],
    samples: int,
    confidence: float,
    correlated_residuals: bool,
    spec: GridSpec,
    progress: Progress | None,
) -> _Search:
    """Coarse scans, least-squares refinement, then each parameter's profile interval."""
    parameters = trials.parameters
    n = int(trials.inside.sum())
    coarse = scan_groups(trials.rss, start, groups, samples, progress=progress)
    # stop when an iteration lowers the RSS (about n s^2) by < 0.1 % of the threshold
    ftol = _REFINE_SHARE * chi2_quantile(confidence) / n
    point, jacobian = refine_least_squares(
        trials.residuals, coarse, diff_step=_DIFF_STEP, xtol=_REFINE_XTOL, ftol=ftol
    )
    best = trials.best
    rss_min = best.rss
    factor = 1.0
    if correlated_residuals:
        residual = np.zeros(trials.inside.shape)
        residual[trials.inside] = best.residual
        factor = correlation_factor(residual, trials.inside, spec)
    count = parameter_count(len(parameters), trials.fit_load_scale)
    threshold, s2 = interval_threshold(rss_min, n, count, factor, confidence)
    # the profile's inner fits stop when the sum of squares changes by < 0.1 % of the threshold
    profiles = _Profiles(trials, best.point, jacobian, tolerance=1e-3 * threshold)
    estimates: dict[str, Estimate] = {}
    for i, p in enumerate(parameters):
        centre = float(best.point[i])
        width = profiles.half_width(i, threshold)
        ends, closed = [], []
        for side in (-1, 1):
            end, reached = interval_end(
                profiles.profile(i),
                centre,
                rss_min,
                threshold,
                _candidates(centre, side, width),
                min(_END_XTOL, _END_SHARE * width),
                extrapolate=True,
            )
            ends.append(p.value(end))
            closed.append(reached)
        seen = {centre: rss_min, **profiles.points.get(i, {})}
        values = np.array([p.value(u) for u in sorted(seen)])
        increase = np.array([seen[u] - rss_min for u in sorted(seen)]) / (s2 * factor)
        profile = xr.DataArray(
            increase,
            dims=(p.name,),
            coords={p.name: (p.name, values, {"units": p.unit})},
            name="scaled_increase",
            attrs={"long_name": f"(RSS - RSS_min) n_eff / (n s^2), profile of {p.name}"},
        )
        estimates[p.name] = Estimate(
            p.value(centre), ends[0], ends[1], (closed[0], closed[1]), p.unit, profile
        )
        warn_if_open(closed, confidence, p.name, (p.low, p.high), p.unit, stacklevel=4)
    if trials.best.rss < rss_min - 1e-3 * threshold:
        log.warning(
            "a profile found a better model than the refinement (RSS %.6g < %.6g): "
            "the reported best is the refinement's",
            trials.best.rss,
            rss_min,
        )
    log.info(
        "te map fit: refined to %s after %d forward models",
        ", ".join(
            f"{p.name} {p.value(float(u)):.6g}" for p, u in zip(parameters, point, strict=True)
        ),
        trials.forward.solves,
    )
    return _Search(estimates, best, rss_min, factor, threshold, n, trials.table())


@dataclass(frozen=True)
class _Setup:
    """The checked inputs shared by both te-map fits."""

    quantity: str
    confidence: float
    samples: int
    spec: GridSpec
    inside: np.ndarray
    observed: np.ndarray
    forward: _MapForward
    layers: CrustLayers | None
    series: object | None


def _setup(
    observed: Any,
    load: xr.DataArray,
    plate: Plate,
    quantity: Any,
    mask: Any,
    searched: int,
    confidence: Any,
    samples: Any,
    fit_load_scale: bool,
    gravity: Any,
    edges: Any,
    solve_options: dict[str, Any],
) -> _Setup:
    quantity, edges, confidence, samples = check_fit_options(
        quantity, edges, confidence, samples, EDGES
    )
    spec = check_grid(load)
    inside = compared_cells(observed, load, mask, parameter_count(searched, fit_load_scale))
    layers, series = gravity_model(quantity, gravity, plate, load, edges, fit_load_scale)
    load_values = np.asarray(load.values, dtype=np.float64)
    if edges == "infinite":
        check_edge_load(load_values, float(np.abs(load_values).sum()))
    forward = _MapForward(
        load, spec, plate, QuantityRule(quantity, series), layers, edges, solve_options
    )
    values = np.asarray(observed.values, dtype=np.float64)
    return _Setup(quantity, confidence, samples, spec, inside, values, forward, layers, series)


def _best_model(
    setup: _Setup, search: _Search, plate: Plate, load: xr.DataArray, attrs: dict[str, Any]
) -> xr.Dataset:
    """The best model as a result Dataset, with its te map and the fit's attributes."""
    best = search.best
    result = best.result.copy()
    result["deflection"] = result["deflection"] * best.load_scale
    result["load"] = load * best.load_scale
    result["load"].attrs = dict(best.result["load"].attrs)
    result["elastic_thickness"] = best.te.copy().assign_attrs(
        units="m", long_name="effective elastic thickness of the best model"
    )
    fit_attrs: dict[str, Any] = {
        "fit_quantity": setup.quantity,
        "fit_offset": best.offset,
        "fit_load_scale": best.load_scale,
        "fit_rms_misfit": math.sqrt(search.rss_min / search.n),
        "fit_confidence": setup.confidence,
        "fit_forward_models": setup.forward.solves,
        **attrs,
        **gravity_attrs(setup.layers, setup.series, plate),
    }
    for name, estimate in search.estimates.items():
        fit_attrs[f"fit_{name}"] = estimate.value
        fit_attrs[f"fit_{name}_low"] = estimate.low
        fit_attrs[f"fit_{name}_high"] = estimate.high
    result.attrs.update(fit_attrs)
    model = best.load_scale * best.model
    return best_model_dataset(
        result, setup.quantity, setup.observed, setup.inside, model, best.offset
    )


def _shared_fields(setup: _Setup, search: _Search, model: xr.Dataset) -> dict[str, Any]:
    best = search.best
    return {
        "offset": best.offset,
        "load_scale": best.load_scale,
        "rms": math.sqrt(search.rss_min / search.n),
        "quantity": setup.quantity,
        "confidence": setup.confidence,
        "threshold": search.threshold,
        "n_data": search.n,
        "n_effective": search.n / search.factor,
        "forward_models": setup.forward.solves,
        "trials": search.trials,
        "model": model,
    }


def _shifted_line(line: np.ndarray, shift: float) -> np.ndarray:
    """*line* (two points) moved by *shift* (m) perpendicular to itself, towards its right."""
    (x0, y0), (x1, y1) = line
    length = math.hypot(x1 - x0, y1 - y0)
    normal = np.array([(y1 - y0) / length, -(x1 - x0) / length])
    return line + shift * normal


def check_shift_width(width: float, spec: GridSpec) -> None:
    """Refuse a margin whose line is moved but whose transition is narrower than two cells.

    The te map must change smoothly as the line moves: with a narrower transition the
    misfit jumps whenever the line crosses a row of cell centres.

    Raises
    ------
    InputError
        Naming the width and the smallest width allowed (m).
    """
    smallest = 2.0 * max(spec.dx, spec.dy)
    if not width >= smallest:
        raise InputError(
            f"width must be at least two cells ({smallest:g} m) to fit the line's position "
            f"(te must change smoothly as the line moves); got width = {width!r} m"
        )


def fit_te_margin(
    observed: xr.DataArray,
    load: xr.DataArray,
    plate: Plate,
    line: Sequence[Sequence[float]],
    width: float = 0.0,
    *,
    quantity: str = "deflection",
    mask: xr.DataArray | None = None,
    bounds: tuple[float, float] = TE_BOUNDS,
    line_shift_bounds: tuple[float, float] | None = None,
    broken: xr.DataArray | None = None,
    confidence: float = 0.95,
    samples: int = MAP_SAMPLES,
    correlated_residuals: bool = True,
    fit_load_scale: bool = False,
    gravity: CrustLayers | Mapping[str, float] | None = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    progress: Progress | None = None,
) -> MarginFit:
    """te on either side of a line (and optionally the line's position) from an observed grid.

    The plate's te is :func:`gridflex.te_maps.margin_te` of (te_left, te_right, *line*,
    *width*); both te are searched in log te within *bounds*, and with
    *line_shift_bounds* the line also moves perpendicular to itself. Each trial is one
    finite-difference solve (:func:`gridflex.solve`), compared with *observed* after a
    fitted offset as in :func:`gridflex.fit_te`, with the same interval rule for each
    parameter (its profile: the others re-fitted at each of its values).

    Parameters
    ----------
    observed, load, quantity, mask, confidence, correlated_residuals, fit_load_scale, gravity
        As in :func:`gridflex.fit_te`.
    plate : Plate
        Moduli and densities; its te is not used (a constant, it is what is searched).
    line : sequence of two (x, y) pairs
        Two distinct points (m) on the margin line, in the grid's coordinates; te_left
        lies on the left looking from the first to the second.
    width : float, default 0
        Width of the transition (m); at least two cells when the line's position is
        fitted (the te map must change smoothly as the line moves).
    bounds : tuple of float, default (1e3, 1e5)
        Search range of te (m) on both sides, 0 < low < high.
    line_shift_bounds : tuple of float, optional
        Range (m) of the line's shift, perpendicular to itself and positive towards its
        right side (e.g. ``(-30e3, 30e3)``). None (the default) keeps the line fixed.
    broken : xarray.DataArray of bool, optional
        Cells where te = 0 (break lines, :func:`gridflex.te_maps.break_mask`) in every
        trial map.
    samples : int, default 7
        Coarse values per parameter (>= 5): first along te_left = te_right, then along
        each parameter in turn, before the least-squares refinement.
    edges : {"infinite", "periodic", "clamped", "free"}, default "infinite"
        As in :func:`gridflex.solve`.
    pad_factor, tolerance, max_iterations
        Passed to :func:`gridflex.solve`.
    progress : callable, optional
        Called as ``progress(done, total)`` during the coarse scans.

    Returns
    -------
    MarginFit
        ``te_left``, ``te_right`` (and ``line_shift``) as :class:`Estimate` (value,
        low, high), the best model and the number of forward models.

    Raises
    ------
    InputError
        Bad grids, mask, line, width, bounds, quantity or gravity parameters, too few
        data, or a line shift with a transition narrower than two cells.
    ConvergenceError
        A finite-difference solve did not converge.

    Warns
    -----
    OpenIntervalWarning
        When an interval reaches a search bound.
    """
    check_plate(plate, "fit_te_margin", te_grid=False)
    searched = 2 if line_shift_bounds is None else 3
    setup = _setup(
        observed,
        load,
        plate,
        quantity,
        mask,
        searched,
        confidence,
        samples,
        fit_load_scale,
        gravity,
        edges,
        {"pad_factor": pad_factor, "tolerance": tolerance, "max_iterations": max_iterations},
    )
    low, high = check_search_bounds("bounds", bounds, "m")
    margin_te(load, low, high, line, width)  # checks the line and the width
    points = np.asarray(line, dtype=np.float64)
    if broken is not None:
        check_same_grid(broken, load, "broken")
        broken = broken.astype(bool)
    parameters = [
        _Parameter("te_left", low, high, True, "m"),
        _Parameter("te_right", low, high, True, "m"),
    ]
    start = [0.5, 0.5]
    groups: list[tuple[int, ...]] = [(0, 1), (0,), (1,)]
    if line_shift_bounds is not None:
        shift_low, shift_high = check_search_bounds(
            "line_shift_bounds", line_shift_bounds, "m", positive=False
        )
        check_shift_width(width, setup.spec)
        shift = _Parameter("line_shift", shift_low, shift_high, False, "m")
        parameters.append(shift)
        start.append(shift.coordinate(0.0) if shift_low <= 0.0 <= shift_high else 0.5)
        groups.append((2,))

    def te_map(values: list[float]) -> xr.DataArray:
        moved = points if len(values) < 3 else _shifted_line(points, values[2])
        te = margin_te(load, values[0], values[1], moved.tolist(), width)
        return te if broken is None else broken_te(te, broken)

    trials = _MapTrials(
        setup.forward, parameters, te_map, setup.observed, setup.inside, fit_load_scale
    )
    search = _search_map(
        trials,
        np.array(start),
        groups,
        setup.samples,
        setup.confidence,
        correlated_residuals,
        setup.spec,
        progress,
    )
    shift_estimate = search.estimates.get("line_shift")
    best_line = points if shift_estimate is None else _shifted_line(points, shift_estimate.value)
    line_pair = (
        (float(best_line[0, 0]), float(best_line[0, 1])),
        (float(best_line[1, 0]), float(best_line[1, 1])),
    )
    attrs = {
        "fit_kind": "margin",
        "fit_line": np.asarray(best_line, dtype=np.float64).ravel(),
        "fit_width": float(width),
    }
    model = _best_model(setup, search, plate, load, attrs)
    log.info(
        "fit_te_margin: te_left %.4g m, te_right %.4g m, %d forward models",
        search.estimates["te_left"].value,
        search.estimates["te_right"].value,
        setup.forward.solves,
    )
    return MarginFit(
        **_shared_fields(setup, search, model),
        te_left=search.estimates["te_left"],
        te_right=search.estimates["te_right"],
        line_shift=shift_estimate,
        line=line_pair,
        width=float(width),
    )


def fit_te_scale(
    observed: xr.DataArray,
    load: xr.DataArray,
    plate: Plate,
    *,
    quantity: str = "deflection",
    mask: xr.DataArray | None = None,
    bounds: tuple[float, float] = SCALE_BOUNDS,
    confidence: float = 0.95,
    samples: int = MAP_SAMPLES,
    correlated_residuals: bool = True,
    fit_load_scale: bool = False,
    gravity: CrustLayers | Mapping[str, float] | None = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    progress: Progress | None = None,
) -> ScaleFit:
    """A factor s on a given te grid (te = s te_grid) from an observed grid.

    s is searched in log s within *bounds*; each trial is one finite-difference solve
    (:func:`gridflex.solve`), compared with *observed* after a fitted offset, with the
    interval rule of :func:`gridflex.fit_te`. Cells where the grid is 0 (breaks) stay 0.

    Parameters
    ----------
    observed, load, quantity, mask, confidence, correlated_residuals, fit_load_scale, gravity
        As in :func:`gridflex.fit_te`.
    plate : Plate
        A plate whose te is a grid (m) on the load grid: the shape that is scaled.
    bounds : tuple of float, default (0.1, 10)
        Search range of s, 0 < low < high.
    samples : int, default 7
        Coarse values of s (>= 5) before the least-squares refinement.
    edges, pad_factor, tolerance, max_iterations
        As in :func:`gridflex.solve`.
    progress : callable, optional
        Called as ``progress(done, total)`` during the coarse scan.

    Returns
    -------
    ScaleFit
        ``scale`` as an :class:`Estimate` (value, low, high), the best model (with its
        te grid) and the number of forward models.

    Raises
    ------
    InputError
        Bad grids, mask, bounds, quantity or gravity parameters, too few data, a plate
        of constant te or a te grid that is 0 everywhere.
    ConvergenceError
        A finite-difference solve did not converge.

    Warns
    -----
    OpenIntervalWarning
        When the interval reaches a search bound.
    """
    check_plate(plate, "fit_te_scale", te_grid=True)
    te_grid = plate.te
    assert isinstance(te_grid, xr.DataArray)
    check_same_grid(te_grid, load, "te grid")
    if not float(te_grid.max()) > 0.0:
        raise InputError("te grid is 0 everywhere: a factor on it changes nothing")
    setup = _setup(
        observed,
        load,
        plate,
        quantity,
        mask,
        1,
        confidence,
        samples,
        fit_load_scale,
        gravity,
        edges,
        {"pad_factor": pad_factor, "tolerance": tolerance, "max_iterations": max_iterations},
    )
    low, high = check_search_bounds("bounds", bounds)
    parameters = [_Parameter("scale", low, high, True, "1")]

    def te_map(values: list[float]) -> xr.DataArray:
        return te_grid * values[0]

    trials = _MapTrials(
        setup.forward, parameters, te_map, setup.observed, setup.inside, fit_load_scale
    )
    search = _search_map(
        trials,
        np.array([0.5]),
        [(0,)],
        setup.samples,
        setup.confidence,
        correlated_residuals,
        setup.spec,
        progress,
    )
    model = _best_model(setup, search, plate, load, {"fit_kind": "scale"})
    log.info(
        "fit_te_scale: scale %.4g, %d forward models",
        search.estimates["scale"].value,
        setup.forward.solves,
    )
    return ScaleFit(**_shared_fields(setup, search, model), scale=search.estimates["scale"])
