"""The stretching factor of a rift from backstripped tectonic subsidence through time.

For each cell (or well) the water-loaded tectonic subsidence Y_j at ages t_j is
compared with the uniform-stretching model S(beta, t) of
:class:`gridflex.basin.StretchingModel` (McKenzie 1978; initial plus thermal
subsidence, 0 before the rift), optionally plus a constant offset c (the depth of
the pre-rift surface below the datum, solved by least squares at every beta):

.. math:: RSS(\\beta) = \\min_c \\sum_j \\left(Y_j - S(\\beta, t_j) - c\\right)^2.

The search runs in x = 1 - 1/beta, in which the initial and the final subsidence
are linear (so the misfit is nearly quadratic): a coarse scan of :data:`SAMPLES`
values of x between the bounds, then Newton steps on the gradient of the misfit
(Gauss-Newton curvature) between the best value's neighbours, with a bisection
whenever a step leaves that bracket; the interval's ends likewise from the coarse
values that bracket them; cell by cell on whole arrays. S(beta, t_j) comes from a cubic
spline in x of the model evaluated once on :data:`TABLE_SIZE` values (one table per
fit: the model depends on beta and t only). The interval is the profile-likelihood
bound shared by every fit of gridflex (:func:`gridflex.estimation.likelihood.interval_threshold`;
PHYSICS.md 8.1): where RSS - RSS_min reaches chi^2_1(c) s^2, s^2 = RSS_min / (n - p)
(p = 1, or 2 with the offset), or chi^2_1(c) sigma^2 when the noise sigma is known.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import scipy.interpolate
import xarray as xr

from gridflex.basin.stretching import StretchingModel
from gridflex.errors import InputError
from gridflex.estimation.likelihood import chi2_quantile, interval_threshold, warn_if_open
from gridflex.estimation.observation import check_confidence
from gridflex.estimation.search import check_search_bounds
from gridflex.io.provenance import provenance_attrs
from gridflex.validation import check_flag, check_number

__all__ = ["BETA_BOUNDS", "SAMPLES", "TABLE_SIZE", "fit_stretching"]

BETA_BOUNDS = (1.0, 10.0)
"""Default search range of the stretching factor."""

SAMPLES = 129
"""Values of x = 1 - 1/beta of the coarse scan."""

TABLE_SIZE = 2049
"""Values of x of the model table behind the spline."""

_NEWTON_STEPS = 40  # at most; bisection fall-backs halve a 0.014-wide bracket
_X_TOLERANCE = 1e-13  # in x = 1 - 1/beta: the Newton loop stops when no cell moves more
_BLOCK_VALUES = 1 << 22  # data values per block of cells


def _time_axis(
    data: Any, ages: Any, dim: str | None
) -> tuple[np.ndarray, np.ndarray, str | None, xr.DataArray | None]:
    """(values with time first, ages, the time dim, a template of the cell dims)."""
    if isinstance(data, xr.DataArray):
        if dim is None:
            dim = str(data["age"].dims[0]) if "age" in data.coords else str(data.dims[0])
        if dim not in data.dims:
            raise InputError(
                f"tectonic_subsidence has no dimension {dim!r} (dims {data.dims}); "
                "name the time axis with dim="
            )
        if ages is None:
            if "age" not in data.coords or data["age"].dims != (dim,):
                raise InputError(
                    "ages not given and tectonic_subsidence has no 'age' coordinate on "
                    f"{dim!r}; give ages (years before present)"
                )
            ages = data["age"].values
        moved = data.transpose(dim, ...)
        template = moved.isel({dim: 0}, drop=True)
        template = template.drop_vars([c for c in template.coords if dim in data[c].dims])
        return np.asarray(moved.values, dtype=float), np.asarray(ages), dim, template
    if ages is None:
        raise InputError("ages must be given (years before present) for an array")
    try:
        values = np.asarray(data, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"tectonic_subsidence must be numbers (m), got {type(data).__name__}"
        ) from exc
    if values.ndim == 0:
        raise InputError("tectonic_subsidence needs one value per age, got one number")
    return values, np.asarray(ages), None, None


def _check_ages(ages: np.ndarray, count: int) -> np.ndarray:
    try:
        out = np.asarray(ages, dtype=float).reshape(-1)
    except (TypeError, ValueError) as exc:
        raise InputError(f"ages must be numbers (years before present), got {ages!r}") from exc
    if out.size != count:
        raise InputError(f"ages must have one value per time step ({count}), got {out.size}")
    if not np.all(np.isfinite(out)):
        raise InputError(f"ages must be finite (years before present), got {out!r}")
    return out


class _ModelTable:
    """S(x, t_j) for x = 1 - 1/beta, through a cubic spline of a table in x."""

    def __init__(self, model: StretchingModel, times: np.ndarray, low: float, high: float):
        self.x = np.linspace(low, high, TABLE_SIZE)
        beta = 1.0 / (1.0 - self.x)
        after = times >= 0.0
        table = np.zeros((TABLE_SIZE, times.size))
        if after.any():
            thermal = model.thermal_subsidence(beta, times[after])
            table[:, after] = model.initial_subsidence(beta)[:, None] + thermal
        self.spline = scipy.interpolate.CubicSpline(self.x, table, axis=0)
        self.coarse_index = np.linspace(0, TABLE_SIZE - 1, SAMPLES).astype(int)
        self.table = table

        self.coefficients = np.asarray(self.spline.c)  # (4, TABLE_SIZE - 1, times)
        self.step = float(self.x[1] - self.x[0])

    def __call__(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """S and dS/dx at each cell's x, each of shape (times, cells): the spline's
        cubic pieces on the uniform table, evaluated by Horner's rule."""
        piece = np.clip(((x - self.x[0]) / self.step).astype(np.int64), 0, TABLE_SIZE - 2)
        dx = (x - self.x[piece])[None, :]
        c0, c1, c2, c3 = (self.coefficients[i][piece].T for i in range(4))
        value = ((c0 * dx + c1) * dx + c2) * dx + c3
        slope = (3.0 * c0 * dx + 2.0 * c1) * dx + c2
        return value, slope


class _Cells:
    """The data of a block of cells and their misfit at any x per cell."""

    def __init__(self, values: np.ndarray, offset: bool):
        self.valid = np.isfinite(values)
        self.values = np.where(self.valid, values, 0.0)
        self.count = self.valid.sum(axis=0)
        self.offset = offset

    def _centred(self, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(r without its mean over the valid values, the mean): the offset removed."""
        if not self.offset:
            return r, np.zeros(r.shape[1])
        with np.errstate(invalid="ignore", divide="ignore"):
            shift = r.sum(axis=0) / self.count
        return np.where(self.valid, r - shift, 0.0), shift

    def residuals(self, model: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(RSS, offset) per cell for *model* of shape (times, cells)."""
        r, shift = self._centred(np.where(self.valid, self.values - model, 0.0))
        return np.einsum("jc,jc->c", r, r), shift

    def scan(self, models: np.ndarray) -> np.ndarray:
        """RSS of every cell for each row of *models* (shape (trials, times)), by matrix
        products of the sums of squares: shape (trials, cells), >= 0."""
        weight = self.valid.astype(np.float64)
        rss = (
            np.einsum("jc,jc->c", self.values, self.values)[None, :]
            - 2.0 * (models @ self.values)
            + (models * models) @ weight
        )
        if self.offset:
            with np.errstate(invalid="ignore", divide="ignore"):
                rss -= (self.values.sum(axis=0)[None, :] - models @ weight) ** 2 / self.count
        return np.clip(rss, 0.0, None)

    def misfit(self, table: _ModelTable, x: np.ndarray) -> tuple[np.ndarray, ...]:
        """(RSS, dRSS/dx, Gauss-Newton d2RSS/dx2, offset) per cell at *x*."""
        model, slope = table(x)
        r, shift = self._centred(np.where(self.valid, self.values - model, 0.0))
        slope, _ = self._centred(np.where(self.valid, slope, 0.0))
        rss = np.einsum("jc,jc->c", r, r)
        gradient = -2.0 * np.einsum("jc,jc->c", r, slope)
        curvature = 2.0 * np.einsum("jc,jc->c", slope, slope)
        return rss, gradient, curvature, shift


def _newton_in_bracket(
    function: Any, low: np.ndarray, high: np.ndarray, start: np.ndarray, rising: bool
) -> np.ndarray:
    """Root per cell of *function(x) -> (f, f')* in [low, high], where f < 0 at *low* and
    > 0 at *high* when *rising* (the reverse otherwise): Newton steps, a bisection when a
    step leaves the bracket (Press et al. 2007, Numerical Recipes 9.4, from memory)."""
    x = start.copy()
    for _ in range(_NEWTON_STEPS):
        f, slope = function(x)
        above = (f > 0.0) == rising
        high, low = np.where(above, x, high), np.where(above, low, x)
        with np.errstate(invalid="ignore", divide="ignore"):
            step = x - f / slope
        inside = np.isfinite(step) & ((step - low) * (step - high) <= 0.0)
        new = np.where(inside, step, (low + high) / 2.0)
        moved = float(np.max(np.abs(new - x), initial=0.0))
        x = new
        if moved <= _X_TOLERANCE:
            break
    return x


def _fit_block(
    table: _ModelTable,
    values: np.ndarray,
    offset: bool,
    sigma: float | None,
    confidence: float,
) -> dict[str, np.ndarray]:
    """Best x, interval ends, RSS, offset and counts of a block of cells."""
    cells = _Cells(values, offset)
    ncell = values.shape[1]

    def gradient(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        _, slope, curvature, _ = cells.misfit(table, x)
        return slope, curvature

    coarse_x = table.x[table.coarse_index]
    coarse = cells.scan(table.table[table.coarse_index])
    best = np.argmin(coarse, axis=0)
    last = coarse_x.size - 1
    a = coarse_x[np.maximum(best - 1, 0)]
    b = coarse_x[np.minimum(best + 1, last)]
    x = _newton_in_bracket(gradient, a, b, coarse_x[best], rising=True)
    rss_min = cells.misfit(table, x)[0]
    at_node = coarse[best, np.arange(ncell)] <= rss_min
    x = np.where(at_node, coarse_x[best], x)
    rss_min = np.minimum(rss_min, coarse[best, np.arange(ncell)])
    parameters = 2 if offset else 1
    n = cells.count
    enough = n > parameters
    if sigma is None:
        with np.errstate(invalid="ignore", divide="ignore"):
            threshold, _ = interval_threshold(
                rss_min, np.where(enough, n, parameters + 1), parameters, 1.0, confidence
            )
    else:
        enough = n >= 1
        threshold = np.full(ncell, chi2_quantile(confidence) * sigma**2)

    def excess(x_end: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        rss, slope, _, _ = cells.misfit(table, x_end)
        return rss - rss_min - threshold, slope

    rise = coarse - rss_min - threshold  # > 0 outside the interval
    ends, closed = [], []
    nodes = np.arange(coarse_x.size)[:, None]
    for side in (-1, 1):
        beyond = (nodes - best) * side > 0
        outside = beyond & (rise > 0)
        found = outside.any(axis=0)
        if side > 0:
            first = np.where(found, np.argmax(outside, axis=0), last)
        else:
            first = np.where(found, last - np.argmax(outside[::-1], axis=0), 0)
        previous = first - side
        inner = np.where((previous - best) * side > 0, coarse_x[np.clip(previous, 0, last)], x)
        outer = coarse_x[first]
        if side > 0:
            end = _newton_in_bracket(excess, inner, outer, (inner + outer) / 2, rising=True)
        else:
            end = _newton_in_bracket(excess, outer, inner, (inner + outer) / 2, rising=False)
        ends.append(np.where(found, end, coarse_x[first]))
        closed.append(found | ~enough)
    shift = cells.misfit(table, x)[3]
    missing = ~enough | (n == 0)
    return {
        "x": np.where(missing, np.nan, x),
        "low": np.where(missing, np.nan, ends[0]),
        "high": np.where(missing, np.nan, ends[1]),
        "rss": np.where(missing, np.nan, rss_min),
        "offset": np.where(missing, np.nan, shift),
        "count": n,
        "closed_low": closed[0],
        "closed_high": closed[1],
    }


def fit_stretching(
    tectonic_subsidence: xr.DataArray | np.ndarray | Sequence[float],
    ages: Sequence[float] | np.ndarray | None,
    rift_age: float,
    *,
    dim: str | None = None,
    bounds: tuple[float, float] = BETA_BOUNDS,
    confidence: float = 0.95,
    sigma: float | None = None,
    fit_offset: bool = False,
    model: StretchingModel | None = None,
) -> xr.Dataset:
    """Fit the stretching factor beta (with an interval) to tectonic subsidence through time.

    Parameters
    ----------
    tectonic_subsidence : xarray.DataArray, array or sequence
        Water-loaded tectonic subsidence (m, positive down) relative to the pre-rift
        surface (or to any datum with ``fit_offset=True``), e.g. the
        ``tectonic_subsidence`` of :func:`gridflex.basin.backstrip_layers` or of
        :func:`gridflex.basin.stage_loading`. One axis is time; every other axis is a
        cell or a well, each fitted on its own. NaN marks a missing value.
    ages : sequence of float or None
        Years before present of the time axis; ``None``: the DataArray's ``age``
        coordinate.
    rift_age : float
        Age of the stretching (years before present); the model is 0 before it.
    dim : str, optional
        The time dimension of a DataArray (default: that of its ``age`` coordinate, or
        its first). An array has time on its first axis.
    bounds : (float, float), default (1, 10)
        Search range of beta (1 <= low < high, finite).
    confidence : float, default 0.95
        Confidence level of the interval.
    sigma : float, optional
        Standard deviation of the data (m) if known; default: estimated from the
        misfit of each cell (then each needs more data than fitted parameters).
    fit_offset : bool, default False
        Also fit a constant offset (m) per cell.
    model : StretchingModel, optional
        The lithosphere (default parameters of :class:`gridflex.basin.StretchingModel`);
        use the densities the subsidence was computed or backstripped with.

    Returns
    -------
    xarray.Dataset
        On the cell (or well) dims: ``stretching_factor`` (best beta),
        ``stretching_factor_lower`` and ``stretching_factor_upper`` (the interval;
        the search bound where it is open), ``rss`` (m^2), ``offset`` (m, 0 without
        ``fit_offset``), ``data_count``; NaN where a cell has too few data.
        Attributes: the criterion, confidence, bounds, rift age and the model.

    Raises
    ------
    InputError
        Bad data, ages, bounds or options.

    Warns
    -----
    OpenIntervalWarning
        When an interval reaches a search bound.

    Examples
    --------
    >>> import gridflex
    >>> from gridflex.basin import mckenzie_subsidence
    >>> ages = [50e6, 40e6, 20e6, 0.0]
    >>> s = mckenzie_subsidence(2.2, [60e6 - a for a in ages])["total_subsidence"]
    >>> fit = gridflex.fit_stretching(s.values + [3.0, -2.0, 1.0, -2.0], ages, 60e6)
    >>> round(float(fit["stretching_factor"]), 2)
    2.2
    """
    values, raw_ages, _, template = _time_axis(tectonic_subsidence, ages, dim)
    age_values = _check_ages(raw_ages, values.shape[0])
    if np.isinf(values).any():
        raise InputError("tectonic_subsidence has infinite values; use NaN for missing data")
    rift = check_number("rift_age", rift_age, unit="years before present")
    low, high = check_search_bounds("bounds", bounds)
    if low < 1.0:
        raise InputError(f"bounds must satisfy 1 <= low (beta >= 1), got {bounds!r}")
    level = check_confidence(confidence)
    noise = (
        None if sigma is None else check_number("sigma", sigma, unit="m", minimum=0.0, strict=True)
    )
    offset = check_flag("fit_offset", fit_offset)
    model = StretchingModel() if model is None else model
    if not isinstance(model, StretchingModel):
        raise InputError(
            f"model must be a gridflex.basin.StretchingModel, got {type(model).__name__}"
        )
    table = _ModelTable(model, rift - age_values, 1.0 - 1.0 / low, 1.0 - 1.0 / high)
    cell_shape = values.shape[1:]
    flat = values.reshape(values.shape[0], -1)
    block = max(1, _BLOCK_VALUES // (SAMPLES + 12 * values.shape[0]))
    parts = [
        _fit_block(table, flat[:, c0 : c0 + block], offset, noise, level)
        for c0 in range(0, flat.shape[1], block)
    ]
    result = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
    opened = (~result["closed_low"]).sum(), (~result["closed_high"]).sum()
    warn_if_open(
        (opened[0] == 0, opened[1] == 0),
        level,
        f"stretching_factor ({max(opened)} of {flat.shape[1]} fits)",
        (low, high),
    )

    def beta_of(x: np.ndarray) -> np.ndarray:
        return (1.0 / (1.0 - x)).reshape(cell_shape)

    fields = {
        "stretching_factor": (beta_of(result["x"]), "1", "best-fitting stretching factor"),
        "stretching_factor_lower": (beta_of(result["low"]), "1", "lower end of the interval"),
        "stretching_factor_upper": (beta_of(result["high"]), "1", "upper end of the interval"),
        "rss": (result["rss"].reshape(cell_shape), "m2", "residual sum of squares"),
        "offset": (result["offset"].reshape(cell_shape), "m", "fitted constant offset"),
        "data_count": (result["count"].reshape(cell_shape), "1", "values fitted"),
    }
    criterion = f"profile likelihood: RSS - RSS_min = chi2_1({level:g}) " + (
        "sigma^2" if noise is not None else "RSS_min / (n - p)"
    )
    attrs: dict[str, Any] = {
        "criterion": criterion,
        "confidence": level,
        "bounds": [low, high],
        "rift_age": rift,
        "fit_offset": int(offset),
        **{f"model_{k}": v for k, v in model.describe().items()},
    }
    if noise is not None:
        attrs["sigma"] = noise
    dims: tuple[Any, ...] = (
        tuple(f"dim_{i}" for i in range(len(cell_shape))) if template is None else template.dims
    )
    data_vars = {k: (dims, v, {"units": u, "long_name": n}) for k, (v, u, n) in fields.items()}
    out = xr.Dataset(data_vars, coords=None if template is None else template.coords)
    out.attrs = provenance_attrs(
        {}, attrs, "stretching factor from tectonic subsidence (McKenzie 1978)"
    )
    return out
