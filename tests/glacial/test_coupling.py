"""IceStepper: the bed under ice and sea level one step at a time, saved and restored."""

from __future__ import annotations

import inspect
import warnings
from dataclasses import fields

import numpy as np
import pytest
import xarray as xr

from gridflex import (
    GridflexWarning,
    IceStepper,
    InputError,
    Plate,
    ResponseStepper,
    bed_stress,
    ice_response,
)
from gridflex.glacial.response import SAVED_SETTINGS, STEPPER_FIELDS
from gridflex.glacial.state import ENGINE_FIELDS, check_engine_fields
from gridflex.solvers.far_field import FarField
from gridflex.solvers.variable_relaxation import VariableRelaxation
from gridflex.solvers.viscous import SpectralRelaxation
from gridflex.synthetic import disc_height, empty_grid


def _marine_history(n: int = 9, cells: int = 32):
    """An ice cap growing from land out over a sloping sea floor while sea level falls,
    then thinning until its margin floats: floatation and the ocean load both change."""
    grid = empty_grid(cells, cells, 40e3)
    bed = 300.0 - 2.5e-3 * np.abs(grid.x) + 0.0 * grid  # land in the middle, sea at the sides
    cap = disc_height(grid, 420e3, 1.0)
    times = np.linspace(0.0, 4000.0, n)
    shape = np.sin(np.pi * times / times[-1] * 0.8)
    ice = xr.DataArray(
        2800.0 * shape[:, None, None] * cap.values[None],
        dims=("time", "y", "x"),
        coords={"time": times, "y": grid.y, "x": grid.x},
    )
    levels = -60.0 * shape
    return grid, bed.transpose("y", "x"), ice, levels


@pytest.mark.parametrize(
    ("model", "interpolation", "elastic", "te", "edges"),
    [
        ("half-space", "linear", False, "constant", "periodic"),
        ("relaxing", "linear", False, "constant", "periodic"),
        ("half-space", "previous", False, "constant", "periodic"),
        ("half-space", "linear", True, "constant", "infinite"),  # far field and elastic Earth
        ("half-space", "previous", True, "constant", "infinite"),
        ("relaxing", "linear", False, "grid", "periodic"),
        ("half-space", "linear", True, "grid", "infinite"),
    ],
)
def test_ice_stepper_reproduces_ice_response(model, interpolation, elastic, te, edges):
    # issue 17 target: a coupled run equals the batch call to 1e-9 m at every step (same
    # floatation and ocean rules, PHYSICS.md 7.1; same exact per-mode update, Bueler,
    # Lingle & Brown 2007 / Le Meur & Huybrechts 1996), also with the elastic Earth and
    # on a te grid.
    cells = 32 if te == "constant" else 20
    grid, bed, ice, levels = _marine_history(cells=cells)
    te_value = 40e3 if te == "constant" else (25e3 + 30e3 * (grid.x > 0) + 0.0 * grid).T
    plate = Plate(te=te_value, infill_density=0.0)
    sea = xr.DataArray(levels, dims="time")
    options = {"interpolation": interpolation, "edges": edges, "elastic": elastic}
    with warnings.catch_warnings():  # the cap comes close to the edge of the small grid
        warnings.simplefilter("ignore", GridflexWarning)
        batch = ice_response(ice, bed, plate, sea, model, **options)
    assert ("elastic_deflection" in batch) == elastic
    assert batch.grounded.values.min() == 0 and batch.grounded.values.max() == 1
    # the ocean load follows sea level and the moving bed where there is no ice
    assert np.abs(batch["load"].values[-1][ice.values[-1] == 0]).max() > 1e5
    stepper = IceStepper(
        bed,
        plate,
        model,
        ice_thickness=ice[0],
        sea_level=levels[0],
        **options,
    )
    times = ice.time.values
    for n in range(1, times.size):
        if interpolation == "linear":
            beds = stepper.advance(times[n] - times[n - 1], ice[n], levels[n])
        else:  # the ice held over the step, then the ice of the new time
            stepper.advance(times[n] - times[n - 1], ice[n - 1], levels[n - 1])
            stepper.set_ice(ice[n], levels[n])
            beds = stepper.bed_elevation
        expected = batch.bed_elevation.isel(time=n).values
        assert np.abs(beds.values - expected).max() <= 1e-9
        rate = stepper.uplift_rate().values
        assert np.abs(rate - batch.uplift_rate.isel(time=n).values).max() <= 1e-12
        if elastic:
            part = batch.elastic_deflection.isel(time=n).values
            assert np.abs(stepper.elastic_deflection.values - part).max() <= 1e-9
    assert np.abs(batch.deflection.values[-1]).max() > 10.0  # the test has something to compare
    if elastic:  # the elastic part is there, and smaller than the whole
        part = np.abs(batch.elastic_deflection.values[-1]).max()
        assert 0.1 < part < np.abs(batch.deflection.values[-1]).max()


def test_the_old_hand_coupling_pattern_is_far_from_the_batch_result():
    # Why IceStepper exists (issue 17): a load held over each step and evaluated on the bed
    # of its start, without re-evaluating the load on the new bed, differs from
    # ice_response by metres; IceStepper does not.
    grid, bed, ice, levels = _marine_history()
    plate = Plate(te=40e3, infill_density=0.0)
    batch = ice_response(ice, bed, plate, xr.DataArray(levels, dims="time"), edges="periodic")
    hand = ResponseStepper(grid, plate, interpolation="previous", edges="periodic")
    times = ice.time.values
    for n in range(1, times.size):
        w = hand.deflection
        load = bed_stress(ice[n].values, bed.values - w.values, levels[n]) - bed_stress(
            0.0, bed.values, 0.0
        )
        hand.advance(times[n] - times[n - 1], load)
    off = np.abs(bed.values - hand.deflection.values - batch.bed_elevation.values[-1]).max()
    assert off > 1.0


def _run(stepper, steps, start=0):
    """Advance with a changing ice cap and sea level; the beds and rates of every step."""
    grid = stepper.bed_elevation
    cap = disc_height(grid, 300e3, 1.0).values
    out = []
    for k in range(start, start + steps):
        thickness = 2500.0 * cap * abs(np.sin(0.4 * (k + 1)))
        bed = stepper.advance(150.0, thickness, -20.0 * np.sin(0.3 * k))
        out.append((bed.values, stepper.uplift_rate().values))
    return out


@pytest.mark.parametrize(
    ("te", "model", "edges", "elastic"),
    [
        ("constant", "half-space", "periodic", False),
        ("constant", "relaxing", "periodic", False),
        ("grid", "half-space", "periodic", False),
        ("grid", "relaxing", "periodic", False),
        ("constant", "half-space", "infinite", False),  # the default: far field on
        ("constant", "half-space", "infinite", True),
        ("grid", "half-space", "infinite", False),
        ("grid", "relaxing", "infinite", True),
    ],
)
def test_a_restored_ice_stepper_continues_bit_for_bit(tmp_path, te, model, edges, elastic):
    grid = empty_grid(24, 24, 40e3)
    bed = 150.0 - 2e-3 * np.abs(grid.x) + 0.0 * grid
    te_value = 30e3 if te == "constant" else (20e3 + 20e3 * (grid.x > 0) + 0.0 * grid).T
    plate = Plate(te=te_value, infill_density=0.0)
    stepper = IceStepper(bed.transpose("y", "x"), plate, model, edges=edges, elastic=elastic)
    far = getattr(stepper.stepper._engine, "far", None)
    assert (far is not None) == (model == "half-space" and edges == "infinite")
    with warnings.catch_warnings():  # the cap comes close to the edge of the small grid
        warnings.simplefilter("ignore", GridflexWarning)
        _run(stepper, 3)
    if far is not None:  # the far field holds state that the file must keep
        assert np.abs(far.state).max() > 0 and np.abs(far.moments).max() > 0
    path = stepper.save(tmp_path / "state.nc")
    restored = IceStepper.restore(path)
    assert set(vars(restored)) == set(vars(stepper))  # restore sets every attribute
    assert np.array_equal(restored.uplift_rate().values, stepper.uplift_rate().values)
    assert np.array_equal(restored.bed_elevation.values, stepper.bed_elevation.values)
    assert restored.time == stepper.time == 450.0
    ours, theirs = _run(stepper, 4, 3), _run(restored, 4, 3)
    for (bed_a, rate_a), (bed_b, rate_b) in zip(ours, theirs):
        assert np.array_equal(bed_a, bed_b)
        assert np.array_equal(rate_a, rate_b)
    assert restored.describe()["time_model"] == model
    assert restored.elastic == elastic
    assert np.array_equal(restored.elastic_deflection.values, stepper.elastic_deflection.values)
    if elastic:
        assert np.abs(stepper.elastic_deflection.values).max() > 0.1
    if te == "grid":
        assert isinstance(restored.stepper._engine, VariableRelaxation)


@pytest.mark.parametrize("elastic", [False, True])
def test_a_restored_response_stepper_continues_bit_for_bit(tmp_path, elastic):
    grid = empty_grid(32, 32, 50e3)
    load = disc_height(grid, 400e3, 9e6)
    plate = Plate(te=50e3, infill_density=0.0)
    stepper = ResponseStepper(grid, plate, load=load * 0.5, elastic=elastic)
    assert stepper._engine.far is not None  # the default padded half-space
    for k in range(3):
        stepper.advance(100.0 * (k + 1), load * (1 + 0.1 * k))
    stepper.save(tmp_path / "plate.nc")
    restored = ResponseStepper.restore(tmp_path / "plate.nc")
    # right after the restore, before any step: the same state, rate and elastic part
    for name in ("deflection", "elastic_deflection", "equilibrium", "uplift_rate"):
        now = getattr(stepper, name)
        now = now() if callable(now) else now
        then = getattr(restored, name)
        then = then() if callable(then) else then
        assert np.array_equal(now.values, then.values), name
    for k in range(3):
        a = stepper.advance(250.0, load * (0.8 - 0.2 * k))
        b = restored.advance(250.0, load * (0.8 - 0.2 * k))
        assert np.array_equal(a.values, b.values)
        assert np.array_equal(stepper.uplift_rate().values, restored.uplift_rate().values)
    assert restored.time == stepper.time
    assert restored.elastic == elastic
    ours, theirs = stepper.describe(), restored.describe()
    assert ours.keys() == theirs.keys()
    assert all(np.array_equal(ours[key], theirs[key]) for key in ours)


def test_restore_refuses_files_that_are_no_stepper_state(tmp_path):
    grid = empty_grid(16, 16, 50e3)
    plain = tmp_path / "plain.nc"
    xr.Dataset({"deflection": grid}).to_netcdf(plain)
    with pytest.raises(InputError, match="plain.nc: not a gridflex stepper state"):
        ResponseStepper.restore(plain)
    text = tmp_path / "notes.nc"
    text.write_text("not netcdf")
    with pytest.raises(InputError, match="notes.nc"):
        IceStepper.restore(text)
    with pytest.raises(InputError, match="missing.nc: file not found"):
        IceStepper.restore(tmp_path / "missing.nc")
    stepper = ResponseStepper(grid, Plate(te=10e3, infill_density=0.0))
    stepper.save(tmp_path / "plate.nc")
    with pytest.raises(InputError, match="plate.nc: holds the state of a ResponseStepper"):
        IceStepper.restore(tmp_path / "plate.nc")
    with pytest.raises(InputError, match="exists"):
        stepper.save(tmp_path / "plate.nc")  # not replaced unless asked
    stepper.save(tmp_path / "plate.nc", overwrite=True)


def test_every_engine_field_is_saved_or_rebuilt():
    # A field added to an engine must be classified as state (saved) or as rebuilt from the
    # settings; otherwise a restored run could silently differ (common practice).
    for engine in (SpectralRelaxation, VariableRelaxation, FarField):
        assert not check_engine_fields(engine), check_engine_fields(engine)
        state, derived = ENGINE_FIELDS[engine]
        assert (state | derived) == {f.name for f in fields(engine)}


def test_every_stepper_argument_is_saved():
    parameters = set(inspect.signature(ResponseStepper.__init__).parameters)
    assert parameters - {"self", "grid", "plate", "load"} == set(SAVED_SETTINGS)


def test_every_stepper_attribute_is_saved_or_rebuilt():
    # As for the engines (common practice): an attribute added to ResponseStepper (such as
    # the elastic Earth's state) must be listed as saved or rebuilt.
    grid = empty_grid(16, 16, 50e3)
    stepper = ResponseStepper(
        grid, Plate(te=10e3, infill_density=0.0), load=disc_height(grid, 200e3, 1e6), elastic=True
    )
    stepper.advance(100.0, disc_height(grid, 200e3, 2e6))
    saved, rebuilt = STEPPER_FIELDS
    assert set(vars(stepper)) == saved | rebuilt


def test_output_times_pick_the_history_and_refuse_times_outside():
    grid, bed, ice, levels = _marine_history()
    plate = Plate(te=40e3, infill_density=0.0)
    sea = xr.DataArray(levels, dims="time")
    full = ice_response(ice, bed, plate, sea, edges="periodic")
    some = ice_response(
        ice, bed, plate, sea, edges="periodic", output_times=ice.time.values[[2, 5, 8]]
    )
    assert np.array_equal(some.time.values, ice.time.values[[2, 5, 8]])
    for name in ("deflection", "uplift_rate", "load", "grounded", "sea_level"):
        assert np.array_equal(some[name].values, full[name].values[[2, 5, 8]]), name
    # a time between two of the history's ends a step there, with the ice in between
    # linear in time: the same as a history that has that time
    between = ice_response(ice, bed, plate, sea, edges="periodic", output_times=[250.0, 4000.0])
    assert between.time.values.tolist() == [250.0, 4000.0]
    middle = ice.isel(time=0) + 0.5 * (ice.isel(time=1) - ice.isel(time=0))
    longer = xr.concat(
        [ice.isel(time=[0]), middle.expand_dims(time=[250.0]), ice.isel(time=slice(1, None))],
        "time",
    )
    sea_longer = xr.DataArray(np.insert(levels, 1, 0.5 * (levels[0] + levels[1])), dims="time")
    with_time = ice_response(longer, bed, plate, sea_longer, edges="periodic")
    for at, n in ((0, 1), (1, -1)):
        gap = np.abs(between.deflection.values[at] - with_time.deflection.values[n]).max()
        assert gap <= 1e-9
    with pytest.raises(InputError, match="output_times: 4500 years lies outside the history"):
        ice_response(ice, bed, plate, sea, output_times=[1000.0, 4500.0])
