"""Load stresses from layers of material."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from gridflex import InputError, pressure_from_height, pressure_from_layers


def _grid(value: float) -> xr.DataArray:
    return xr.DataArray(
        np.full((4, 5), value),
        dims=("y", "x"),
        coords={"y": np.arange(4.0) * 1e3, "x": np.arange(5.0) * 1e3},
    )


def test_pressure_is_rho_g_h():
    # q = rho g h for a layer in air (common practice; PHYSICS.md section 0, rule 3)
    q = pressure_from_height(_grid(2000.0), 910.0)
    np.testing.assert_allclose(q.values, 910.0 * 9.81 * 2000.0, rtol=1e-15)
    assert q.attrs["units"] == "Pa"
    assert list(q.coords) == ["y", "x"]


def test_layers_add_up():
    q = pressure_from_layers([(_grid(1000.0), 910.0), (_grid(50.0), 2400.0)], gravity=10.0)
    np.testing.assert_allclose(q.values, 10.0 * (910.0 * 1000.0 + 2400.0 * 50.0), rtol=1e-15)


def test_layer_errors():
    with pytest.raises(InputError, match="at least one"):
        pressure_from_layers([])
    with pytest.raises(InputError, match="height must be an xarray.DataArray"):
        pressure_from_height(np.ones((4, 4)), 1000.0)
    with pytest.raises(InputError, match="density must be a finite number"):
        pressure_from_height(_grid(1.0), float("nan"))
    other = xr.DataArray(np.ones((3, 3)), dims=("y", "x"))
    with pytest.raises(InputError, match="layer 1 has shape"):
        pressure_from_layers([(_grid(1.0), 1.0), (other, 1.0)])
