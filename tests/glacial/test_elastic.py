"""The elastic Earth: the half-space response alone and inside the time-dependent runs."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import (
    InputError,
    Plate,
    ResponseStepper,
    elastic_halfspace_response,
    ice_response,
    viscous_response,
)
from gridflex.synthetic import disc_height, empty_grid

E, NU, P, A = 1.0e11, 0.25, 1.0e6, 100e3


def test_uniform_disc_centre_and_edge():
    # Uniformly loaded circular area on an elastic half-space (Timoshenko & Goodier 1951,
    # Theory of Elasticity, the semi-infinite solid): w(0) = 2 (1 - nu^2) p a / E and
    # w(a) = 4 (1 - nu^2) p a / (pi E). Issue 17 target 1 %; seen -0.03 % and +0.06 %
    # (4 km cells, the disc sub-sampled 8 x 8 per cell).
    grid = empty_grid(100, 100, 4e3)  # cell centres at +-2 km about the disc centre
    w = elastic_halfspace_response(disc_height(grid, A, P), E, NU)
    assert w.name == "elastic_deflection" and w.attrs["units"] == "m"
    centre = float(w.values[49:51, 49:51].mean())
    assert centre == pytest.approx(2 * (1 - NU**2) * P * A / E, rel=0.01)
    row = w.values[50, 50:]
    r = np.hypot(grid.x.values[50:], grid.y.values[50])
    edge = float(np.interp(A, r, row))
    assert edge == pytest.approx(4 * (1 - NU**2) * P * A / (np.pi * E), rel=0.01)
    # positive down under a downward load, and decaying like 1/r outside (Boussinesq)
    assert w.values.min() > 0


def test_bad_load_is_refused():
    grid = empty_grid(8, 8, 1e3)
    bad = grid.copy()
    bad[2, 2] = np.nan
    with pytest.raises(InputError, match="NaN"):
        elastic_halfspace_response(bad)


def _ramp(grid, load, times, share):
    return xr.DataArray(
        np.asarray(share)[:, None, None] * load.values[None],
        dims=("time", "y", "x"),
        coords={"time": times, "y": grid.y, "x": grid.x},
    )


def test_elastic_part_adds_to_the_viscous_deflection_at_once():
    # The elastic Earth responds to the load of each time (Boussinesq), the mantle as
    # before: deflection = viscous-only run + elastic_halfspace_response(load) (linear
    # superposition, common practice) to round-off; the uplift rate is -dw/dt of the
    # written deflection for a load linear in time (the elastic rate exact then).
    grid = empty_grid(40, 40, 25e3)
    load = disc_height(grid, 250e3, 1500.0) * (910.0 * 9.81)
    times = np.arange(0.0, 2001.0, 100.0)
    history = _ramp(grid, load, times, times / 2000.0)
    plate = Plate(te=40e3, infill_density=0.0)
    both = viscous_response(
        history, plate, elastic=True, elastic_youngs_modulus=E, elastic_poisson_ratio=NU
    )
    alone = viscous_response(history, plate)
    for n in (0, 7, 20):
        part = elastic_halfspace_response(history.isel(time=n, drop=True), E, NU).values
        assert_allclose(both.elastic_deflection.values[n], part, rtol=0, atol=1e-12 * part.max())
        assert_allclose(
            both.deflection.values[n],
            alone.deflection.values[n] + part,
            rtol=0,
            atol=1e-10 * np.abs(both.deflection.values[n]).max(),
        )
    assert both.attrs["elastic_earth"] == "half-space (Boussinesq)"
    assert both.attrs["elastic_youngs_modulus"] == E
    w, rate = both.deflection.values, both.uplift_rate.values
    dw_dt = (w[2:] - w[:-2]) / (2 * 100.0)
    assert np.abs(rate[1:-1] + dw_dt).max() < 0.01 * np.abs(rate).max()
    # the elastic part is a real share of the rate (about a third here)
    elastic_rate = both.elastic_deflection.values[-1] / 2000.0
    assert np.abs(elastic_rate).max() > 0.1 * np.abs(rate[-1]).max()


def test_stepper_and_ice_response_carry_the_elastic_part():
    grid = empty_grid(32, 32, 30e3)
    ice = disc_height(grid, 200e3, 1000.0)
    times = np.array([0.0, 500.0, 1000.0])
    thickness = _ramp(grid, ice, times, [0.0, 0.5, 1.0])
    bed = xr.full_like(ice, 500.0)  # land: no ocean
    plate = Plate(te=30e3, infill_density=0.0)
    out = ice_response(thickness, bed, plate, elastic=True)
    q = thickness.isel(time=2, drop=True) * (910.0 * plate.gravity)
    part = elastic_halfspace_response(q).values  # default moduli (PREM uppermost mantle)
    assert_allclose(out.elastic_deflection.values[2], part, rtol=0, atol=1e-12 * part.max())
    assert_allclose(out.bed_elevation.values[2], 500.0 - out.deflection.values[2])
    stepper = ResponseStepper(grid, plate, elastic=True)
    stepper.advance(1000.0, q)
    assert_allclose(stepper.elastic_deflection.values, part, rtol=0, atol=1e-12 * part.max())
    # the elastic rate of the step: its change over the step, in m/yr, positive up
    viscous = ResponseStepper(grid, plate)
    viscous.advance(1000.0, q)
    difference = stepper.uplift_rate().values - viscous.uplift_rate().values
    assert_allclose(difference, -part / 1000.0, rtol=0, atol=1e-9 * part.max() / 1000.0)


def test_elastic_needs_infinite_edges_and_a_flag():
    grid = empty_grid(16, 16, 10e3)
    plate = Plate(te=20e3, infill_density=0.0)
    with pytest.raises(InputError, match="edges='infinite'"):
        ResponseStepper(grid, plate, elastic=True, edges="periodic")
    with pytest.raises(InputError, match="elastic must be true or false"):
        ResponseStepper(grid, plate, elastic="yes")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="poisson_ratio"):
        ResponseStepper(grid, plate, elastic=True, elastic_poisson_ratio=0.7)
