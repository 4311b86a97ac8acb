"""Ice and ocean loads with floatation, and the bed's response to an ice history."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import InputError, Plate, bed_stress, grounded_mask, ice_response, viscous_response
from gridflex.synthetic import disc_height, empty_grid

RHO_I, RHO_W, RHO_M, G = 910.0, 1030.0, 3300.0, 9.81


def _series(field: xr.DataArray, times, scale=None) -> xr.DataArray:
    times = np.asarray(times, dtype=float)
    scale = np.ones(times.size) if scale is None else np.asarray(scale, dtype=float)
    values = scale[:, None, None] * field.values[None]
    return xr.DataArray(
        values, dims=("time", "y", "x"), coords={"time": times, "y": field.y, "x": field.x}
    )


def test_bed_stress_follows_floatation():
    # PHYSICS.md 7.1: sigma = g max(rho_i H, rho_w max(z_sl - b, 0)); floatation by
    # Archimedes' principle (common practice in ice-sheet modelling).
    thickness = np.array([1000.0, 300.0, 0.0, 0.0, 600.0])
    bed = np.array([100.0, -500.0, -500.0, 20.0, -500.0])
    sigma = bed_stress(thickness, bed, 0.0)
    expected = G * np.array([RHO_I * 1000, RHO_W * 500, RHO_W * 500, 0.0, RHO_I * 600])
    assert_allclose(sigma, expected, rtol=1e-15)
    # 300 m of ice over 500 m of water floats; 600 m (546 t/m2 > 515 t/m2) is grounded
    assert grounded_mask(thickness, bed).tolist() == [True, False, False, False, True]


def test_floating_ice_adds_no_load_beyond_its_displaced_water():
    # A floating shelf presses on the bed exactly like the water it displaces (Archimedes;
    # PHYSICS.md 7.1), so putting one over the ocean moves nothing.
    grid = empty_grid(48, 48, 20e3)
    bed = grid - 800.0  # ocean 800 m deep
    shelf = disc_height(grid, 200e3, 400.0)  # 400 m of ice: rho_i H = 364 t/m2 < 824 t/m2
    plate = Plate(te=30e3, infill_density=0.0)
    out = ice_response(_series(shelf, [0.0, 500.0, 5000.0]), bed, plate)
    assert_allclose(out.deflection.values, 0.0, atol=1e-12)
    assert_allclose(out["load"].values, 0.0, atol=1e-6)  # Pa
    assert out.grounded.values.max() == 0
    # the same ice thickened until it grounds does load the bed
    grounded = ice_response(_series(shelf * 3.0, [0.0, 500.0, 5000.0]), bed, plate)
    assert grounded.grounded.values[-1].sum() > 0
    assert grounded.deflection.values[-1].max() > 1.0


def test_sea_level_rise_floods_and_loads_the_ocean():
    # Water of depth h added over the ocean, Airy equilibrium with the water following the
    # depression: w = rho_w h / (rho_m - rho_w) (hydro-isostasy, common practice; Turcotte &
    # Schubert 2002, ch. 2 isostasy, from memory). Te = 0 gives the local response.
    grid = empty_grid(8, 8, 50e3)
    bed = grid - 2000.0
    ice = _series(grid, [0.0])
    plate = Plate(te=0.0, infill_density=0.0)
    rise = 10.0
    expected = RHO_W * rise / (RHO_M - RHO_W)
    start = ice_response(
        ice, bed, plate, sea_level=rise, model="relaxing", initial="equilibrium", edges="periodic"
    )
    # fixed-point tolerance 1e-6 m
    assert_allclose(start.deflection.values[0], expected, rtol=0, atol=1e-5)
    # through time with a sea-level series: the explicit-lag steps reach the same state
    times = np.arange(0.0, 60001.0, 250.0)
    levels = xr.DataArray(np.full(times.size, rise), dims="time", coords={"time": times})
    levels[0] = 0.0
    run = ice_response(
        _series(grid, times), bed, plate, sea_level=levels, model="relaxing", edges="periodic"
    )
    # the flooding water slows the approach to tau rho_m / (rho_m - rho_w) (both the model and
    # this lagged scheme): 60 kyr = 14 such times, so within 1e-5 of the equilibrium
    assert_allclose(run.deflection.values[-1], expected, rtol=1e-5)
    assert_allclose(run.sea_level.values, levels.values)


def test_grounded_ice_cap_on_land_reaches_airy_depth():
    # Airy isostasy of an ice load in air: w = rho_i H / rho_m (Turcotte & Schubert 2002,
    # ch. 2, from memory); the bed stays above sea level so no ocean enters.
    grid = empty_grid(8, 8, 50e3)
    bed = grid + 1500.0
    thickness = grid + 2000.0
    plate = Plate(te=0.0, infill_density=0.0)
    times = np.array([0.0, 1e5])
    out = ice_response(_series(thickness, times), bed, plate, model="relaxing", edges="periodic")
    assert_allclose(out.deflection.values[-1], RHO_I * 2000.0 / RHO_M, rtol=1e-9)
    assert_allclose(out.bed_elevation.values[-1], 1500.0 - RHO_I * 2000.0 / RHO_M, rtol=1e-9)


def test_on_high_land_the_ice_path_equals_the_plain_load_path():
    # With the bed far above sea level the load is rho_i g H (PHYSICS.md 7.1), so
    # ice_response and viscous_response must agree (common practice: same update).
    grid = empty_grid(40, 40, 25e3)
    bed = grid + 3000.0
    cap = disc_height(grid, 250e3, 1500.0)
    times = [0.0, 1000.0, 4000.0, 10000.0]
    scale = [0.2, 1.0, 0.7, 0.1]
    plate = Plate(te=50e3, infill_density=0.0)
    ice = ice_response(_series(cap, times, scale), bed, plate)
    plain = viscous_response(_series(cap * (RHO_I * G), times, scale), plate)
    assert_allclose(ice.deflection.values, plain.deflection.values, rtol=0, atol=1e-9)
    assert_allclose(ice.uplift_rate.values, plain.uplift_rate.values, rtol=0, atol=1e-12)


def test_ice_inputs_are_checked():
    grid = empty_grid(8, 8, 50e3)
    ice = _series(grid + 100.0, [0.0, 10.0])
    with pytest.raises(InputError, match="infill_density=0.0"):
        ice_response(ice, grid, Plate(te=10e3))  # default infill is sea water
    plate = Plate(te=10e3, infill_density=0.0)
    with pytest.raises(InputError, match="ice_thickness must be finite and >= 0"):
        ice_response(ice - 200.0, grid, plate)
    with pytest.raises(InputError, match="sea_level must be a number or a series of 2"):
        ice_response(ice, grid, plate, sea_level=[0.0, 1.0, 2.0])
    with pytest.raises(InputError, match="bed is not on the load grid"):
        ice_response(ice, empty_grid(8, 8, 40e3), plate)
    with pytest.raises(InputError, match="initial must be one of"):
        ice_response(ice, grid, plate, initial="relaxed", edges="periodic")


def test_sea_level_change_over_an_ocean_cut_by_the_grid_edge_warns():
    # An ocean reaching the grid edge loaded by sea-level change is a load that ends at the
    # edge on an infinite plate (PHYSICS.md 2.4): the user is told.
    from gridflex import EdgeLoadWarning

    grid = empty_grid(16, 16, 50e3)
    with pytest.warns(EdgeLoadWarning, match="grid edge"):
        ice_response(
            _series(grid, [0.0, 100.0]),
            grid - 500.0,
            Plate(te=20e3, infill_density=0.0),
            sea_level=5.0,
        )


def test_equilibrium_start_on_land_is_the_elastic_solution():
    # On land far above sea level the initial equilibrium is the elastic plate under
    # rho_i g H (PHYSICS.md 7.1 and 1.1): the solve() answer for the same plate.
    from gridflex import solve

    grid = empty_grid(48, 48, 25e3)
    bed = grid + 2000.0
    cap = disc_height(grid, 300e3, 2000.0)
    plate = Plate(te=60e3, infill_density=0.0)
    out = ice_response(
        _series(cap, [0.0, 10.0]), bed, plate, initial="equilibrium", edges="periodic"
    )
    expected = solve(cap * (RHO_I * G), plate, edges="periodic").deflection.values
    assert_allclose(out.deflection.values[0], expected, rtol=0, atol=1e-9 * expected.max())
    assert np.abs(out.uplift_rate.values[0]).max() < 1e-9  # nothing moves yet


def test_reference_ice_that_stays_puts_no_load():
    # Deflection is relative to the reference state (PHYSICS.md 7.1): ice equal to the
    # reference ice, even where it reaches the grid edge, changes nothing and warns of nothing.
    grid = empty_grid(16, 16, 50e3)
    sheet = grid + 1000.0
    out = ice_response(
        _series(sheet, [0.0, 500.0]),
        grid + 500.0,
        Plate(te=20e3, infill_density=0.0),
        reference_ice_thickness=sheet,
    )
    assert_allclose(out.deflection.values, 0.0, atol=1e-12)


@pytest.mark.parametrize("interpolation", ["linear", "previous"])
def test_sub_steps_change_nothing_without_an_ocean(interpolation):
    # Exact steps (PHYSICS.md 7.3): splitting an interval of a load that is linear (or held)
    # in it gives the same result when the load does not depend on the bed (round-off).
    grid = empty_grid(32, 32, 40e3)
    cap = disc_height(grid, 250e3, 1500.0)
    ice = _series(cap, [0.0, 3000.0, 4000.0], [0.0, 1.0, 0.3])
    plate = Plate(te=40e3, infill_density=0.0)
    one = ice_response(ice, grid + 3000.0, plate, interpolation=interpolation)
    split = ice_response(ice, grid + 3000.0, plate, interpolation=interpolation, max_step=250.0)
    assert_allclose(split.deflection.values, one.deflection.values, rtol=0, atol=1e-9)


def test_sub_steps_reduce_the_flooding_lag():
    # With the ocean following the bed, shorter steps approach the continuous solution:
    # local plate (Te = 0), relaxing model, sea-level rise h at t = 0 from rest gives
    # w = w_inf (1 - exp(-t / tau_eff)), w_inf = rho_w h / (rho_m - rho_w),
    # tau_eff = tau rho_m / (rho_m - rho_w) (the linear ODE; common practice).
    grid = empty_grid(8, 8, 50e3)
    times = np.array([0.0, 3000.0])
    levels = xr.DataArray([10.0, 10.0], dims="time", coords={"time": times})
    plate = Plate(te=0.0, infill_density=0.0)
    tau_eff = 3000.0 * RHO_M / (RHO_M - RHO_W)
    exact = RHO_W * 10.0 / (RHO_M - RHO_W) * (1 - np.exp(-3000.0 / tau_eff))
    errors = []
    for max_step in (None, 300.0, 30.0):
        out = ice_response(
            _series(grid, times),
            grid - 2000.0,
            plate,
            sea_level=levels,
            model="relaxing",
            edges="periodic",
            max_step=max_step,
        )
        errors.append(abs(float(out.deflection[-1, 0, 0]) - exact))
    assert errors[0] > errors[1] > errors[2]
    # first order in the step: 30-yr steps within 1 % of the exact value
    assert errors[2] < 0.01 * exact


def test_sea_level_series_on_its_own_times():
    # the documented rule: linear in time between the series' times, never extrapolated
    from gridflex.glacial.ice import sea_level_at

    series = xr.DataArray(
        [-120.0, -60.0, 0.0], dims="time", coords={"time": [-20000.0, -10000.0, 0.0]}
    )
    assert_allclose(sea_level_at(series, [-20000.0, -12500.0, 0.0]), [-120.0, -75.0, 0.0])
    with pytest.raises(InputError, match=r"sea: the series covers -20000 to 0 years .* to 100"):
        sea_level_at(series, [-100.0, 100.0], "sea")
    with pytest.raises(InputError, match=r"sea: 1 missing \(NaN or fill\) value"):
        sea_level_at(series.where(series < 0), [-100.0], "sea")
    with pytest.raises(InputError, match=r"sea: the times of the sea-level series must increase"):
        sea_level_at(series.isel(time=[2, 1, 0]), [-100.0], "sea")
    # ice_response takes such a series as it is (Te = 0 keeps the run short)
    grid = empty_grid(4, 4, 50e3)
    ice = _series(grid, [-15000.0, -5000.0])
    out = ice_response(
        ice, grid - 1000.0, Plate(te=0.0, infill_density=0.0), series, edges="periodic"
    )
    assert_allclose(out.sea_level.values, [-90.0, -30.0])
