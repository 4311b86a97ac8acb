"""Tests of staged basin loading with compaction."""

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Infill, Plate, load_from_layers, solve, solve_with_infill
from gridflex.basin.compaction import Lithology, bulk_density, grain_thickness
from gridflex.basin.staging import Stage, StagedBasin, stage_loading
from gridflex.errors import InputError
from tests.basin.grids import DX, TOL, N, flat, grid, lens


def test_staged_loading_without_compaction_equals_one_loading_with_the_total():
    # linear elastic plate: the sum of the responses to the increments equals the
    # response to the total (Watts, Karner & Steckler 1982; PHYSICS.md 9.2), also with the
    # nonlinear water infill (a delta that builds above sea level); atol 1e-5 m against
    # the iteration tolerance 1e-7 m
    coord = np.arange(N) * DX
    shelf = grid(np.broadcast_to(np.linspace(-300.0, 80.0, N), (N, N)).copy())
    plate = Plate(te=8e3)
    a = Lithology("a", 0.5, 2000.0, 2650.0)
    b = Lithology("b", 0.3, 2000.0, 2700.0)
    stages = [Stage(lens(400.0), 2.0e6, a), Stage(lens(250.0, 30e3), 1.0e6, b)]
    staged = stage_loading(stages, shelf, plate, compaction=False, tolerance=TOL)
    rho_a = 1030 * 0.5 + 2650 * 0.5
    rho_b = 1030 * 0.3 + 2700 * 0.7
    column = load_from_layers(shelf, [(lens(400.0), rho_a), (lens(250.0, 30e3), rho_b)])
    total = solve_with_infill(column, plate, infill=Infill(), tolerance=TOL)
    assert staged.sizes["stage"] == 2 and coord.size == N
    assert float(total["surface"].max()) > 0.0  # part of the delta is emergent
    assert_allclose(staged["deflection"][-1], total["deflection"], atol=1e-5)
    assert_allclose(
        staged["deflection"].sum("stage") - staged["deflection"][-1],
        staged["deflection"][0],
        atol=1e-12,
    )  # two stages: cumulative bookkeeping
    assert_allclose(
        staged["deflection_increment"].sum("stage"), staged["deflection"][-1], atol=1e-9
    )
    assert_allclose(staged["stage_density"][0].values[lens(400.0).values > 0], rho_a, rtol=1e-12)


def test_local_staged_compaction_matches_airy_balance_of_the_compacted_column():
    # te = 0, fully submerged: local (Airy) isostasy of the whole column,
    # w = (M - rho_w T) / (rho_m - rho_w) (PHYSICS.md 1.3 mode (a)), with T and M the
    # thickness and mass of the column compacted by the closed-form law (Sclater &
    # Christie 1980); rtol 1e-6 (iteration tolerance)
    plate = Plate(te=0.0)
    h1, h2 = 800.0, 600.0
    stages = [Stage(flat(h1), 3e6, "shale"), Stage(flat(h2), 1e6, "sandstone")]
    out = stage_loading(stages, flat(-4000.0), plate, tolerance=TOL, edges="periodic")
    s1 = grain_thickness(0.0, h1, "shale")
    top1 = h2
    from gridflex.basin.compaction import compacted_base

    base1 = compacted_base(top1, s1, "shale")
    t1 = base1 - top1
    m1 = bulk_density(top1, base1, "shale") * t1
    m2 = bulk_density(0.0, h2, "sandstone") * h2
    w = (m1 + m2 - 1030.0 * (t1 + h2)) / (3300.0 - 1030.0)
    assert t1 < h1  # the older stage compacted under the younger one
    assert_allclose(out["deflection"][-1].values, w, rtol=1e-6)
    assert_allclose(out["final_stage_thickness"][0].values, t1, rtol=1e-10)
    assert_allclose(out["sediment_thickness"][-1].values, t1 + h2, rtol=1e-10)
    # accommodation: space between sea level and the solid surface
    assert_allclose(out["accommodation"][-1].values, 4000.0 + w - t1 - h2, rtol=1e-9)


def test_a_stage_removed_and_readded_returns_the_same_state():
    # grains are conserved, so decompaction undoes compaction (Sclater & Christie 1980),
    # and the elastic plate with water infill has one equilibrium per column (PHYSICS.md
    # 5.2) for the te the stage was loaded with: removing the top stage returns the state
    # before it; re-adding it returns the state with it; atol 1e-5 m (tolerance 1e-7 m)
    shelf = grid(np.broadcast_to(np.linspace(-250.0, 40.0, N), (N, N)).copy())
    basin = StagedBasin(shelf, Plate(te=6e3), tolerance=TOL)
    first = Stage(lens(500.0), 5e6, "shale")
    second = Stage(lens(350.0, 35e3), 2e6, "sandstone", base_level=0.0, te=3e3)
    basin.add_stage(first)
    basin.add_stage(second)
    basin.remove_stage()
    basin.add_stage(second)
    out = basin.to_dataset()
    assert out.sizes["stage"] == 4
    shrink = out["stage_thickness"][0] + out["stage_thickness"][1] - out["sediment_thickness"][1]
    assert float(shrink.max()) > 10.0  # stage 1 really compacted under stage 2
    assert float(out["stage_fill"][1].max()) > 1.0  # and stage 2 filled its moat
    for later, earlier in ((2, 0), (3, 1)):
        for name in ("deflection", "surface", "sediment_thickness", "sediment_density"):
            assert_allclose(out[name][later], out[name][earlier], atol=1e-5, rtol=1e-9)
    assert_allclose(out["stage_thickness"][2], lens(500.0), atol=1e-8)  # decompacted back


@pytest.mark.parametrize("te", ["number", "grid"])
def test_settled_stage_with_moat_fill_is_in_local_balance(te):
    # te = 0: Airy balance of the final column, rho_m w = M + rho_w (h_w - h_w0)
    # (PHYSICS.md 1.3 and 5.1; local isostasy, Watts 2001, Isostasy and Flexure of the
    # Lithosphere, ch. 1), with M the mass of the column compacted by the closed-form law
    # (Sclater & Christie 1980) and the moat filled with sediment to sea level; rtol 1e-6
    # (iteration tolerance 1e-7 m). te = 0 as a number (FFT) and as a grid of zeros
    # (finite differences) must both give it.
    stages = [
        Stage(flat(300.0), 4e6, "shale", base_level=0.0),
        Stage(flat(200.0), 2e6, "chalk", base_level=0.0),
    ]
    plate = Plate(te=0.0 if te == "number" else flat(0.0))
    out = stage_loading(stages, flat(-1500.0), plate, tolerance=TOL, edges="periodic")
    for k in range(2):
        w = out["deflection"][k].values
        mass = out["sediment_density"][k].values * out["sediment_thickness"][k].values
        water = out["water_depth"][k].values
        assert_allclose(3300.0 * w, mass + 1030.0 * (water - 1500.0), rtol=1e-6)
        assert float(out["stage_fill"][k].min()) > 10.0
    # the fill takes only the space the plate makes: the first stage leaves the surface
    # its isopach above the start; the second also compacts the first (common practice)
    assert_allclose(out["surface"][0].values, -1500.0 + 300.0, atol=1e-5)
    assert float(out["surface"][1].max()) < -1500.0 + 500.0 - 1.0


def test_stage_te_applies_at_the_time_of_loading():
    # eq. 9.1 (Watts, Karner & Steckler 1982): each increment with the te of its time,
    # earlier deflections frozen; fully submerged, no compaction, so each increment is
    # a linear solve with water infill; atol 1e-5 m
    plate = Plate(te=20e3)
    rock = Lithology("rock", 0.0, 1000.0, 2500.0)
    stages = [Stage(lens(300.0), 2e6, rock, te=5e3), Stage(lens(300.0, 25e3), 1e6, rock)]
    out = stage_loading(stages, flat(-3000.0), plate, tolerance=TOL)
    g, q = 9.81, (2500.0 - 1030.0)
    w1 = solve(lens(300.0) * q * g, plate.with_te(5e3))["deflection"]
    w2 = solve(lens(300.0, 25e3) * q * g, plate)["deflection"]
    assert_allclose(out["deflection"][-1], w1 + w2, atol=1e-5)
    one_te = stage_loading(
        [Stage(s.thickness, s.age, rock) for s in stages], flat(-3000.0), plate, tolerance=TOL
    )
    assert float(np.abs(one_te["deflection"][-1] - out["deflection"][-1]).max()) > 1.0


@pytest.mark.parametrize("stage_te", [None, "grid"])
def test_moat_fills_with_sediment_to_base_level_locally(stage_te):
    # te = 0 with sediment filling the new space up to a base level above the surface:
    # rho_m w = (rho_b - rho_w) h + rho_sediment w (local balance, PHYSICS.md 5.1/5.3), fill = w;
    # also with the stage's own te grid of zeros (finite differences)
    rock = Lithology("rock", 0.0, 1000.0, 2400.0)
    te = None if stage_te is None else flat(0.0)
    out = stage_loading(
        [Stage(flat(100.0), 1e6, rock, base_level=0.0, te=te)],
        flat(-500.0),
        Plate(te=0.0),
        tolerance=TOL,
        edges="periodic",
    )
    w = (2400.0 - 1030.0) * 100.0 / (3300.0 - 2400.0)
    assert_allclose(out["deflection"][0].values, w, rtol=1e-6)
    assert_allclose(out["stage_fill"][0].values, w, rtol=1e-6)
    assert_allclose(out["stage_thickness"][0].values, 100.0 + w, rtol=1e-6)


def test_bad_inputs_raise_input_error():
    s = lens(100.0)
    with pytest.raises(InputError, match="ages must decrease"):
        stage_loading([Stage(s, 1e6), Stage(s, 2e6)], flat(-1000.0), Plate(te=0.0))
    with pytest.raises(InputError, match="at least one Stage"):
        stage_loading([], flat(-1000.0), Plate(te=0.0))
    with pytest.raises(InputError, match="no stage left"):
        StagedBasin(flat(-100.0), Plate(te=0.0)).remove_stage()
    with pytest.raises(InputError, match="lithology must be one of"):
        Stage(s, 1e6, "basalt")
    holes = flat(-100.0)
    holes[3, 3] = np.nan
    with pytest.raises(InputError, match="initial_surface contains 1 NaN"):
        StagedBasin(holes, Plate(te=0.0))
    with pytest.raises(InputError, match="thickness contains 1 NaN"):
        stage_loading([Stage(holes, 1e6)], flat(-1000.0), Plate(te=0.0))


def _fine(values):
    """A 64 x 64 grid of 3 km cells (20 cells per flexural parameter of the plate below)."""
    coord = np.arange(64) * 3e3
    return xr.DataArray(values, dims=("y", "x"), coords={"y": coord, "x": coord})


@pytest.mark.parametrize("where", ["stage", "plate"])
def test_te_grid_stage_matches_the_constant_te_solve(where):
    # A uniform te grid is the constant-te plate (same plate equation, PHYSICS.md 1.1;
    # common practice), so staged loading must not depend on how te is given: a shelf
    # crossing sea level, a first stage with water (and air) infill, a second with its
    # moat filled with sediment to a base level 20 m above sea level, compaction on. Bound
    # 0.2 % of the peak: the finite-difference stencil against the FFT's continuous
    # symbol, second order in dx (PHYSICS.md 3.1; seen 0.08 % at 20 cells per flexural
    # parameter). The te grid once as the plate's, once as each stage's.
    coord = np.arange(64) * 3e3
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = ((x - coord.mean()) ** 2 + (y - coord.mean()) ** 2) / 25e3**2
    first = _fine(600.0 * np.exp(-r2) * (r2 < 9))
    second = _fine(300.0 * np.exp(-r2 * 2.0) * (r2 < 9))
    shelf = _fine(np.broadcast_to(np.linspace(-150.0, 100.0, 64), (64, 64)).copy())
    plate = Plate(te=20e3)
    te_grid = _fine(np.full((64, 64), 20e3))

    def stages(te):
        return [
            Stage(first, 2e6, "shale", te=te),
            Stage(second, 1e6, "sandstone", base_level=20.0, te=te),
        ]

    const = stage_loading(stages(None), shelf, plate, tolerance=1e-5)
    if where == "stage":
        grid_te = stage_loading(stages(te_grid), shelf, plate, tolerance=1e-5)
    else:
        grid_te = stage_loading(stages(None), shelf, plate.with_te(te_grid), tolerance=1e-5)
    peak = float(const["deflection"].max())
    assert_allclose(grid_te["deflection"], const["deflection"], atol=2e-3 * peak)
    assert float(const["stage_fill"][1].max()) > 5.0  # the base-level fill is there (10.8 m)
    assert_allclose(grid_te["stage_fill"], const["stage_fill"], atol=2e-3 * peak)
    assert_allclose(grid_te["elastic_thickness"], 20e3)
    # no water above sea level: where the surface stays above it, the depth is zero
    above = grid_te["surface"][0].values > 0.0
    assert above.any() and np.all(grid_te["water_depth"][0].values[above] == 0.0)


def test_sea_level_rise_of_a_stage_loads_the_submerged_plate():
    # a sea-level rise dSL on an empty submerged basin depresses it locally by
    # dSL rho_w / (rho_m - rho_w) (the sea-level term of the backstrip formula, Steckler &
    # Watts 1978; PHYSICS.md 9.2 re-derived); te = 0 on a periodic grid; rtol 1e-6
    out = stage_loading(
        [Stage(flat(0.0), 1e6, "shale", sea_level=100.0)],
        flat(-2000.0),
        Plate(te=0.0),
        tolerance=TOL,
        edges="periodic",
    )
    w = 100.0 * 1030.0 / (3300.0 - 1030.0)
    assert_allclose(out["deflection"][0].values, w, rtol=1e-6)
    assert_allclose(out["water_depth"][0].values, 2100.0 + w, rtol=1e-9)


def test_a_failed_stage_leaves_the_basin_unchanged():
    # no wrong grid after a non-convergence (common practice: ConvergenceError contract)
    from gridflex.errors import ConvergenceError

    basin = StagedBasin(flat(-300.0), Plate(te=6e3), max_iterations=1, tolerance=TOL)
    with pytest.raises(ConvergenceError, match="did not converge"):
        basin.add_stage(Stage(lens(400.0), 1e6, "shale"))
    assert not basin.stages and not basin.history
    assert float(np.abs(basin.deflection).max()) == 0.0


def test_present_day_isopachs_are_decompacted_and_come_back():
    # present-day isopachs decompacted to the surface from their present burial (grains
    # conserved; Sclater & Christie 1980) and re-compacted by the stages above must
    # return the given thicknesses in the final column; rtol 1e-9 (Newton tolerance)
    present = [flat(900.0), lens(600.0), flat(400.0)]
    liths = ["shale", "sandstone", "chalk"]
    stages = [Stage(h, age, lith) for h, age, lith in zip(present, (3e6, 2e6, 1e6), liths)]
    out = stage_loading(
        stages, flat(-5000.0), Plate(te=0.0), isopachs="present", tolerance=TOL, edges="periodic"
    )
    for k, h in enumerate(present):
        assert_allclose(out["final_stage_thickness"][k].values, h.values, rtol=1e-9, atol=1e-9)
    assert float(out["stage_thickness"][0].min()) > 900.0 + 100.0  # deposited thicker
    with pytest.raises(InputError, match="isopachs must be one of"):
        stage_loading(stages, flat(-5000.0), Plate(te=0.0), isopachs="today")


@pytest.mark.parametrize("te", [0.0, 3e3])
def test_moat_fill_never_stands_above_the_base_level(te):
    # sediment fills the new space only up to the base level (PHYSICS.md 9.2; fill rule of
    # PHYSICS.md 5.1, common practice); with compaction the fill actually deposited is
    # lighter than the density the infill carried it with, the plate rebounds, and before
    # the fix the filled cells ended 0.58 m (te = 0) and 0.39 m (te = 3 km) above the level.
    # Now: at most the solve tolerance (1e-7 m here; asserted 1e-6 m), and the moat is
    # still filled: cells with fill stand at the level
    stages = [Stage(lens(900.0, 60e3), 2e6, "shale", base_level=0.0)]
    out = stage_loading(stages, flat(-80.0), Plate(te=te), tolerance=TOL, edges="periodic")
    fill = out["stage_fill"].values[0]
    surface = out["surface"].values[0]
    assert fill.max() > 10.0
    assert float(np.max(surface[fill > 0])) <= 1e-6
    at_level = (fill > 0) & (surface > -1e-6)
    assert at_level.sum() > 50


def test_the_te_of_each_stage_is_recorded_and_plate_te_only_when_all_used_it():
    # bookkeeping of eq. 9.1 (Watts, Karner & Steckler 1982: each increment with the te of
    # its time): stage_te holds the te each stage was solved with; the [plate] te is not
    # written as plate_te when a stage used another (common practice: outputs describe the
    # run)
    stages = [Stage(lens(300.0), 3e6, "shale"), Stage(lens(200.0), 2e6, "shale", te=2e3)]
    out = stage_loading(stages, flat(-2000.0), Plate(te=6e3), tolerance=TOL)
    assert_allclose(out["stage_te"].values, [6e3, 2e3])
    assert_allclose(out["stage_te_min"].values, [6e3, 2e3])
    assert out.attrs["plate_default_te"] == 6e3
    assert "per stage" in out.attrs["plate_te"]
    assert "plate_rigidity" not in out.attrs
    same = stage_loading(stages[:1], flat(-2000.0), Plate(te=6e3), tolerance=TOL)
    assert same.attrs["plate_te"] == 6e3 and "plate_default_te" not in same.attrs
    te_grid = flat(4e3).copy(
        data=np.where(np.arange(N) < N // 2, 4e3, 9e3)[None, :] + 0.0 * flat(0.0).values
    )
    grid_stage = [Stage(lens(300.0), 3e6, "shale", te=te_grid)]
    varied = stage_loading(grid_stage, flat(-2000.0), Plate(te=6e3), tolerance=1e-5)
    assert np.isnan(varied["stage_te"].values[0])
    assert_allclose(
        [varied["stage_te_min"].values[0], varied["stage_te_max"].values[0]], [4e3, 9e3]
    )


def test_erosion_removes_the_top_of_the_pile_and_compaction_is_irreversible():
    # a negative isopach erodes the top of the pile; compaction is irreversible (common
    # practice; porosity law of Athy 1930 with the Sclater & Christie 1980 shale): the
    # remaining 700 m of a 1000 m shale keep the porosity they had at 300-1000 m, so their
    # mass is the quadrature of the saturated density over that interval; te = 0, fully
    # submerged: Airy balance w = (M - rho_w T) / (rho_m - rho_w) (PHYSICS.md 1.3); rtol 1e-6
    from scipy import integrate

    from gridflex.basin.compaction import move_layer, porosity

    basin = StagedBasin(flat(-4000.0), Plate(te=0.0), tolerance=TOL, edges="periodic")
    basin.add_stage(Stage(flat(1000.0), 3e6, "shale"))
    basin.add_stage(Stage(flat(-300.0), 2e6, "shale"))
    out = basin.to_dataset()

    def rho(z):
        return 1030.0 * porosity(z, "shale") + 2720.0 * (1.0 - porosity(z, "shale"))

    mass, _ = integrate.quad(rho, 300.0, 1000.0, epsrel=1e-13)
    w = (mass - 1030.0 * 700.0) / (3300.0 - 1030.0)
    assert_allclose(basin.final_stage_thickness()[0], 700.0, rtol=1e-12)
    assert_allclose(basin.final_stage_thickness()[1], 0.0, atol=1e-12)
    assert_allclose(out["deflection"][-1].values, w, rtol=1e-6)
    assert_allclose(out["stage_thickness"][-1].values, -300.0, rtol=1e-12)
    assert_allclose(out["sediment_thickness"][-1].values, 700.0, rtol=1e-12)
    # reversible decompaction would have thickened it: not what is modelled
    assert move_layer(300.0, 1000.0, 0.0, "shale") > 700.0 + 50.0
    # buried again by less than it had been, it does not compact further
    basin.add_stage(Stage(flat(200.0), 1e6, "sandstone"))
    assert_allclose(basin.final_stage_thickness()[0], 700.0, rtol=1e-12)
    with pytest.raises(InputError, match="compaction is irreversible"):
        basin.remove_stage()


def test_erosion_deeper_than_the_pile_is_refused_and_leaves_the_basin_unchanged():
    basin = StagedBasin(flat(-3000.0), Plate(te=0.0), tolerance=TOL, edges="periodic")
    basin.add_stage(Stage(lens(400.0), 3e6, "shale"))
    before = (basin.deflection.copy(), [g.copy() for g in basin.grains])
    with pytest.raises(InputError, match=r"stage \(age 2000000.0\) erodes up to 5.*first stage"):
        basin.add_stage(Stage(flat(-5.0), 2e6, "shale"))
    assert np.array_equal(basin.deflection, before[0]) and basin.burial == []
    assert all(np.array_equal(a, b) for a, b in zip(basin.grains, before[1], strict=True))


def test_stages_of_a_te_grid_share_one_finite_difference_set_up(monkeypatch):
    # Stages solve with the same te grid, fill and options, so the finite-difference
    # set-up is built once and kept (that a kept set-up gives the deflection of a new one:
    # tests/test_infill_finite_difference.py); a stage whose fill density lies within 15 %
    # keeps the shift density, hence the operator and the set-up; a stage with its own te
    # grid needs its own. The moat fill is carried with its compacted mass, so with the
    # whole column submerged (older layers compacting under the fill expel pore water
    # that the deeper water above replaces: no load) each stage settles in its one solve.
    import gridflex.infill as infill_module

    builds, calls = [], []
    build = infill_module.FiniteDifferenceSolver.build.__func__
    solve = infill_module.solve_with_infill

    def counting_build(cls, *args, **kwargs):
        builds.append(1)
        return build(cls, *args, **kwargs)

    def counting_solve(*args, **kwargs):
        calls.append(1)
        return solve(*args, **kwargs)

    monkeypatch.setattr(infill_module.FiniteDifferenceSolver, "build", classmethod(counting_build))
    monkeypatch.setattr("gridflex.basin.staging.solve_with_infill", counting_solve)
    te = grid(np.broadcast_to(np.linspace(4e3, 12e3, N), (N, N)).copy())
    stages = [
        Stage(lens(400.0), 3e6, "shale", base_level=-100.0),
        Stage(lens(300.0, 30e3), 2e6, "sandstone", base_level=-100.0),
        Stage(lens(200.0, 30e3), 1e6, "shale", base_level=-100.0, te=te * 1.5),
    ]
    out = stage_loading(stages, flat(-1500.0), Plate(te=te), tolerance=1e-5)
    assert len(calls) == 3  # one infill solve per stage, no settling pass
    assert len(builds) == 2  # the first two stages share one, the third has its own te
    assert float(out["stage_fill"].max()) > 0.0
