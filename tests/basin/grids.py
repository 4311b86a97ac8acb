"""Small grids shared by the basin tests: 48 x 48 cells of 6 km."""

import numpy as np
import xarray as xr

N = 48
DX = 6e3
TOL = 1e-7  # m, infill fixed-point tolerance used in these tests


def grid(values):
    coord = np.arange(N) * DX
    return xr.DataArray(values, dims=("y", "x"), coords={"y": coord, "x": coord})


def lens(peak, radius=45e3):
    """A smooth invented sediment lens (m) in the middle of the grid."""
    coord = np.arange(N) * DX
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = ((x - coord.mean()) ** 2 + (y - coord.mean()) ** 2) / radius**2
    return grid(peak * np.exp(-r2) * (r2 < 9))


def flat(value):
    return grid(np.full((N, N), float(value)))
