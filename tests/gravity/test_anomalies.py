"""Free-air and Bouguer anomalies of flexure results (PHYSICS.md 6.3, 6.4)."""

import math

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import (
    Infill,
    InputError,
    Plate,
    interface_gravity,
    load_from_elevation,
    model_free_air_anomaly,
    model_gravity,
    solve,
    solve_with_infill,
)
from gridflex.constants import DEFAULT_GRAVITY, GRAVITATIONAL_CONSTANT, MGAL

G = DEFAULT_GRAVITY
TWO_PI_G = 2.0 * math.pi * GRAVITATIONAL_CONSTANT / MGAL
RHO_W, RHO_C, RHO_M, T_C = 1030.0, 2800.0, 3300.0, 6000.0


@pytest.mark.parametrize("mode", [2, 4, 8, 16])
def test_linear_admittance_of_compensated_topography(mode):
    # Small sinusoidal topography H of crustal density on a plate whose deflection is filled
    # with crust: free-air admittance Z(k) = 2 pi G (rho_c - rho_w) e^{-kd} [1 - Phi_e(k)
    # e^{-k t_c}], Phi_e = 1/(1 + D k^4/((rho_m - rho_c) g)) (McKenzie & Bowin 1976, JGR 81;
    # Watts 2001, ch. 5; both from memory; re-derived in PHYSICS.md 6.3). H = 10 m keeps the
    # non-linear terms below 1e-5 relative; tolerance 1e-5.
    n, dx, d = 128, 2e3, 4000.0
    x = np.arange(n) * dx
    X, _ = np.meshgrid(x, x)
    k = 2 * math.pi * mode / (n * dx)
    coords = {"y": x, "x": x}
    topo = xr.DataArray(10.0 * np.cos(k * X), dims=("y", "x"), coords=coords)
    plate = Plate(
        te=10e3,
        youngs_modulus=70e9,
        infill_density=RHO_C,
        crust_density=RHO_C,
        crust_thickness=T_C,
        mantle_density=RHO_M,
    )
    result = solve((RHO_C - RHO_W) * G * topo, plate, edges="periodic")
    gravity = model_gravity(
        result,
        reference_surface=-d,
        load_height=topo,
        load_density=RHO_C,
        edges="periodic",
        terms=4,
    )
    amplitude = 2.0 * float((gravity["free_air_anomaly"].values * np.cos(k * X)).mean())
    phi = 1.0 / (1.0 + float(plate.rigidity) * k**4 / ((RHO_M - RHO_C) * G))
    z = TWO_PI_G * (RHO_C - RHO_W) * math.exp(-k * d) * (1.0 - phi * math.exp(-k * T_C))
    assert_allclose(amplitude / 10.0, z, rtol=1e-5)


def flat_case(n=32, dx=4e3, depth=4000.0):
    x = np.arange(n) * dx
    coords = {"y": x, "x": x}
    zero = xr.DataArray(np.zeros((n, n)), dims=("y", "x"), coords=coords)
    ds = load_from_elevation(zero - depth, 2800.0, -depth)
    return ds


def test_flat_seafloor_bouguer():
    # No load: free-air 0; Bouguer = free-air + 2 pi G (rho_B - rho_w) d (PHYSICS.md 6.4,
    # Bouguer slab correction at sea; common practice). Periodic: an exact infinite slab.
    ds = flat_case()
    result = solve_with_infill(ds, Plate(te=10e3), edges="periodic")
    gravity = model_gravity(result, edges="periodic")
    assert_allclose(gravity["free_air_anomaly"].values, 0.0, atol=1e-9)
    assert_allclose(
        gravity["bouguer_anomaly"].values, TWO_PI_G * (2670.0 - RHO_W) * 4000.0, rtol=1e-10
    )


def island_result(sediment="none", n=96, dx=3e3):
    x = dx * (np.arange(n) - n // 2)
    X, Y = np.meshgrid(x, x)
    h = np.clip(3500.0 * (1.0 - np.hypot(X, Y) / 30e3), 0.0, None)
    elevation = xr.DataArray(-4500.0 + h, dims=("y", "x"), coords={"y": x, "x": x})
    loads = load_from_elevation(elevation, 2800.0, -4500.0)
    rule = Infill() if sediment == "none" else Infill(sediment="to_level", sediment_level=-4300.0)
    plate = Plate(te=15e3, youngs_modulus=70e9, crust_density=RHO_C, crust_thickness=T_C)
    return solve_with_infill(loads, plate, infill=rule, tolerance=1e-5), loads, plate


def test_infill_result_matches_plain_solve_result():
    # Deep-water seamount: the infill result (water fill) and the plain solve with infill
    # density = water describe the same column, so their model anomalies must agree (the
    # two code paths of model_gravity; common practice). Tolerance 1e-4 mGal.
    result, loads, plate = island_result()
    linear = solve(loads["load"], plate.with_te(15e3))
    a = model_gravity(result)
    b = model_gravity(
        linear,
        reference_surface=loads["reference_surface"],
        load_height=loads["load_height"],
        load_density=2800.0,
    )
    assert_allclose(a["free_air_anomaly"].values, b["free_air_anomaly"].values, atol=1e-4)
    assert_allclose(a["bouguer_anomaly"].values, b["bouguer_anomaly"].values, atol=1e-4)


def test_seamount_anomaly_shape():
    # Flexurally compensated seamount: a free-air high over the edifice flanked by a low over
    # the moat (Watts 2001, Isostasy and Flexure of the Lithosphere, ch. 5, from memory).
    result, _, _ = island_result(sediment="level")
    gravity = model_gravity(result)
    fa = gravity["free_air_anomaly"].values
    n = fa.shape[0]
    assert fa[n // 2, n // 2] > 50.0
    assert fa[n // 2, n // 2 + 12] < 0.0  # 36 km out: over the moat
    free_air = model_free_air_anomaly(result)
    assert_allclose(free_air.values, fa)
    assert free_air.attrs["units"] == "mGal"
    assert "gravity_crust_thickness" in free_air.attrs


def test_bouguer_with_load_density_is_the_deflected_interfaces():
    # With the reduction density equal to the load and crust density, the Bouguer anomaly of
    # a compensated load is the anomaly of the deflected interfaces only (PHYSICS.md 6.4; Watts
    # 2001, ch. 5, from memory): here the Moho (rho_m - rho_c) at d + t_c, plus the constant
    # water-layer correction 2 pi G (rho_B - rho_w) d of the regional depth d (slab).
    result, _, _ = island_result()
    bouguer = model_gravity(result, bouguer_density=RHO_C)["bouguer_anomaly"].values
    moho = interface_gravity(-result["deflection"], RHO_M - RHO_C, 4500.0 + T_C, terms=6)
    expected = moho.values + TWO_PI_G * (RHO_C - RHO_W) * 4500.0
    # Same interfaces, same series, same padding: the identity holds to round-off (the
    # load and crust terms cancel the Bouguer topography term exactly).
    assert_allclose(bouguer, expected, atol=1e-9 * np.abs(moho.values).max())
    n = bouguer.shape[0]
    assert bouguer[n // 2, n // 2] < bouguer[n // 2, 3]  # Bouguer low over the load


def test_sediment_filled_basin_is_compensated():
    # A wide basin (here periodic, uniform) of 500 m water filled with sediment to sea level
    # in isostatic equilibrium: its free-air anomaly vanishes (Airy compensation: the fill's
    # mass excess equals the mantle's deficit; Turcotte & Schubert 2002, ch. 5, from memory),
    # which only holds if the fill enters with its own density. Tolerance: round-off.
    n = 16
    x = np.arange(n) * 5e3
    zero = xr.DataArray(np.zeros((n, n)), dims=("y", "x"), coords={"y": x, "x": x})
    rule = Infill(sediment="to_level", sediment_level=0.0, fill_existing=True)
    plate = Plate(te=20e3, mantle_density=RHO_M, crust_density=RHO_C, crust_thickness=T_C)
    result = solve_with_infill(zero, plate, zero - 500.0, rule, edges="periodic", tolerance=1e-9)
    assert float(result["fill_sediment"].min()) > 1000.0
    gravity = model_gravity(
        result,
        reference_surface=-500.0,
        load_height=zero,
        edges="periodic",
        observation_height=10.0,
    )
    assert_allclose(gravity["free_air_anomaly"].values, 0.0, atol=1e-6)
    # the same fill counted as water would leave a large anomaly: the check has teeth
    result.attrs["infill_sediment_density"] = RHO_W
    wrong = model_gravity(
        result,
        reference_surface=-500.0,
        load_height=zero,
        edges="periodic",
        observation_height=10.0,
    )
    assert float(np.abs(wrong["free_air_anomaly"]).min()) > 10.0


def test_bad_input():
    result, loads, _ = island_result(n=32, dx=6e3)
    with pytest.raises(InputError, match="observation_height"):
        model_gravity(result, observation_height=-5000.0)
    bare = solve(loads["load"], Plate(te=10e3))
    with pytest.raises(InputError, match="reference_surface"):
        model_gravity(bare)
    with pytest.raises(InputError, match="load_density"):
        model_gravity(bare, reference_surface=-4500.0, load_height=loads["load_height"])
    with pytest.raises(InputError, match="deflection"):
        model_gravity(xr.Dataset())


def test_buried_load_gravity_is_the_whole_load_column():
    # A buried load's column (observed top, base sunk by w) is the same mass as a load of
    # height h_obs + w standing on the sunk reference surface with water around it
    # (PHYSICS.md 1.3 b and 6.3, same interfaces written two ways). The two sums differ only
    # by series truncation (2e-4 mGal at 6 terms); with 10 terms, tolerance 1e-5 mGal.
    x = 3e3 * (np.arange(64) - 32)
    X, Y = np.meshgrid(x, x)
    h = np.clip(2000.0 * (1.0 - np.hypot(X, Y) / 40e3), 0.0, None)
    elevation = xr.DataArray(-5000.0 + h, dims=("y", "x"), coords={"y": x, "x": x})
    loads = load_from_elevation(elevation, 2800.0, -5000.0)
    plate = Plate(te=10e3, youngs_modulus=70e9)
    buried = solve_with_infill(loads, plate, infill=Infill(load_buried=True), tolerance=1e-7)
    a = model_gravity(buried, terms=10)
    whole = buried.drop_vars("load_root")
    whole["load_height"] = buried["load_height"] + buried["load_root"]
    b = model_gravity(whole, terms=10)
    assert float(np.abs(a["free_air_anomaly"]).max()) > 50.0
    assert_allclose(a["free_air_anomaly"].values, b["free_air_anomaly"].values, atol=1e-5)
    assert_allclose(a["bouguer_anomaly"].values, b["bouguer_anomaly"].values, atol=1e-5)
