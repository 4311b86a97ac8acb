"""Tests of flexural backstripping."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex import Plate
from gridflex.basin.backstrip import backstrip, backstrip_layers
from gridflex.basin.compaction import bulk_density, compacted_base, grain_thickness
from gridflex.basin.staging import Stage, stage_loading
from gridflex.errors import InputError
from tests.basin.grids import N, flat, grid, lens


def test_local_backstrip_is_the_steckler_watts_formula():
    # Y = S (rho_m - rho_s)/(rho_m - rho_w) - dSL rho_w/(rho_m - rho_w) + (Wd - dSL)
    # (Steckler & Watts 1978, Earth Planet. Sci. Lett. 41, 1-13, Airy backstrip; written
    # out here from memory of the standard 1-D form); te = 0; rtol 1e-12
    rng = np.random.default_rng(3)
    s = grid(rng.uniform(0.0, 6000.0, (N, N)))
    wd = grid(rng.uniform(0.0, 2000.0, (N, N)))
    rho_m, rho_w, dsl = 3300.0, 1030.0, 40.0
    out = backstrip(
        None, s, wd, Plate(te=0.0), sediment_density=2350.0, sea_level_change=dsl, edges="periodic"
    )
    expected = s * (rho_m - 2350.0) / (rho_m - rho_w) - dsl * rho_w / (rho_m - rho_w) + (wd - dsl)
    assert_allclose(out["tectonic_subsidence"], expected, rtol=1e-12)
    assert_allclose(out["local_tectonic_subsidence"], expected, rtol=1e-12)
    # with the porosity law: the column's mean bulk density (Sclater & Christie 1980)
    comp = backstrip(s + wd, s, wd, Plate(te=0.0), lithology="shale", edges="periodic")
    rho_s = bulk_density(0.0, s.values, "shale")
    assert_allclose(
        comp["tectonic_subsidence"], s * (rho_m - rho_s) / (rho_m - rho_w) + wd, rtol=1e-12
    )


def test_flexural_backstrip_spreads_the_rebound_and_conserves_its_volume():
    # flexural compensation of the removed sediment (Watts, Karner & Steckler 1982):
    # the rebound is smoother than the local one but its volume is the same (force
    # balance of the k = 0 term, PHYSICS.md 2.3, exact on a periodic domain); rtol 1e-9
    s = lens(3000.0, 30e3)
    wd = flat(200.0)
    local = backstrip(None, s, wd, Plate(te=0.0), sediment_density=2400.0)
    flex = backstrip(None, s, wd, Plate(te=15e3), sediment_density=2400.0, edges="periodic")
    rebound_local = (s * (2400.0 - 1030.0) / (3300.0 - 1030.0)).values
    assert_allclose(local["sediment_rebound"], rebound_local, rtol=1e-12)
    # te -> 0: a 200 m plate (flexural parameter ~1.9 km < one 6 km cell) is local to
    # 0.5 % of the peak (Steckler & Watts 1978 limit; the (k alpha)^4 term is small)
    thin = backstrip(None, s, wd, Plate(te=200.0), sediment_density=2400.0)
    assert_allclose(
        thin["tectonic_subsidence"],
        local["tectonic_subsidence"],
        atol=5e-3 * float(local["tectonic_subsidence"].max()),
    )
    assert_allclose(flex["sediment_rebound"].sum(), rebound_local.sum(), rtol=1e-9)
    centre = (N // 2, N // 2)
    assert float(flex["sediment_rebound"][centre]) < 0.8 * rebound_local[centre]
    assert float(flex["tectonic_subsidence"][centre]) > float(local["tectonic_subsidence"][centre])
    assert_allclose(flex["local_tectonic_subsidence"], local["tectonic_subsidence"], rtol=1e-12)


def test_layered_backstrip_decompacts_the_remaining_layers():
    # step j removes the j youngest layers and decompacts the rest to the surface, grains
    # conserved (Sclater & Christie 1980); each step is the Airy backstrip with the
    # decompacted thickness and mean density (Steckler & Watts 1978); te = 0; rtol 1e-9
    top_h, low_h = 1200.0, 1800.0
    layers = [(flat(top_h), "sandstone"), (flat(low_h), "shale")]
    out = backstrip_layers(
        layers,
        [100.0, 400.0],
        Plate(te=0.0),
        sea_level_changes=[0.0, 30.0],
        ages=[0.0, 5e6],
        edges="periodic",
    )
    rho_m, rho_w = 3300.0, 1030.0
    # step 0: the present column
    mass0 = (
        bulk_density(0.0, top_h, "sandstone") * top_h
        + bulk_density(top_h, top_h + low_h, "shale") * low_h
    )
    s0 = top_h + low_h
    y0 = s0 * (rho_m - mass0 / s0) / (rho_m - rho_w) + 100.0
    # step 1: the shale alone, brought back to the surface
    base = compacted_base(0.0, grain_thickness(top_h, top_h + low_h, "shale"), "shale")
    rho1 = bulk_density(0.0, base, "shale")
    y1 = base * (rho_m - rho1) / (rho_m - rho_w) + 400.0 - 30.0 * rho_m / (rho_m - rho_w)
    assert base > low_h  # decompacted
    assert_allclose(out["sediment_thickness"][1].values, base, rtol=1e-9)
    assert_allclose(out["tectonic_subsidence"][0].values, y0, rtol=1e-9)
    assert_allclose(out["tectonic_subsidence"][1].values, y1, rtol=1e-9)
    assert_allclose(out["age"].values, [0.0, 5e6])
    # each step's sea level is kept, not only the first one's
    assert_allclose(out["sea_level_change"].values, [0.0, 30.0])
    assert_allclose(out.attrs["sea_level_changes"], [0.0, 30.0])
    with pytest.raises(InputError, match="one entry per layer"):
        backstrip_layers(layers, [100.0], Plate(te=0.0))


def test_bad_inputs_raise_input_error():
    s = lens(100.0)
    with pytest.raises(InputError, match="differs from sediment_thickness"):
        backstrip(flat(1000.0), s, flat(200.0), Plate(te=0.0))
    with pytest.raises(InputError, match="at least two of"):
        backstrip(None, s, None, Plate(te=0.0))
    holes = flat(-100.0)
    holes[3, 3] = np.nan
    with pytest.raises(InputError, match="water_depth contains 1 NaN"):
        backstrip(None, s, holes, Plate(te=0.0))
    with pytest.raises(InputError, match=r"sediment_density must lie in \[water_density"):
        backstrip(None, s, flat(200.0), Plate(te=0.0), sediment_density=900.0)


def test_te_grid_backstrip_matches_the_constant_te_solve():
    # a uniform te grid must give the constant-te answer (same plate equation, PHYSICS.md
    # 1.1); atol 0.5 % of the peak: the finite-difference discretisation error at ~6 cells
    # per flexural parameter (common practice)
    s = lens(3000.0, 30e3)
    flex = backstrip(None, s, flat(200.0), Plate(te=flat(15e3)), sediment_density=2400.0)
    ref = backstrip(None, s, flat(200.0), Plate(te=15e3), sediment_density=2400.0)
    peak = float(ref["sediment_rebound"].max())
    assert_allclose(flex["sediment_rebound"], ref["sediment_rebound"], atol=5e-3 * peak)


def test_basin_names_are_importable_where_the_readme_shows_them():
    import gridflex.basin as basin
    from gridflex.basin import staging

    assert basin.backstrip is backstrip
    assert basin.backstrip_layers is backstrip_layers
    assert basin.stage_loading is staging.stage_loading
    assert basin.Stage is staging.Stage
    assert basin.StagedBasin is staging.StagedBasin


def test_vanishing_layers_backstrip_with_the_limit_density():
    # a layer 5e-14 m thick under 2500 m of sediment (the size at which the decompacted
    # column got 7400-8900 kg/m^3) or absent: decompacted to the surface its mean bulk
    # density is the surface limit rho_w phi0 + rho_g (1 - phi0) (Athy 1930 law,
    # Sclater & Christie 1980 shale), and the Airy backstrip (Steckler & Watts 1978) of
    # that column is the water depth alone to round-off; te = 0
    values = np.zeros((N, N))
    values[: N // 2] = 5e-14
    layers = [(flat(2500.0), "sandstone"), (grid(values), "shale")]
    out = backstrip_layers(layers, [50.0, 80.0], Plate(te=0.0), edges="periodic")
    step = out.isel(step=1)
    surface_density = 1030.0 * 0.63 + 2720.0 * 0.37
    assert float(step["sediment_thickness"].min()) >= 0.0
    # grains conserved: h (1 - phi(2500 m)) = h' (1 - phi0) for a vanishing layer
    expanded = 5e-14 * (1.0 - 0.63 * np.exp(-2500.0 / 1960.0)) / (1.0 - 0.63)
    assert_allclose(step["sediment_thickness"].values[: N // 2], expanded, rtol=1e-12)
    assert np.all(step["sediment_thickness"].values[N // 2 :] == 0.0)
    assert_allclose(step["sediment_density"].values, surface_density, rtol=1e-9)
    assert_allclose(step["tectonic_subsidence"].values, 80.0, atol=1e-12)


def test_a_forward_model_backstripped_with_its_own_outputs_returns_its_water_depths():
    # the forward model has no tectonic subsidence, so the flexural backstrip (Steckler &
    # Watts 1978; Watts, Karner & Steckler 1982) of each stage's column, decompacted from
    # the final one (grains conserved, Sclater & Christie 1980), with that stage's water
    # depth and sea level, returns the water-loaded depth of the initial surface: the
    # stage's water depth is recovered within the 0.01 m (seen 1.0e-7 m with a
    # solve tolerance of 1e-7 m). Sediment fills each moat up to a level below sea level,
    # so the whole model stays submerged; constant te, periodic edges
    coord = np.arange(N) * 6e3
    surface = grid(np.broadcast_to(-400.0 - 1200.0 * (coord / coord[-1]), (N, N)).copy())
    stages = [
        Stage(lens(300.0, 60e3), 3e6, "shale", base_level=-150.0, sea_level=0.0),
        Stage(lens(250.0, 40e3), 2e6, "sandstone", base_level=-120.0, sea_level=20.0),
        Stage(lens(200.0, 30e3), 1e6, "shale", base_level=-100.0, sea_level=-10.0),
    ]
    plate = Plate(te=5e3)
    out = stage_loading(stages, surface, plate, tolerance=1e-7, edges="periodic")
    assert float(out["stage_fill"].max()) > 1.0  # the moats did fill
    assert float(out["surface"].max()) < -20.0  # all submerged
    count = len(stages)
    layers = [(out["final_stage_thickness"][k], stages[k].rock) for k in reversed(range(count))]
    depths = [out["water_depth"][k] for k in reversed(range(count))]
    levels = [stages[k].sea_level for k in reversed(range(count))]
    back = backstrip_layers(layers, depths, plate, sea_level_changes=levels, edges="periodic")
    error = back["tectonic_subsidence"].values - (-surface.values)[None]
    assert float(np.abs(error).max()) <= 0.01
