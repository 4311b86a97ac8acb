"""The statistics every forward-model fit of te shares: nuisance parameters and intervals.

A fit compares an observation d with a model m(θ) inside a mask. Parameters that enter
linearly — a constant offset c and, optionally, a factor a on the load — are solved by
least squares at every θ (:func:`nuisance_fit`), so the residual sum of squares RSS(θ)
is already minimised over them. The interval of one parameter is the profile-likelihood
bound (PHYSICS.md section 8.1; Bates & Watts 1988, *Nonlinear Regression Analysis and
Its Applications*, ch. 6, from memory): the parameter's values where the profile
RSS — the RSS minimised over every other parameter at that value — has risen by

.. math:: \\Delta RSS = \\chi^2_1(c) \\, s^2 \\, \\frac{n}{n_{eff}}, \\qquad
          s^2 = \\frac{RSS_{min}}{n - p}

with p counting every fitted parameter (the searched ones, the offset and the load
scale) and n / n_eff the residual correlation factor (:func:`correlation_factor`).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterable
from typing import Any, overload

import numpy as np
import scipy.fft
import scipy.optimize

from gridflex.errors import GridflexWarning
from gridflex.grid import GridSpec

__all__ = [
    "OpenIntervalWarning",
    "chi2_quantile",
    "correlation_factor",
    "interval_end",
    "interval_threshold",
    "nuisance_fit",
    "parameter_count",
    "warn_if_open",
]

_MAX_ROOT_STEPS = 100
"""Iterations of the interval-end root search before it returns its last point."""


class OpenIntervalWarning(GridflexWarning):
    """The interval reaches a search bound: the data do not limit the parameter on that side."""


def chi2_quantile(confidence: float) -> float:
    """The *confidence* quantile of the chi-square law with one degree of freedom."""
    from scipy.stats import chi2  # imported here: scipy.stats is slow to import

    return float(chi2.ppf(confidence, 1))


def parameter_count(searched: int, fit_load_scale: bool) -> int:
    """Parameters p of s² = RSS_min / (n - p): the searched ones, the offset, the load scale."""
    return searched + (2 if fit_load_scale else 1)


@overload
def interval_threshold(
    rss_min: float, n: int, parameters: int, factor: float, confidence: float
) -> tuple[float, float]: ...


@overload
def interval_threshold(
    rss_min: np.ndarray, n: np.ndarray, parameters: int, factor: float, confidence: float
) -> tuple[np.ndarray, np.ndarray]: ...


def interval_threshold(
    rss_min: Any, n: Any, parameters: int, factor: float, confidence: float
) -> tuple[Any, Any]:
    """``(threshold, s2)``: the RSS increase that bounds every interval, and s².

    Parameters
    ----------
    rss_min : float or numpy.ndarray
        Smallest residual sum of squares (one per fit when an array).
    n : int or numpy.ndarray
        Number of compared data (per fit).
    parameters : int
        p, every fitted parameter (see :func:`parameter_count`).
    factor : float
        n / n_eff, the residual correlation factor (1 for independent data).
    confidence : float
        Confidence level of the intervals.
    """
    s2 = rss_min / (n - parameters)
    return chi2_quantile(confidence) * s2 * factor, s2


def nuisance_fit(data: np.ndarray, model: np.ndarray, scale: bool) -> tuple[float, float, float]:
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


def correlation_factor(residual: np.ndarray, inside: np.ndarray, spec: GridSpec) -> float:
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


def interval_end(
    profile: Callable[[float], float],
    best: float,
    rss_min: float,
    threshold: float,
    candidates: Iterable[float],
    xtol: float,
    *,
    extrapolate: bool = False,
) -> tuple[float, bool]:
    """One end of a profile-likelihood interval, and whether it was reached.

    The end is the root of the signed root ``z = sqrt(RSS - RSS_min) - sqrt(threshold)``
    of the profile RSS, which is nearly linear in a parameter the model is nearly linear
    in (Bates & Watts 1988, the profile t statistic), so few evaluations are needed when
    the profile is expensive. The *candidates* are tried in turn, moving away from
    *best*; the last one is the search bound. The first where z > 0 brackets the end
    with the point before it (or *best*), and the end is found in that bracket by the
    Illinois variant of regula falsi (Dowell & Jarratt 1971, from memory). A point
    where the secant correction -z / z' is within *xtol* ends the search.

    Parameters
    ----------
    profile : callable
        Profile RSS at a value of the parameter (in the unit of *best*).
    best : float
        The parameter's best value.
    rss_min : float
        RSS at *best*.
    threshold : float
        RSS increase at the interval's end (:func:`interval_threshold`).
    candidates : iterable of float
        Values beyond *best* on one side, moving away from it, the last one the bound.
    xtol : float
        Absolute tolerance of the end, in the unit of *best*.
    extrapolate : bool, default False
        After a candidate still below the threshold, try next the secant estimate of
        the end (from that candidate and the point before it) when it comes before the
        next candidate: for expensive profiles, whose candidates are not yet evaluated.

    Returns
    -------
    end : float
        The interval's end; the last candidate (the search bound) when never reached.
    closed : bool
        Whether the end was reached inside the search range.
    """
    target = math.sqrt(threshold)

    def signed(x: float) -> float:
        return math.sqrt(max(profile(x) - rss_min, 0.0)) - target

    inner, z_inner = best, -target
    pending = list(candidates)
    while pending:
        x = pending.pop(0)
        z = signed(x)
        slope = (z - z_inner) / (x - inner) if x != inner else 0.0
        outward = z > z_inner  # z grows away from best, as it should
        if outward and abs(z / slope) <= xtol:
            return x, True
        if z > 0:
            return _illinois(signed, inner, z_inner, x, z, xtol), True
        inner, z_inner = x, z
        if extrapolate and outward and pending:
            guess = x - z / slope
            if (guess - x) * (pending[0] - guess) > 0:  # strictly before the next candidate
                pending.insert(0, guess)
    return inner, False


def _illinois(
    f: Callable[[float], float], a: float, fa: float, b: float, fb: float, xtol: float
) -> float:
    """Root of *f* between *a* (f < 0) and *b* (f > 0) by the Illinois variant of regula
    falsi, stopped when the secant correction or the bracket is within *xtol*."""
    ga, gb = fa, fb  # the ends' values as weighted for the next interpolation
    kept = 0  # the end kept by the last step: -1 a, +1 b
    x = a
    for _ in range(_MAX_ROOT_STEPS):
        x = a - ga * (b - a) / (gb - ga)
        fx = f(x)
        if fx > 0:
            b, fb, gb = x, fx, fx
            if kept < 0:
                ga /= 2.0
            kept = -1
        else:
            a, fa, ga = x, fx, fx
            if kept > 0:
                gb /= 2.0
            kept = 1
        slope = (fb - fa) / (b - a)
        if abs(b - a) <= xtol or abs(fx / slope) <= xtol:
            return x
    return x


def warn_if_open(
    closed: Iterable[bool],
    confidence: float,
    name: str,
    bounds: Any,
    unit: str = "",
    stacklevel: int = 3,
) -> None:
    """Warn (:class:`OpenIntervalWarning`) when an interval of *name* reaches a search bound.

    *stacklevel* is that of :func:`warnings.warn` seen from here (3: the caller's caller).
    """
    sides = [side for side, ok in zip(("lower", "upper"), closed, strict=True) if not ok]
    if not sides:
        return
    unit_text = f" {unit}" if unit else ""
    warnings.warn(
        f"the {confidence:.0%} interval of {name} reaches the {' and '.join(sides)} search "
        f"bound {bounds!r}{unit_text}: the data do not constrain {name} there; widen the "
        "bounds or report the interval as open",
        OpenIntervalWarning,
        stacklevel=stacklevel,
    )
