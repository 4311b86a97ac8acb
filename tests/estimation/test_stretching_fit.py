"""Tests of fitting the stretching factor to tectonic subsidence through time."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

import gridflex
from gridflex import Plate, fit_stretching
from gridflex.basin import Stage, Stretching, StretchingModel, mckenzie_subsidence, stage_loading
from gridflex.basin.backstrip import backstrip
from gridflex.errors import InputError
from gridflex.estimation.likelihood import OpenIntervalWarning
from gridflex.estimation.stretching_fit import TABLE_SIZE, _ModelTable
from tests.basin.grids import TOL, flat, lens
from tests.basin.test_staging_stretching import beta_grid

RIFT = 60e6
AGES = [55e6, 45e6, 30e6, 15e6, 0.0]


def _backstripped(out, plate):
    """Tectonic subsidence of each stage from the forward model's own column (flexural
    backstrip, Steckler & Watts 1978), on (stage, y, x) with the age coordinate."""
    steps = []
    for k in range(out.sizes["stage"]):
        stage = out.isel(stage=k)
        back = backstrip(
            None,
            stage["sediment_thickness"],
            stage["water_depth"],
            plate,
            sediment_density=stage["sediment_density"],
            edges="periodic",
        )
        steps.append(back["tectonic_subsidence"])
    return xr.concat(steps, dim="stage").assign_coords(age=out["age"])


def test_beta_recovered_per_cell_from_a_local_forward_model():
    # issue 18 target: beta within 2 % from a forward model's tectonic subsidence; the
    # forward model (te = 0, compacting shale, water infill) over a rift of varying beta
    # is backstripped with its own columns and each cell fitted (McKenzie 1978 model,
    # the plate's rho_m and the basin's rho_w)
    plate = Plate(te=0.0)
    beta = beta_grid()
    stages = [Stage(lens(250.0 * (i + 1)), age, "shale") for i, age in enumerate(AGES)]
    out = stage_loading(
        stages, flat(0.0), plate, tolerance=TOL, edges="periodic", stretching=Stretching(beta, RIFT)
    )
    tectonic = _backstripped(out, plate)
    model = StretchingModel(mantle_density=plate.mantle_density, water_density=1030.0)
    stretched = beta.values > 1.05  # beta near 1 hits the search bound
    fit = fit_stretching(tectonic.where(stretched), None, RIFT, model=model)
    got = fit["stretching_factor"].values
    assert fit["stretching_factor"].dims == ("y", "x")
    assert np.isnan(got[~stretched]).all() and int(fit["data_count"].values[0, 0]) == 0
    assert_allclose(got[stretched], beta.values[stretched], rtol=0.02)
    assert_allclose(got[stretched], beta.values[stretched], rtol=1e-9)  # seen: 4e-14


def test_beta_recovered_from_a_flexural_forward_model():
    # te = 20 km, uniform beta, a sediment lens below sea level: the flexural backstrip
    # of each stage removes the flexed sediment load and leaves the rift's tectonic subsidence
    # (superposition, Watts, Karner & Steckler 1982); beta within 2 % at every cell
    plate = Plate(te=20e3)
    stages = [Stage(lens(300.0 * (i + 1)), age, "sandstone") for i, age in enumerate(AGES)]
    out = stage_loading(
        stages,
        flat(-600.0),
        plate,
        tolerance=TOL,
        edges="periodic",
        stretching=Stretching(1.7, RIFT),
    )
    assert float(out["water_depth"].min()) > 0.0  # submerged: the backstrip's water column
    tectonic = _backstripped(out, plate) - 600.0  # pre-rift surface 600 m below sea level
    model = StretchingModel(mantle_density=plate.mantle_density, water_density=1030.0)
    fit = fit_stretching(tectonic, None, RIFT, model=model)
    assert_allclose(fit["stretching_factor"], 1.7, rtol=0.02)
    assert_allclose(fit["stretching_factor"], 1.7, rtol=1e-9)  # seen: 9e-13


def test_wells_with_noise_offset_and_interval():
    # three pseudo-wells with known noise (sigma = 15 m): the truth lies inside each 95 %
    # profile-likelihood interval (PHYSICS.md 8.1; chi2_1 sigma^2 with sigma known) and
    # beta is within 2 %; a pre-rift surface 250 m deep is fitted as the offset
    rng = np.random.default_rng(3)
    ages = np.linspace(58e6, 0.0, 12)
    truth = np.array([1.4, 2.0, 3.0])
    curves = mckenzie_subsidence(truth, RIFT - ages)["total_subsidence"].values
    data = xr.DataArray(
        curves + 250.0 + rng.normal(0.0, 15.0, curves.shape),
        dims=("well", "step"),
        coords={"well": ["A", "B", "C"], "age": ("step", ages)},
    )
    fit = fit_stretching(data, None, RIFT, sigma=15.0, fit_offset=True)
    assert list(fit["well"].values) == ["A", "B", "C"]
    beta = fit["stretching_factor"].values
    assert_allclose(beta, truth, rtol=0.02)
    assert np.all(fit["stretching_factor_lower"].values < truth)
    assert np.all(truth < fit["stretching_factor_upper"].values)
    assert_allclose(fit["offset"], 250.0, atol=60.0)  # trades off with S_i; seen 42 m
    assert fit.attrs["sigma"] == 15.0


def test_interval_is_where_the_misfit_rises_by_the_threshold():
    # the definition of the profile-likelihood bound (PHYSICS.md 8.1): RSS at each end
    # exceeds RSS_min by chi2_1(0.95) s^2, s^2 = RSS_min / (n - 1); recomputed here from
    # the model directly (not the fit's spline)
    rng = np.random.default_rng(7)
    ages = np.linspace(55e6, 0.0, 8)
    data = mckenzie_subsidence(2.5, RIFT - ages)["total_subsidence"].values
    data = data + rng.normal(0.0, 25.0, data.shape)
    fit = fit_stretching(data, ages, RIFT)

    def rss(beta):
        model = mckenzie_subsidence(beta, RIFT - ages)["total_subsidence"].values
        return float(np.sum((data - model) ** 2))

    rss_min = float(fit["rss"])
    assert rss(float(fit["stretching_factor"])) == pytest.approx(rss_min, rel=1e-9)
    threshold = 3.841458820694124 * rss_min / (ages.size - 1)  # chi2_1(0.95)
    for end in ("stretching_factor_lower", "stretching_factor_upper"):
        assert rss(float(fit[end])) - rss_min == pytest.approx(threshold, rel=1e-6)


def test_model_table_matches_the_model():
    # the cubic spline in x = 1 - 1/beta behind the fit against direct evaluation
    # (common practice: interpolation checked at points between the nodes); seen 9e-10 m
    model = StretchingModel()
    times = np.array([0.0, 1e5, 2e6, 30e6, 200e6])
    table = _ModelTable(model, times, 0.0, 0.9)
    x = np.random.default_rng(0).uniform(0.0, 0.9, 500)
    beta = 1.0 / (1.0 - x)
    direct = model.initial_subsidence(beta)[:, None] + model.thermal_subsidence(beta, times)
    assert table.x.size == TABLE_SIZE
    value, slope = table(x)
    assert_allclose(value.T, direct, atol=1e-6)
    step = 1e-6  # the slope against a central difference of the model (seen 7e-6 m)
    up = model.initial_subsidence(1 / (1 - x - step))[:, None] + model.thermal_subsidence(
        1 / (1 - x - step), times
    )
    down = model.initial_subsidence(1 / (1 - x + step))[:, None] + model.thermal_subsidence(
        1 / (1 - x + step), times
    )
    assert_allclose(slope.T, (up - down) / (2 * step), atol=1e-3)


def test_refusals_and_open_intervals():
    ages = [50e6, 20e6, 0.0]
    curve = mckenzie_subsidence(1.0, [10e6, 40e6, 60e6])["total_subsidence"].values
    with pytest.warns(OpenIntervalWarning, match="lower search bound"):
        fit = fit_stretching(curve, ages, RIFT)
    assert float(fit["stretching_factor_lower"]) == 1.0
    with pytest.raises(InputError, match="ages must have one value per time step \\(3\\)"):
        fit_stretching(curve, ages[:2], RIFT)
    with pytest.raises(InputError, match="bounds must satisfy 1 <= low"):
        fit_stretching(curve, ages, RIFT, bounds=(0.5, 4.0))
    with pytest.raises(InputError, match="infinite"):
        fit_stretching([1.0, np.inf, 2.0], ages, RIFT)
    with pytest.raises(InputError, match="ages must be given"):
        fit_stretching(curve, None, RIFT)
    with pytest.raises(InputError, match="confidence"):
        fit_stretching(curve, ages, RIFT, confidence=1.5)
    assert gridflex.fit_stretching is fit_stretching
