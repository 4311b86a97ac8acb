"""Tests of gridflex.estimation.likelihood: the interval end, the threshold, the nuisance fit."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize

from gridflex.estimation.likelihood import (
    chi2_quantile,
    interval_end,
    interval_threshold,
    nuisance_fit,
    parameter_count,
)


class _Counted:
    """A profile RSS that counts its evaluations."""

    def __init__(self, function):
        self.function = function
        self.calls = 0

    def __call__(self, x: float) -> float:
        self.calls += 1
        return self.function(x)


def test_quadratic_profile_ends_where_the_increase_reaches_the_threshold():
    # a linear model's profile is exactly quadratic: RSS = RSS_min + (x - b)^2 / v, so the
    # ends are b -+ sqrt(threshold v) (Bates & Watts 1988, ch. 6, from memory; exact algebra)
    b, v, rss_min, threshold = 0.3, 0.02, 10.0, 3.841
    profile = _Counted(lambda x: rss_min + (x - b) ** 2 / v)
    half = math.sqrt(threshold * v)
    for side, candidates in ((-1, [b - 0.05, b - 0.2, b - 0.4, 0.0]), (1, [b + 0.3, 1.0])):
        end, closed = interval_end(profile, b, rss_min, threshold, candidates, 1e-9)
        assert closed
        assert end == pytest.approx(b + side * half, abs=1e-9)
    # the signed root is linear here: once bracketed, one interpolation lands on the end
    assert profile.calls <= 8


@pytest.mark.parametrize("extrapolate", [False, True])
def test_skewed_profile_matches_brent(extrapolate):
    # a profile whose signed root is curved (cubic term): the end agrees with brentq on the
    # RSS increase itself (common practice: an independent root finder)
    rss_min, threshold = 5.0, 2.0

    def rss(x: float) -> float:
        d = x - 0.5
        return rss_min + 8.0 * d * d * (1.0 + 3.0 * d)

    expected = scipy.optimize.brentq(lambda x: rss(x) - rss_min - threshold, 0.5, 1.0, xtol=1e-12)
    end, closed = interval_end(
        rss, 0.5, rss_min, threshold, [0.6, 0.8, 1.0], 1e-8, extrapolate=extrapolate
    )
    assert closed and end == pytest.approx(expected, abs=1e-7)


def test_extrapolation_from_a_short_first_guess_saves_an_evaluation():
    # a first candidate at the quadratic prediction that falls short of the end: the secant
    # estimate comes next instead of the far candidate (3 evaluations instead of 4)
    rss_min, threshold = 5.0, 0.2
    half = math.sqrt(threshold / 8.0)

    def rss(x: float) -> float:
        d = x - 0.5
        return rss_min + 8.0 * d * d * (1.0 - 0.3 * d)

    candidates = [0.5 + half, 0.5 + 2 * half, 0.5 + 4 * half, 1.0]
    plain, guided = _Counted(rss), _Counted(rss)
    end, _ = interval_end(plain, 0.5, rss_min, threshold, candidates, 1e-4)
    end2, _ = interval_end(guided, 0.5, rss_min, threshold, candidates, 1e-4, extrapolate=True)
    assert end2 == pytest.approx(end, abs=1e-4)
    assert rss(end2) - rss_min == pytest.approx(threshold, rel=1e-3)
    assert guided.calls < plain.calls


def test_an_end_beyond_the_bound_is_open():
    # a flat profile: the data do not limit the parameter; the bound comes back, open
    end, closed = interval_end(lambda x: 1.0 + 1e-3 * x, 0.2, 1.0, 3.841, [0.5, 1.0], 1e-6)
    assert (end, closed) == (1.0, False)


def test_threshold_counts_every_parameter_and_the_correlation():
    # PHYSICS.md 8.1: threshold = chi2_1(c) s^2 n / n_eff with s^2 = RSS_min / (n - p)
    assert parameter_count(2, False) == 3 and parameter_count(3, True) == 5
    threshold, s2 = interval_threshold(100.0, 54, 4, 2.0, 0.95)
    assert s2 == pytest.approx(2.0)
    # chi2(1) 95 % quantile 3.841 (tabulated; common practice)
    assert chi2_quantile(0.95) == pytest.approx(3.841459, rel=1e-6)
    assert threshold == pytest.approx(3.841459 * 2.0 * 2.0, rel=1e-6)


def test_nuisance_fit_is_linear_least_squares():
    # offset and scale against numpy's least squares (common practice)
    rng = np.random.default_rng(0)
    model = rng.normal(size=50)
    data = 1.7 * model + 0.4 + 0.01 * rng.normal(size=50)
    rss, scale, offset = nuisance_fit(data, model, True)
    design = np.column_stack([model, np.ones_like(model)])
    coef, residual, *_ = np.linalg.lstsq(design, data, rcond=None)
    assert (scale, offset) == pytest.approx(tuple(coef), rel=1e-10)
    assert rss == pytest.approx(float(residual[0]), rel=1e-10)
