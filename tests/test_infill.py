"""Self-consistent infill (PHYSICS.md section 5)."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import (
    ConvergenceError,
    Infill,
    InputError,
    Plate,
    solve,
    solve_with_infill,
)
from gridflex.infill import spectral_inner

G = 9.81
RHO_W, RHO_S, RHO_R, RHO_M = 1030.0, 2400.0, 2800.0, 3300.0


def cone_case(n=128, dx=2e3, height=2000.0, radius=30e3, seafloor=-5000.0):
    """A submarine cone on a flat seafloor: load (Pa) and initial surface (m)."""
    x = dx * (np.arange(n) - n // 2)
    X, Y = np.meshgrid(x, x)
    h = np.clip(height * (1.0 - np.hypot(X, Y) / radius), 0.0, None)
    coords = {"y": x, "x": x}
    load = xr.DataArray((RHO_R - RHO_W) * G * h, dims=("y", "x"), coords=coords)
    surface = xr.DataArray(seafloor + h, dims=("y", "x"), coords=coords)
    return load, surface


PLATE = Plate(te=10e3, youngs_modulus=70e9, mantle_density=RHO_M)


def test_water_filled_moat_equals_water_infill_solution():
    # Deep sea, nothing emerges: every cell's fill is water, so the self-consistent solution
    # is the linear one with infill density = water (PHYSICS.md eq. 1.8; Turcotte & Schubert
    # 2002, Geodynamics, ch. 3, restoring force (rho_m - rho_w) g w). Tolerance: 10x the
    # iteration tolerance (the fixed-point error is below tol / (1 - 0.19)).
    load, surface = cone_case()
    result = solve_with_infill(load, PLATE, surface, Infill(), tolerance=1e-5)
    linear = solve(load, PLATE.with_te(10e3))
    assert_allclose(result["deflection"].values, linear["deflection"].values, atol=1e-4)
    assert_allclose(result["fill_water"].values, result["deflection"].values, atol=1e-4)
    assert np.all(result["infill_density"].values == RHO_W)


def test_full_sediment_fill_local_limit_equals_sediment_infill():
    # Te = 0 (local Airy isostasy): with the moat fully sediment-filled every cell restores with
    # (rho_m - rho_s) g, exactly the linear solution with infill density = sediment
    # (PHYSICS.md eq. 1.8; Watts 2001, Isostasy and Flexure of the Lithosphere, ch. 3).
    load, surface = cone_case(n=64)
    plate0 = Plate(te=0.0, mantle_density=RHO_M)
    result = solve_with_infill(load, plate0, surface, Infill(sediment="full"), tolerance=1e-8)
    expected = load.values / ((RHO_M - RHO_S) * G)
    assert_allclose(result["deflection"].values, expected, rtol=1e-9, atol=1e-8)
    assert_allclose(result["surface"].values, surface.values, atol=1e-8)


def test_full_sediment_fill_is_sediment_infill_except_the_bulge():
    # Fully sediment-filled moat with flexure: where the plate goes down the fill is sediment,
    # so the solution is the linear one with infill density = sediment (PHYSICS.md eq. 1.8)
    # for the load plus the one correction the column model makes: the rising forebulge
    # displaces water, not sediment (PHYSICS.md 5.1). Periodic domain so that both solves see
    # the same plate. Tolerance: 20x the iteration tolerance.
    load, surface = cone_case()
    result = solve_with_infill(
        load, PLATE, surface, Infill(sediment="full"), edges="periodic", tolerance=1e-6
    )
    w = result["deflection"].values
    assert w.min() < -1.0  # there is a forebulge, so the correction is exercised
    sediment_plate = Plate(te=10e3, youngs_modulus=70e9, mantle_density=RHO_M, infill_density=RHO_S)
    corrected = load + (RHO_W - RHO_S) * G * np.minimum(w, 0.0)
    linear = solve(corrected, sediment_plate, edges="periodic")
    assert_allclose(w, linear["deflection"].values, atol=2e-5)
    moat = w > 0
    assert_allclose(result["fill_sediment"].values[moat], w[moat], atol=1e-9)
    assert np.all(result["infill_density"].values[moat] == RHO_S)


def test_sediment_to_sea_level_in_a_basin():
    # Uniform basin of water depth d = 500 m filled with sediment to sea level: local balance
    # gives w = d (rho_s - rho_w)/(rho_m - rho_s) = 761.111 m and sediment S = d (rho_m -
    # rho_w)/(rho_m - rho_s) = 1261.111 m (Airy backstripping relation, Steckler & Watts 1978,
    # EPSL 41, from memory; PHYSICS.md 5.3). A uniform load on a periodic plate has no
    # flexural term (k = 0 only), so te = 20 km must give the same. Tolerance 1e-6 m.
    n = 16
    x = np.arange(n) * 5e3
    zero = xr.DataArray(np.zeros((n, n)), dims=("y", "x"), coords={"y": x, "x": x})
    rule = Infill(sediment="to_level", sediment_level=0.0, fill_existing=True)
    for te in (0.0, 20e3):
        result = solve_with_infill(
            zero,
            Plate(te=te, mantle_density=RHO_M),
            zero - 500.0,
            rule,
            edges="periodic",
            tolerance=1e-8,
        )
        assert_allclose(result["deflection"].values, 500.0 * 1370.0 / 900.0, atol=1e-6)
        assert_allclose(result["fill_sediment"].values, 500.0 * 2270.0 / 900.0, atol=1e-6)
        assert_allclose(result["surface"].values, 0.0, atol=1e-6)


def test_flooding_of_a_subaerial_depression():
    # Te = 0, a column at elevation e = 200 m loaded by q: it sinks in air while q/(rho_m g) <=
    # e, and once below sea level water floods it: w = (q - rho_w g e)/((rho_m - rho_w) g)
    # (PHYSICS.md 5.3 [C], derived from local isostasy with the column of eq. 5.1).
    n = 8
    x = np.arange(n) * 1e3
    coords = {"y": x, "x": x}
    q = np.zeros((n, n))
    q[:, :4] = RHO_M * G * 150.0  # stays above sea level
    q[:, 4:] = RHO_M * G * 500.0  # would reach 300 m below sea level without water
    load = xr.DataArray(q, dims=("y", "x"), coords=coords)
    surface = xr.DataArray(np.full((n, n), 200.0), dims=("y", "x"), coords=coords)
    result = solve_with_infill(
        load, Plate(te=0.0, mantle_density=RHO_M), surface, edges="periodic", tolerance=1e-9
    )
    w = result["deflection"].values
    assert_allclose(w[:, :4], 150.0, rtol=1e-9)
    assert_allclose(w[:, 4:], (q[0, 5] - RHO_W * G * 200.0) / ((RHO_M - RHO_W) * G), rtol=1e-9)
    assert np.all(result["infill_density"].values[:, :4] == 0.0)
    assert np.all(result["infill_density"].values[:, 4:] == RHO_W)


def emergent_island(n=128, dx=2e3):
    """Island rising 600 m above sea level from a 4000 m deep seafloor."""
    x = dx * (np.arange(n) - n // 2)
    X, Y = np.meshgrid(x, x)
    h = np.clip(4600.0 * (1.0 - np.hypot(X, Y) / 40e3), 0.0, None)
    coords = {"y": x, "x": x}
    sub = np.minimum(h, 4000.0)
    q = G * ((RHO_R - RHO_W) * sub + RHO_R * (h - sub))
    return (
        xr.DataArray(q, dims=("y", "x"), coords=coords),
        xr.DataArray(-4000.0 + h, dims=("y", "x"), coords=coords),
    )


@pytest.mark.parametrize("acceleration", ["anderson", "none"])
def test_iteration_converges_and_keeps_force_balance(acceleration):
    # Nonlinear case (emergent island, sediment to 3500 m depth, water above): the iteration
    # must reach its tolerance and keep the global force balance sum(rho_m g w) = sum(L)
    # (PHYSICS.md 2.3: exact at k = 0 for the FFT inner solve; residual left by the stopping
    # tolerance only, relative 1e-6 stated here).
    load, surface = emergent_island()
    rule = Infill(sediment="to_level", sediment_level=-3500.0)
    result = solve_with_infill(
        load, PLATE, surface, rule, acceleration=acceleration, tolerance=1e-4
    )
    assert result.attrs["fixed_point_update"] < 1e-4
    assert 1 <= result.attrs["iterations"] < 60
    assert result.attrs["force_balance_residual"] < 1e-6
    # sediment only below the level, never on the forebulge
    assert np.all(result["fill_sediment"].values >= 0.0)
    top = result["surface"].values
    filled = result["fill_sediment"].values > 0
    assert filled.any()
    assert np.all(top[filled] <= -3500.0 + 1e-6)
    assert_allclose(
        result["surface"].values,
        surface.values - result["deflection"].values + result["fill_sediment"].values,
        atol=1e-9,
    )


def test_anderson_and_plain_iteration_agree():
    # Two iteration schemes for one fixed point (common practice: the answer must not depend
    # on the solver); tolerance 1e-6 m each, compared to 1e-5 m.
    load, surface = emergent_island(n=96)
    rule = Infill(sediment="full")
    a = solve_with_infill(load, PLATE, surface, rule, acceleration="anderson", tolerance=1e-7)
    b = solve_with_infill(load, PLATE, surface, rule, acceleration="none", tolerance=1e-7)
    assert_allclose(a["deflection"].values, b["deflection"].values, atol=1e-5)
    assert a.attrs["iterations"] < b.attrs["iterations"]


def test_shift_equal_to_sediment_density_diverges():
    # PHYSICS.md 5.2: the shift c = rho_f ("solve with the infill density and correct") has a
    # contraction bound rho_s/(rho_m - rho_s) = 2.7 > 1 for sediment and was seen to diverge;
    # the solver must say so instead of returning a grid.
    load, surface = cone_case(n=64)
    with pytest.raises(ConvergenceError, match="did not converge"):
        solve_with_infill(
            load,
            PLATE,
            surface,
            Infill(sediment="full"),
            shift=RHO_S,
            acceleration="none",
            max_iterations=40,
        )


def test_pluggable_inner_solver():
    # The inner solve is replaceable (for a variable-te operator later): the FFT inner solver
    # passed explicitly must give the default result (same operator, common practice).
    load, surface = cone_case(n=64)
    spec_args = {}

    def inner(stiffness, min_stiffness):
        from gridflex.grid import check_grid

        spec_args["k0"] = stiffness
        return spectral_inner(check_grid(load), float(PLATE.rigidity), stiffness, min_stiffness)

    a = solve_with_infill(load, PLATE, surface, Infill(sediment="full"), inner=inner)
    b = solve_with_infill(load, PLATE, surface, Infill(sediment="full"))
    assert_allclose(a["deflection"].values, b["deflection"].values, atol=1e-12)
    assert_allclose(spec_args["k0"], (RHO_M - RHO_S / 2) * G)


def test_outputs_and_progress():
    load, surface = emergent_island(n=64, dx=3e3)
    calls = []
    result = solve_with_infill(
        load,
        PLATE,
        surface,
        Infill(sediment="to_level", sediment_level=-3800.0),
        progress=lambda i, n: calls.append(i),
    )
    assert calls == list(range(1, result.attrs["iterations"] + 1))
    for name, unit in (
        ("moat_fill", "m"),
        ("surface", "m"),
        ("infill_density", "kg m-3"),
        ("fill_load", "Pa"),
        ("deflection", "m"),
    ):
        assert result[name].attrs["units"] == unit
    assert np.all(result["moat_fill"].values >= 0)
    assert set(np.unique(result["infill_density"].values)) <= {0.0, RHO_W, RHO_S}
    assert result.attrs["infill_sediment"] == "to_level"


def test_bad_input():
    load, surface = cone_case(n=32)
    with pytest.raises(InputError, match="sediment must be one of"):
        Infill(sediment="half")
    with pytest.raises(InputError, match="needs sediment_level"):
        Infill(sediment="to_level")
    with pytest.raises(InputError, match="initial_surface"):
        solve_with_infill(load, PLATE)
    with pytest.raises(InputError, match="shift must be"):
        solve_with_infill(load, PLATE, surface, shift=RHO_M)
    with pytest.raises(InputError, match="less than mantle_density"):
        solve_with_infill(load, PLATE, surface, Infill(sediment="full", sediment_density=3400.0))
    te_grid = xr.full_like(load, 10e3)
    with pytest.raises(InputError, match="method='spectral' needs a constant te"):
        solve_with_infill(load, PLATE.with_te(te_grid), surface, method="spectral")
    with pytest.raises(InputError, match="in-plane forces are not available"):
        solve_with_infill(load, PLATE.with_te(te_grid), surface, inplane_force_x=-1e12)
    with pytest.raises(InputError, match="edges='clamped' needs method='finite-difference'"):
        solve_with_infill(load, PLATE, surface, edges="clamped", method="spectral")
    with pytest.raises(InputError, match="te grid"):
        solve_with_infill(load, PLATE.with_te(te_grid.isel(x=slice(1, None))), surface)


def test_sediment_mask_limits_where_sediment_collects():
    # Sediment only where the mask allows (scenario choice); elsewhere the moat holds water,
    # so the column there restores with water (PHYSICS.md 5.1). Tolerance: exact zeros.
    load, surface = cone_case(n=64)
    mask = load["x"] < 0.0
    mask = (xr.ones_like(load, dtype=bool) & mask).transpose("y", "x")
    result = solve_with_infill(load, PLATE, surface, Infill(sediment="full", sediment_mask=mask))
    sediment = result["fill_sediment"].values
    west = mask.values
    assert sediment[~west].max() == 0.0
    assert sediment[west].max() > 10.0
    moat = result["deflection"].values > 1.0
    assert np.all(result["infill_density"].values[moat & ~west] == RHO_W)
    assert np.all(result["infill_density"].values[moat & west] == RHO_S)


def buried_case(n=64, dx=3e3, te=0.0):
    """Observed edifice 2 km high on a 5 km deep sea floor, read as a buried load."""
    from gridflex import load_from_elevation

    x = dx * (np.arange(n) - n // 2)
    X, Y = np.meshgrid(x, x)
    h = np.clip(2000.0 * (1.0 - np.hypot(X, Y) / 40e3), 0.0, None)
    elevation = xr.DataArray(-5000.0 + h, dims=("y", "x"), coords={"y": x, "x": x})
    loads = load_from_elevation(elevation, RHO_R, -5000.0)
    return loads, h, Plate(te=te, youngs_modulus=70e9, mantle_density=RHO_M)


def test_buried_load_local_limit():
    # Final-topography mode (PHYSICS.md 1.3 b; Watts 2001, ch. 3, from memory): the observed
    # height h_obs sits on a load whose base sank with the plate, so under it
    # (rho_m - rho_l) g w = (rho_l - rho_w) g h_obs locally (Te = 0); the observed surface
    # stays; outside, nothing moves. Tolerance: 1e-9 relative.
    loads, h, plate = buried_case()
    result = solve_with_infill(
        loads, plate, infill=Infill(load_buried=True), tolerance=1e-9, edges="periodic"
    )
    under = h > 0
    assert_allclose(
        result["deflection"].values[under], (RHO_R - RHO_W) * h[under] / (RHO_M - RHO_R), rtol=1e-9
    )
    assert_allclose(result["load_root"].values, result["deflection"].values * under, atol=1e-12)
    assert_allclose(result["surface"].values, loads["initial_surface"].values, atol=1e-9)
    assert np.all(result["infill_density"].values[under] == RHO_R)


def test_buried_load_with_flexure_satisfies_its_equation():
    # With flexure the solution must satisfy D lap^2 w + (rho_m - rho_w) g w = q + (rho_l -
    # rho_w) g w F (F the load's footprint; deep water elsewhere), PHYSICS.md 1.3 b and 5.1;
    # checked by one linear solve with infill density = water (periodic: the same plate).
    # Tolerance: 20x the iteration tolerance.
    loads, h, plate = buried_case(te=10e3)
    result = solve_with_infill(
        loads, plate, infill=Infill(load_buried=True), tolerance=1e-6, edges="periodic"
    )
    w = result["deflection"].values
    rhs = loads["load"] + (RHO_R - RHO_W) * G * w * (h > 0)
    linear = solve(rhs, plate.with_te(10e3), edges="periodic")
    assert_allclose(w, linear["deflection"].values, atol=2e-5)
    assert result.attrs["shift_density"] == RHO_R / 2


def test_buried_load_needs_the_load_geometry():
    load, surface = cone_case(n=32)
    with pytest.raises(InputError, match="load_buried=True needs a load Dataset"):
        solve_with_infill(load, PLATE, surface, Infill(load_buried=True))


def test_sediment_mass_of_a_compacting_fill():
    # A fill whose density depends on its thickness: te = 0 (local Airy isostasy, Watts
    # 2001, Isostasy and Flexure of the Lithosphere, ch. 3) with the moat fully filled, each
    # cell balances q = rho_m g w - g M(w) (fill thickness = w). With M(f) = rho_a f +
    # b f^2 / 2 (density rho_a + b f at the fill's top) the balance is a quadratic in w,
    # solved here in closed form; sediment_density only sets the shift.
    load, surface = cone_case(n=64)
    plate0 = Plate(te=0.0, mantle_density=RHO_M)
    rho_a, b = 1800.0, 0.05  # kg/m^3 and kg/m^3 per m (1918 kg/m^3 at the peak)

    def mass(fill):
        return rho_a * fill + 0.5 * b * fill**2, rho_a + b * fill

    infill = Infill(sediment="full", sediment_density=2000.0)
    result = solve_with_infill(load, plate0, surface, infill, tolerance=1e-9, sediment_mass=mass)
    q = load.values / G  # (rho_m - rho_a) w - b w^2 / 2 = q / g
    a, c = 0.5 * b, RHO_M - rho_a
    expected = (c - np.sqrt(c * c - 4.0 * a * q)) / (2.0 * a)
    assert_allclose(result["deflection"].values, expected, rtol=1e-9, atol=1e-8)
    filled = expected > 0
    assert_allclose(
        result["infill_density"].values[filled], rho_a + b * expected[filled], rtol=1e-9
    )
    plain = solve_with_infill(load, plate0, surface, infill, tolerance=1e-9)
    assert float(np.abs(plain["deflection"].values - expected).max()) > 1.0  # it matters


def test_sediment_mass_that_breaks_its_contract_is_named():
    # a caller's sediment_mass with the wrong shape, NaN or a negative mass is refused with
    # one message naming it (not a traceback from deep in the iteration)
    load, surface = cone_case(n=64)
    plate0 = Plate(te=0.0, mantle_density=RHO_M)
    infill = Infill(sediment="full", sediment_density=2000.0)
    bad = {
        "shape": lambda f: (np.zeros(3), np.zeros(3)),
        "NaN": lambda f: (np.full(f.shape, np.nan), np.full(f.shape, 2000.0)),
        "negative": lambda f: (-1.0 - f, np.full(f.shape, 2000.0)),
        "mass, density": lambda f: 1.0,
    }
    for words, mass in bad.items():
        with pytest.raises(InputError, match=f"sediment_mass.*{words}|{words}.*sediment_mass"):
            solve_with_infill(load, plate0, surface, infill, sediment_mass=mass)
