"""Horizon depths of a staged basin through time."""

import numpy as np
from numpy.testing import assert_allclose

from gridflex import Plate
from gridflex.basin.compaction import bulk_density, compacted_base, grain_thickness
from gridflex.basin.horizons import horizon_ages, horizon_depths
from gridflex.basin.staging import Stage, stage_loading
from tests.basin.grids import TOL, N, flat, grid, lens


def _airy(column, rho_w=1030.0, rho_m=3300.0):
    """Local (Airy) deflection of a submerged column of (thickness, mass per area) layers:
    w = (M - rho_w T) / (rho_m - rho_w) (Turcotte & Schubert 2002; PHYSICS.md 1.3 (a))."""
    thick = sum(t for t, _ in column)
    mass = sum(m for _, m in column)
    return (mass - rho_w * thick) / (rho_m - rho_w)


def test_horizons_of_four_compacting_stages_follow_their_burial():
    # te = 0, fully submerged, so every step is a local (Airy) balance of the compacted
    # column (Turcotte & Schubert 2002); each stage's thickness at each step comes from
    # its grains at its burial (closed-form porosity law, Athy 1930; Sclater & Christie
    # 1980), recomputed here independently. rtol 1e-6: infill iteration tolerance.
    h = [700.0, 500.0, 300.0, 400.0]
    liths = ["shale", "sandstone", "shale", "chalk"]
    ages = [7e6, 5e6, 3e6, 1e6]
    base, sea = -4000.0, 0.0
    stages = [Stage(flat(t), a, lith) for t, a, lith in zip(h, ages, liths, strict=True)]
    out = stage_loading(stages, flat(base), Plate(te=0.0), tolerance=TOL, edges="periodic")
    grains = [grain_thickness(0.0, t, lith) for t, lith in zip(h, liths, strict=True)]
    assert out.sizes["horizon"] == 4
    assert_allclose(out["horizon_age"].values, ages)
    for step in range(4):
        top, column = 0.0, []
        for k in range(step, -1, -1):  # youngest first: its top is at the surface
            bottom = compacted_base(top, grains[k], liths[k])
            column.append((bottom - top, bulk_density(top, bottom, liths[k]) * (bottom - top)))
            top = bottom
        w = _airy(column)
        thicknesses = [t for t, _ in column[::-1]]  # oldest first
        tops = sea - (base - w + np.cumsum(thicknesses))
        got = out["horizon_depth"].isel(stage=step, y=5, x=7).values
        assert_allclose(got[: step + 1], tops, rtol=1e-6)
        assert np.isnan(got[step + 1 :]).all()  # not yet deposited
        assert_allclose(out["basement_depth"].isel(stage=step, y=5, x=7), sea - base + w, rtol=1e-6)
    # the first horizon is buried deeper as it compacts under the younger stages
    first = out["horizon_depth"].isel(horizon=0, y=5, x=7).values
    assert np.all(np.diff(first) > 0)
    # the last step's horizons are the present stage thicknesses, the top the surface
    last = out.isel(stage=-1)
    spacing = np.diff(
        np.concatenate([last["basement_depth"].values[None], last["horizon_depth"].values]),
        axis=0,
    )
    assert_allclose(-spacing, out["final_stage_thickness"].values, rtol=1e-10, atol=1e-9)
    assert_allclose(last["horizon_depth"][-1].values, -last["surface"].values, atol=1e-9)


def test_accommodation_budget_of_each_stage():
    # the space left after a stage is the space left before it, plus the space the stage
    # created, minus what it deposited (accommodation budget, Jervey 1988 - from memory);
    # before the first stage the space is sea level - surface. Flexure, compaction, a
    # sea-level rise and a moat filled to a base level all enter it.
    shelf = grid(np.broadcast_to(np.linspace(-500.0, 40.0, N), (N, N)).copy())
    stages = [
        Stage(lens(450.0), 4e6),
        Stage(lens(300.0, 30e3), 2e6, "sandstone", sea_level=20.0),
        Stage(lens(200.0), 1e6, base_level=0.0, sea_level=20.0),
    ]
    # periodic: the sea-level rise loads the plate up to the edges (an identity either way)
    out = stage_loading(stages, shelf, Plate(te=10e3), tolerance=TOL, edges="periodic")
    before = 0.0 - shelf.values
    for j in range(3):
        step = out.isel(stage=j)
        after = before + step["accommodation_created"].values - step["stage_thickness"].values
        assert_allclose(step["accommodation"].values, after, atol=1e-8)
        before = step["accommodation"].values
    # a stage under water with no level change creates what its floor sank
    first = out.isel(stage=0)
    assert_allclose(
        first["accommodation_created"].values, first["deflection_increment"].values, atol=1e-9
    )
    assert float(out["accommodation_created"][1].min()) > 19.0  # the 20 m sea-level rise


def test_horizons_on_a_flexed_plate_are_the_surface_at_their_time():
    # each stage's top is the solid surface when it was deposited (definition); later it
    # moves with the plate (down in the moat, up on the forebulge) and down by the
    # compaction of the stage under it, never up (grain conservation, Athy 1930)
    shelf = flat(-600.0)
    stages = [Stage(lens(500.0), 4e6), Stage(lens(400.0, 30e3), 2e6, "sandstone")]
    out = stage_loading(stages, shelf, Plate(te=10e3), tolerance=TOL)
    for step in range(2):
        assert_allclose(
            out["horizon_depth"].isel(stage=step, horizon=step).values,
            -out["surface"].isel(stage=step).values,
            atol=1e-9,
        )
    older = out["horizon_depth"].isel(horizon=0).values
    compaction = older[1] - older[0] - out["deflection_increment"][1].values
    assert np.all(compaction >= -1e-9)
    assert float(compaction.max()) > 1.0  # the load of stage 2 compacted stage 1
    assert out["horizon_depth"].attrs["positive"] == "down"


def test_horizon_functions_on_arrays():
    # pure bookkeeping (common practice): z_k = base - w + sum of thicknesses below
    base = np.array([[-100.0, 50.0]])
    w = [np.array([[10.0, 0.0]]), np.array([[30.0, 5.0]])]
    columns = [[np.array([[40.0, 0.0]])], [np.array([[35.0, 0.0]]), np.array([[20.0, 1.0]])]]
    basement, tops = horizon_depths(base, w, columns, 10.0)
    assert_allclose(basement, [[[120.0, -40.0]], [[140.0, -35.0]]])
    assert_allclose(tops[0, 0], [[80.0, -40.0]])
    assert np.isnan(tops[0, 1]).all()
    assert_allclose(tops[1], [[[105.0, -35.0]], [[85.0, -36.0]]])
    assert_allclose(horizon_ages([2e6, 1e6], columns), [2e6, 1e6])
