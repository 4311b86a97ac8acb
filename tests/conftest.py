"""Fixtures shared by the tests (helper functions live in ``tests/helpers.py``)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from tests.helpers import make_grid


@pytest.fixture
def small_load() -> xr.DataArray:
    """A smooth 10 MPa bump on a 64 x 64 grid of 2 km cells."""
    grid = make_grid(64, 64, 2e3)
    r2 = grid.x**2 + grid.y**2
    return (1e7 * np.exp(-r2 / (2 * (8e3) ** 2))).transpose("y", "x")
