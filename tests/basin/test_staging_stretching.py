"""Staged loading over a stretched lithosphere: the tectonic load of each stage."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex import Plate
from gridflex.basin import Stage, StagedBasin, Stretching, mckenzie_subsidence, stage_loading
from gridflex.basin.backstrip import backstrip
from gridflex.errors import InputError
from tests.basin.grids import DX, TOL, N, flat, grid, lens

RIFT = 60e6  # years before present
AGES = [55e6, 40e6, 20e6, 0.0]


def beta_grid():
    """An invented rift: beta 1 at the edges, 2.6 in the middle."""
    coord = np.arange(N) * DX
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = ((x - coord.mean()) ** 2 + (y - coord.mean()) ** 2) / (60e3) ** 2
    return grid(1.0 + 1.6 * np.exp(-r2))


def model_subsidence(beta, ages, plate, water=1030.0):
    """The rift model's own water-loaded subsidence at each age (m), (age, y, x)."""
    out = mckenzie_subsidence(
        beta, [RIFT - a for a in ages], mantle_density=plate.mantle_density, water_density=water
    )
    return out["total_subsidence"].transpose("time", ...).values


def test_local_plate_sinks_by_the_water_loaded_tectonic_subsidence():
    # te = 0 and water infill: the load (rho_m - rho_w) g dS sinks each column by dS
    # (local isostasy, Turcotte & Schubert 2002); with sediment on top, the Airy backstrip
    # of the forward model's own column (Steckler & Watts 1978) returns the rift's
    # subsidence (rtol 1e-6: infill tolerance)
    plate = Plate(te=0.0)
    beta = beta_grid()
    rift = Stretching(beta, RIFT)
    stages = [Stage(lens(300.0 * (i + 1)), age, "shale") for i, age in enumerate(AGES)]
    out = stage_loading(stages, flat(0.0), plate, tolerance=TOL, edges="periodic", stretching=rift)
    expected = model_subsidence(beta, AGES, plate)
    assert_allclose(out["tectonic_subsidence"], expected, rtol=1e-12)
    assert float(out["tectonic_subsidence"].max()) > 3000.0  # a deep rift
    for k in range(len(AGES)):
        stage = out.isel(stage=k)
        back = backstrip(
            None,
            stage["sediment_thickness"],
            stage["water_depth"],
            Plate(te=0.0),
            sediment_density=stage["sediment_density"],
        )
        assert_allclose(back["local_tectonic_subsidence"], expected[k], rtol=1e-6, atol=1e-6)
    bare = stage_loading(
        [Stage(flat(0.0), age) for age in AGES],
        flat(0.0),
        plate,
        tolerance=TOL,
        edges="periodic",
        stretching=rift,
    )
    assert_allclose(bare["deflection"], expected, rtol=1e-6, atol=1e-6)
    assert_allclose(bare["water_depth"], expected, rtol=1e-6, atol=1e-6)
    thermal = out["thermal_subsidence"].values
    assert_allclose(thermal[0][beta.values == 1.0], 0.0, atol=1e-9)
    assert np.all(np.diff(thermal, axis=0) >= -1e-9)  # cooling only deepens


def test_flexed_tectonic_load_keeps_the_local_volume():
    # a plate with strength spreads the tectonic load of a varying beta: the volume of
    # the deflection equals the local (te = 0) volume (force balance, k = 0 term;
    # PHYSICS.md 2.3), the centre subsides less and the flanks more; a uniform beta
    # gives the local subsidence everywhere (uniform load, periodic plate); rtol 1e-6
    rift = Stretching(beta_grid(), RIFT)
    surface = flat(-500.0)  # submerged throughout: water infill everywhere
    stages = [Stage(flat(0.0), age) for age in AGES]
    local = stage_loading(
        stages, surface, Plate(te=0.0), tolerance=TOL, edges="periodic", stretching=rift
    )
    flexed = stage_loading(
        stages, surface, Plate(te=30e3), tolerance=TOL, edges="periodic", stretching=rift
    )
    w_local = local["deflection"].values
    w_flexed = flexed["deflection"].values
    assert_allclose(w_flexed.sum(axis=(1, 2)), w_local.sum(axis=(1, 2)), rtol=1e-6)
    centre = (N // 2, N // 2)
    assert w_flexed[-1][centre] < 0.95 * w_local[-1][centre]
    uniform = Stretching(2.0, RIFT)
    out = stage_loading(
        stages, surface, Plate(te=30e3), tolerance=TOL, edges="periodic", stretching=uniform
    )
    expected = model_subsidence(2.0, AGES, Plate(te=30e3))
    assert_allclose(out["deflection"].values[:, 5, 7], expected, rtol=1e-6)
    assert out.attrs["stretching_factor"] == 2.0
    assert out.attrs["stretching_mantle_density"] == Plate(te=0.0).mantle_density


def test_stages_before_the_rift_and_removal():
    # stages older than the rift carry no tectonic load; removing a stage undoes its
    # tectonic load with the stage (same te: the state returns; unique equilibrium)
    plate = Plate(te=10e3)
    rift = Stretching(1.8, 30e6)
    basin = StagedBasin(flat(-200.0), plate, edges="periodic", tolerance=TOL, stretching=rift)
    basin.add_stage(Stage(lens(200.0), 50e6))
    assert_allclose(basin.tectonic_subsidence(50e6), 0.0)
    before = basin.deflection.copy()
    basin.add_stage(Stage(lens(100.0), 10e6))
    assert float(basin.deflection.min()) > 1000.0  # the rift moved everything down
    basin.remove_stage()
    assert_allclose(basin.deflection, before, atol=1e-5)
    with pytest.raises(InputError, match="stretching_factor must be finite and >= 1"):
        Stretching(0.5, 30e6)
    with pytest.raises(InputError, match="rift_age"):
        Stretching(2.0, float("nan"))
    with pytest.raises(InputError, match="stretching must be a gridflex.basin.Stretching"):
        StagedBasin(flat(0.0), plate, stretching=2.0)  # type: ignore[arg-type]
