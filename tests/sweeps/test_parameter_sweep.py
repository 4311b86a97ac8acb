"""Tests of gridflex.sweeps.parameter_sweep."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

import gridflex
from gridflex.constants import DEFAULT_GRAVITY
from gridflex.errors import InputError
from gridflex.sweeps.parameter_sweep import sweep

N, DX = 24, 10e3


def _load(load_density: float = 1770.0) -> xr.DataArray:
    """Invented Gaussian load, 2 km high, of contrast *load_density* (kg/m3)."""
    x = (np.arange(N) - N / 2) * DX
    xx, yy = np.meshgrid(x, x)
    height = 2000.0 * np.exp(-(xx**2 + yy**2) / (2 * 25e3**2))
    return xr.DataArray(
        load_density * DEFAULT_GRAVITY * height, dims=("y", "x"), coords={"y": x, "x": x}
    )


PLATE = gridflex.Plate(te=10e3)
TES = [5e3, 12e3, 30e3]


@pytest.fixture(scope="module")
def threaded() -> xr.Dataset:
    return sweep(_load(), PLATE, {"te": TES, "inplane_force": [0.0, -1e12]})


def test_three_te_equal_three_runs():
    calls = []
    ds = sweep(
        _load(), PLATE, {"te": TES}, progress=lambda done, total: calls.append((done, total))
    )
    assert ds["deflection"].dims == ("te", "y", "x")
    assert_allclose(ds["te"], TES)
    for te in TES:
        single = gridflex.solve(_load(), PLATE.with_te(te))["deflection"]
        # the same solver on the same input: identical to round-off (common practice)
        assert_allclose(ds["deflection"].sel(te=te), single, rtol=1e-12, atol=0)
    assert calls[-1] == (3, 3) and len(calls) == 3
    assert ds.attrs["swept_parameters"] == "te"
    assert "plate_te" not in ds.attrs and "plate_rigidity" not in ds.attrs


def test_two_parameters_and_forces(threaded):
    ds = threaded
    assert ds["deflection"].dims == ("te", "inplane_force", "y", "x")
    assert ds["force_balance_residual"].shape == (3, 2)
    # spectral force balance is exact to round-off (PHYSICS.md 2.3)
    assert float(ds["force_balance_residual"].max()) < 1e-12
    single = gridflex.solve(
        _load(), PLATE.with_te(12e3), inplane_force_x=-1e12, inplane_force_y=-1e12
    )["deflection"]
    assert_allclose(ds["deflection"].sel(te=12e3, inplane_force=-1e12), single, rtol=1e-12)
    # compression deepens the moat (PHYSICS.md 1.5: denominator D k^4 + N k^2 + drho g
    # decreases for N < 0)
    centre = ds["deflection"].isel(y=N // 2, x=N // 2)
    assert bool((centre.sel(inplane_force=-1e12) > centre.sel(inplane_force=0.0)).all())


def test_load_function_parameter():
    ds = sweep(_load, PLATE, {"load_density": [1000.0, 2000.0], "mantle_density": [3200.0, 3300.0]})
    assert ds["deflection"].dims == ("load_density", "mantle_density", "y", "x")
    # linear plate: deflection proportional to the load (Turcotte & Schubert 2002, ch. 3)
    ratio = ds["deflection"].sel(load_density=2000.0) / ds["deflection"].sel(load_density=1000.0)
    assert_allclose(ratio, 2.0, rtol=1e-12)


def test_local_cluster_equals_threads(threaded):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        with distributed.Client(cluster) as client:
            assert len(client.scheduler_info()["workers"]) == 2
        on_cluster = sweep(
            _load(),
            PLATE,
            {"te": TES, "inplane_force": [0.0, -1e12]},
            scheduler=cluster.scheduler_address,
        )
    # same computation in worker processes: identical to round-off (common practice)
    assert_allclose(on_cluster["deflection"], threaded["deflection"], rtol=1e-12, atol=0)
    xr.testing.assert_identical(
        on_cluster.drop_vars("deflection"), threaded.drop_vars("deflection")
    )


@pytest.mark.parametrize(
    ("parameters", "match"),
    [
        ({"density": [1.0]}, "cannot sweep 'density'"),
        ({"te": [1e3, 1e3]}, "repeat a value"),
        ({"te": []}, "non-empty"),
        ({}, "non-empty mapping"),
        ({"te": [1e3, -5.0]}, "te must be a finite number >= 0"),
        ({"inplane_force": [0.0], "inplane_force_x": [1.0]}, "not both"),
    ],
)
def test_bad_parameters(parameters, match):
    with pytest.raises(InputError, match=match):
        sweep(_load(), PLATE, parameters)


def test_bad_scheduler():
    with pytest.raises(InputError, match="scheduler must be"):
        sweep(_load(), PLATE, {"te": [1e3]}, scheduler=42)


def test_edge_load_warned_once_on_the_caller_side():
    cut = _load().isel(x=slice(0, N // 2 + 1))  # the load is cut by the grid edge
    with pytest.warns(gridflex.EdgeLoadWarning, match="grid edge") as record:
        sweep(cut, PLATE, {"te": TES})
    assert len([w for w in record if issubclass(w.category, gridflex.EdgeLoadWarning)]) == 1


def test_bad_edges():
    with pytest.raises(InputError, match="edges must be one of"):
        sweep(_load(), PLATE, {"te": [1e3]}, edges="mirror")
