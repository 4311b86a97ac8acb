"""NetCDF in and out from several threads (dask's threaded scheduler calls readers)."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import xarray as xr
from numpy.testing import assert_array_equal

from gridflex.io.netcdf import read_result, write_netcdf
from gridflex.io.rasters import read_raster
from tests.helpers import make_grid


def test_reads_and_writes_from_many_threads_agree(tmp_path):
    # netCDF-C/HDF5 are not thread-safe (common practice: serialise calls with one lock);
    # before the lock, concurrent opens and closes crashed the test process
    grid = make_grid(64, 48, 1e3)
    values = np.random.default_rng(3).normal(size=grid.shape)
    field = grid.copy(data=values).rename("thickness").assign_attrs(units="m")
    source = tmp_path / "thickness.nc"
    xr.Dataset({"thickness": field}).to_netcdf(source)

    def read_then_write(i: int) -> xr.DataArray:
        da = read_raster(source, "thickness")
        out = write_netcdf(xr.Dataset({"deflection": da}), tmp_path / f"out_{i}.nc")
        return read_result(out)["deflection"]

    with ThreadPoolExecutor(max_workers=4) as pool:
        results = list(pool.map(read_then_write, range(40)))
    expected = field.sortby("y")
    for got in results:
        got = got.sortby("y")
        assert_array_equal(got["x"], expected["x"])
        assert_array_equal(got["y"], expected["y"])
        assert_array_equal(got.values, expected.values)
