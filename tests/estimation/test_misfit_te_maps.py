"""Tests of gridflex.estimation.misfit_te_maps (fit_te_margin, fit_te_scale).

The synthetic observations are made by gridflex.solve (finite differences) with known te
maps and seeded noise; the fits must give the maps back with intervals that contain them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize
import xarray as xr
from numpy.testing import assert_allclose

import gridflex
from gridflex.errors import InputError
from gridflex.estimation.misfit_te_maps import fit_te_margin, fit_te_scale
from gridflex.gravity.first_order import CrustLayers
from gridflex.te_maps import margin_te
from tests.helpers import linear_free_air, make_grid, seamount_heights

TE_LEFT, TE_RIGHT = 10e3, 40e3
LINE = [(0.0, 0.0), (0.0, 1.0)]  # x = 0, looking north: west is left
WIDTH = 30e3
N, DX = 64, 6e3


def _seamounts(like: xr.DataArray, centres) -> xr.DataArray:
    """The load (Pa) of invented seamounts (tests.helpers), submerged (rho_l - rho_w = 1770)."""
    return gridflex.pressure_from_height(seamount_heights(like, centres), 1770.0)


@pytest.fixture(scope="module")
def margin():
    """A margin under two seamounts, one on each side; its deflection and a noise field."""
    grid = make_grid(N, N, DX)
    load = _seamounts(grid, [(-60e3, 20e3), (60e3, -20e3)])
    te = margin_te(load, TE_LEFT, TE_RIGHT, LINE, WIDTH)
    w = gridflex.solve(load, gridflex.Plate(te=te))["deflection"]
    noise = np.random.default_rng(1).standard_normal(w.shape)
    return load, w, noise


BOUNDS = (3e3, 8e4)
"""Search range of te (m): stiffer trial plates only cost wider padding here."""


@pytest.fixture(scope="module")
def margin_fit(margin):
    """The margin fit of the observation with 5 % noise and an offset of 5 m."""
    load, w, noise = margin
    observed = w + 0.05 * float(w.max()) * noise + 5.0
    return observed, fit_te_margin(
        observed, load, gridflex.Plate(te=0.0), LINE, WIDTH, bounds=BOUNDS
    )


def _independent_rss(observed, load, te_left, te_right):
    """RSS after the best offset, computed here with gridflex.solve and numpy only."""
    te = margin_te(load, te_left, te_right, LINE, WIDTH)
    w = gridflex.solve(load, gridflex.Plate(te=te))["deflection"].values
    r = observed.values - w
    r -= r.mean()
    return float(r.ravel() @ r.ravel())


def test_margin_recovers_both_te_and_its_intervals_are_profiles(margin, margin_fit):
    load, w, _ = margin
    sigma = 0.05 * float(w.max())
    observed, fit = margin_fit
    # synthetic recovery with the forward model that made the data (PHYSICS.md 8.1); the
    # profile-likelihood intervals (Bates & Watts 1988, ch. 6, from memory; chi2(1) 95 %
    # quantile, common practice) contain the truth and are closed
    for estimate, truth in ((fit.te_left, TE_LEFT), (fit.te_right, TE_RIGHT)):
        assert estimate.low < truth < estimate.high
        assert estimate.interval_closed == (True, True)
        assert_allclose(estimate.value, truth, rtol=0.05)
    assert fit.line_shift is None
    # independent noise: RMS = sigma (common practice), no correlation widening
    assert_allclose(fit.rms, sigma, rtol=0.05)
    assert fit.n_effective > 0.9 * fit.n_data
    # offset: standard error sigma / sqrt(n) (common practice), 5 standard errors
    assert abs(fit.offset - 5.0) < 5 * sigma / N
    # a handful of finite-difference solves, not hundreds (seen: 38)
    assert fit.forward_models <= 60
    assert fit.trials.sizes["trial"] <= fit.forward_models
    # the profile of te_left at its low end, recomputed here independently (te_right
    # re-fitted by bounded Brent on an RSS from gridflex.solve): the increase is the
    # interval's threshold, i.e. the end is where the profile says (PHYSICS.md 8.1)
    rss_min = fit.rms**2 * fit.n_data

    def conditional(log_te_right: float) -> float:
        return _independent_rss(observed, load, fit.te_left.low, math.exp(log_te_right))

    best = scipy.optimize.minimize_scalar(
        conditional,
        bounds=(math.log(0.9 * fit.te_right.value), math.log(1.1 * fit.te_right.value)),
        method="bounded",
        options={"xatol": 1e-3},
    )
    assert_allclose(best.fun - rss_min, fit.threshold, rtol=0.03)
    model = fit.model
    assert {"elastic_thickness", "deflection", "observed", "predicted", "residual"} <= set(model)
    assert_allclose(
        model["elastic_thickness"],
        margin_te(load, fit.te_left.value, fit.te_right.value, LINE, WIDTH),
        rtol=1e-12,
    )
    assert model.attrs["fit_te_left"] == fit.te_left.value
    assert model.attrs["solver"] == "finite-difference"
    summary = fit.summary()
    assert summary["fit"] == "margin" and set(summary["parameters"]) == {"te_left", "te_right"}
    assert summary["forward_models"] == fit.forward_models


def test_margin_intervals_shrink_with_less_noise(margin, margin_fit):
    load, w, noise = margin
    widths = []
    for fraction in (0.05, 0.01):
        if fraction == 0.05:
            fit = margin_fit[1]
        else:
            observed = w + fraction * float(w.max()) * noise
            fit = fit_te_margin(observed, load, gridflex.Plate(te=0.0), LINE, WIDTH, bounds=BOUNDS)
        assert fit.te_left.low < TE_LEFT < fit.te_left.high
        assert fit.te_right.low < TE_RIGHT < fit.te_right.high
        widths.append([math.log(e.high / e.low) for e in (fit.te_left, fit.te_right)])
    # near the minimum the interval's width is proportional to s (common practice: a
    # locally linear model), so five times less noise gives about five times narrower
    ratio = np.array(widths[0]) / np.array(widths[1])
    assert np.all((ratio > 4.0) & (ratio < 6.0)), ratio


def test_scale_on_a_uniform_grid_equals_the_constant_fit():
    # issue requirement: a uniform te grid equals the constant-te result within 0.2 % of the
    # peak deflection, here in fitting; te of 23.4 km on 4 km cells (about alpha / 20, where
    # the finite-difference and spectral plates agree to ~0.1 %: DEVELOPERS.md table)
    grid = make_grid(64, 64, 4e3)
    load = _seamounts(grid, [(0.0, 0.0)])
    w = gridflex.solve(load, gridflex.Plate(te=23.4e3))["deflection"]
    observed = w + 0.03 * float(w.max()) * np.random.default_rng(2).standard_normal(w.shape)
    constant = gridflex.fit_te(observed, load, gridflex.Plate(te=0.0))
    uniform = xr.full_like(load, 20e3)
    scaled = fit_te_scale(observed, load, gridflex.Plate(te=uniform))
    peak = float(np.abs(constant.model["deflection"]).max())
    difference = np.abs(scaled.model["deflection"] - constant.model["deflection"]).max()
    assert float(difference) < 2e-3 * peak
    te = scaled.scale.value * 20e3
    assert_allclose(te, constant.te, rtol=2e-3)
    assert scaled.scale.low * 20e3 < constant.te < scaled.scale.high * 20e3
    assert constant.te_low < te < constant.te_high
    assert scaled.forward_models <= 25  # seen: 17


def test_scale_recovers_the_factor_on_a_varying_grid(margin):
    load, _, noise = margin
    shape = margin_te(load, 8e3, 30e3, LINE, WIDTH)
    truth = 1.3
    w = gridflex.solve(load, gridflex.Plate(te=truth * shape))["deflection"]
    sigma = 0.05 * float(w.max())
    fit = fit_te_scale(w + sigma * noise, load, gridflex.Plate(te=shape), bounds=(0.3, 2.5))
    # synthetic recovery, profile-likelihood interval (PHYSICS.md 8.1)
    assert fit.scale.low < truth < fit.scale.high
    assert_allclose(fit.scale.value, truth, rtol=0.05)
    assert_allclose(fit.model["elastic_thickness"], fit.scale.value * shape, rtol=1e-12)
    assert fit.summary()["te_max"] == pytest.approx(fit.scale.value * 30e3)


def test_scale_fits_the_first_order_free_air_anomaly():
    # the free-air rule of the constant fit applied to a te grid's deflection, against an
    # independent first-order anomaly (Parker 1973, n = 1 term; tests.helpers.linear_free_air)
    grid = make_grid(64, 64, 6e3)
    load = _seamounts(grid, [(0.0, 0.0)])
    shape = xr.full_like(load, 20e3)
    plate = gridflex.Plate(te=1.17 * shape)
    layers = CrustLayers(seafloor_depth=4500.0)
    w = gridflex.solve(load, plate)["deflection"]
    anomaly = linear_free_air(load, w, plate, layers)
    sigma = 0.05 * float(np.abs(anomaly).max())
    observed = anomaly + sigma * np.random.default_rng(11).standard_normal(anomaly.shape) + 3.0
    fit = fit_te_scale(
        observed,
        load,
        gridflex.Plate(te=shape),
        quantity="free_air_anomaly",
        gravity=layers,
        bounds=(0.3, 3.0),
    )
    assert fit.scale.low < 1.17 < fit.scale.high  # synthetic recovery (PHYSICS.md 8.1)
    assert abs(fit.offset - 3.0) < 5 * sigma / 64
    assert fit.model["free_air_anomaly"].attrs["units"] == "mGal"
    assert "first order" in fit.model.attrs["gravity_model"]


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda o, q, te: fit_te_margin(o, q, gridflex.Plate(te=te), LINE), "constant te"),
        (lambda o, q, te: fit_te_scale(o, q, gridflex.Plate(te=1e4)), "te is a grid"),
        (lambda o, q, te: fit_te_scale(o, q, gridflex.Plate(te=te * 0.0)), "0 everywhere"),
        (
            lambda o, q, te: fit_te_margin(
                o, q, gridflex.Plate(te=0.0), LINE, 0.0, line_shift_bounds=(-1e4, 1e4)
            ),
            "width must be at least two cells",
        ),
        (
            lambda o, q, te: fit_te_margin(
                o, q, gridflex.Plate(te=0.0), LINE, WIDTH, line_shift_bounds=(1e4, -1e4)
            ),
            "line_shift_bounds must satisfy low < high",
        ),
        (
            lambda o, q, te: fit_te_margin(o, q, gridflex.Plate(te=0.0), [(0.0, 0.0)]),
            "margin line",
        ),
        (
            lambda o, q, te: fit_te_margin(o, q, gridflex.Plate(te=0.0), LINE, samples=3),
            "samples must be",
        ),
        (
            lambda o, q, te: fit_te_margin(o, q, gridflex.Plate(te=0.0), LINE, broken=te[:5]),
            "broken",
        ),
        (
            lambda o, q, te: fit_te_scale(o, q, gridflex.Plate(te=te), bounds=(0.0, 2.0)),
            "bounds must satisfy",
        ),
        (
            lambda o, q, te: fit_te_scale(o, q, gridflex.Plate(te=te), edges="open"),
            "edges must be one of",
        ),
        (
            lambda o, q, te: gridflex.fit_te(o, q, gridflex.Plate(te=0.0), edges="clamped"),
            "edges must be one of 'infinite', 'periodic'",
        ),
    ],
)
def test_bad_arguments_are_refused_before_any_solve(margin, call, match):
    load, w, _ = margin
    te = xr.full_like(load, 20e3)
    with pytest.raises(InputError, match=match):
        call(w, load, te)
