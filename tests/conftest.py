"""Small grid fixtures shared by the tests."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr


def make_grid(ny: int, nx: int, dx: float, dy: float | None = None) -> xr.DataArray:
    """Zeros on a (ny, nx) grid of spacing dx (and dy) centred on the origin."""
    dy = dx if dy is None else dy
    y = (np.arange(ny) - ny // 2) * dy
    x = (np.arange(nx) - nx // 2) * dx
    return xr.DataArray(np.zeros((ny, nx)), dims=("y", "x"), coords={"y": y, "x": x})


@pytest.fixture
def small_load() -> xr.DataArray:
    """A smooth 10 MPa bump on a 64 x 64 grid of 2 km cells."""
    grid = make_grid(64, 64, 2e3)
    r2 = grid.x**2 + grid.y**2
    return (1e7 * np.exp(-r2 / (2 * (8e3) ** 2))).transpose("y", "x")
