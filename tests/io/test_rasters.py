"""Raster files in and out (gridflex.io.rasters): real GeoTIFF and NetCDF files in tmp_path."""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine
from numpy.testing import assert_allclose, assert_array_equal
from rasterio.crs import CRS

from gridflex import InputError
from gridflex.gis.geometry import LONLAT, GridGeometry, geometry_of
from gridflex.io.rasters import read_raster, write_geotiff

UTM33 = CRS.from_epsg(32633)


def _lonlat_array(name="height") -> xr.DataArray:
    y = 21.975 - 0.05 * np.arange(40)
    x = -29.975 + 0.05 * np.arange(60)
    values = np.add.outer(np.sin(y), np.cos(x)) * 100.0
    values[0, 0] = np.nan
    return xr.DataArray(
        values,
        dims=("y", "x"),
        coords={"y": y, "x": x},
        name=name,
        attrs={"units": "m", "long_name": "surface height"},
    )


def _write_tif(path, values, transform, crs, nodata=None, dtype="float64", count=1):
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=values.shape[-1],
        height=values.shape[-2],
        count=count,
        dtype=dtype,
        crs=crs,
        transform=transform,
        nodata=nodata,
    ) as dst:
        dst.write(values.reshape(count, *values.shape[-2:]))


# --- GeoTIFF -----------------------------------------------------------------------------------


def test_geotiff_round_trip_keeps_crs_transform_and_shape(tmp_path):
    da = _lonlat_array()
    path = write_geotiff(da, tmp_path / "height.tif", LONLAT)
    with rasterio.open(path) as src:
        assert src.crs == LONLAT
        assert src.transform.almost_equals(Affine(0.05, 0, -30.0, 0, -0.05, 22.0), precision=1e-12)
        assert src.shape == (40, 60)
        assert src.dtypes == ("float64",)
        assert np.isnan(src.nodata)
        assert src.descriptions == ("height",)
        assert src.units == ("m",)
        assert src.tags(1)["long_name"] == "surface height"
    back = read_raster(path)
    assert back.name == "height" and back.dims == ("y", "x")
    assert back.attrs["units"] == "m"
    assert CRS.from_wkt(back.attrs["crs_wkt"]) == LONLAT
    assert_allclose(back["y"], da["y"], rtol=0, atol=1e-12)
    assert_allclose(back["x"], da["x"], rtol=0, atol=1e-12)
    assert_array_equal(back.values, da.values)  # float64 written exactly, NaN kept
    assert geometry_of(back) == GridGeometry(LONLAT, src.transform, (40, 60))


def test_geotiff_projected_float32_with_increasing_y_is_written_north_up(tmp_path):
    y = 5.0e6 + 2000.0 * np.arange(30)  # increasing: south-up order
    x = 4.0e5 + 2000.0 * np.arange(20)
    values = np.arange(600, dtype=np.float32).reshape(30, 20)
    da = xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name="deflection")
    path = write_geotiff(da, tmp_path / "w.tif", "EPSG:32633", nodata=-9999.0)
    with rasterio.open(path) as src:
        assert src.crs == UTM33 and src.dtypes == ("float32",) and src.nodata == -9999.0
        assert src.transform == Affine(2000.0, 0, 399000.0, 0, -2000.0, 5.0e6 + 59000.0)
    back = read_raster(path)
    assert back["y"].values[0] > back["y"].values[-1]
    assert_array_equal(back.sortby("y").values, values)  # same value at the same place
    assert back["x"].attrs["units"] == "m"


def test_gdal_nodata_becomes_nan_and_values_float64(tmp_path):
    values = np.arange(48, dtype=np.int16).reshape(6, 8)
    values[2, 3] = -9999
    path = tmp_path / "ice.tif"
    _write_tif(path, values, Affine(1000.0, 0, 0.0, 0, -1000.0, 6000.0), UTM33, -9999, "int16")
    da = read_raster(path)
    assert da.dtype == np.float64
    assert np.isnan(da.values[2, 3]) and np.isfinite(da.values).sum() == 47
    assert da.name == "band1" and "units" not in da.attrs


def test_existing_output_is_not_overwritten(tmp_path):
    da = _lonlat_array()
    path = write_geotiff(da, tmp_path / "h.tif", LONLAT)
    with pytest.raises(InputError, match="output exists"):
        write_geotiff(da, path, LONLAT)
    with pytest.raises(InputError, match="overwrite an input"):
        write_geotiff(da, path, LONLAT, overwrite=True, inputs=[path])
    write_geotiff(da * 2, path, LONLAT, overwrite=True)
    assert_allclose(read_raster(path).values, da.values * 2)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["h.tif"]  # no temporary left over


# --- NetCDF ------------------------------------------------------------------------------------


def test_netcdf_with_cf_grid_mapping(tmp_path):
    y = 5.1e6 - 1000.0 * np.arange(12)
    x = 4.0e5 + 1000.0 * np.arange(16)
    values = np.linspace(0, 1, 192).reshape(12, 16)
    values[3, 4] = -1.0
    ds = xr.Dataset(
        {
            "thickness": (
                ("y", "x"),
                values,
                {"units": "m", "grid_mapping": "crs", "long_name": "ice thickness"},
            ),
            "crs": ((), 0, {"grid_mapping_name": "transverse_mercator", "crs_wkt": UTM33.to_wkt()}),
        },
        coords={"y": ("y", y, {"units": "m"}), "x": ("x", x, {"units": "m"})},
    )
    path = tmp_path / "ice.nc"
    ds.to_netcdf(path, encoding={"thickness": {"_FillValue": -1.0}})
    da = read_raster(path)  # the one gridded variable is chosen
    assert da.name == "thickness" and da.attrs["units"] == "m"
    assert CRS.from_wkt(da.attrs["crs_wkt"]) == UTM33
    assert np.isnan(da.values[3, 4])  # _FillValue
    g = geometry_of(da)
    assert g.transform == Affine(1000.0, 0, 399500.0, 0, -1000.0, 5.1e6 + 500.0)
    assert g.shape == (12, 16)


def test_netcdf_in_degrees_without_grid_mapping_is_lonlat(tmp_path):
    # dims stored (lon, lat): the reader puts them in (y, x) order
    lat = np.linspace(-10.0, -8.0, 9)
    lon = np.linspace(160.0, 163.0, 13)
    values = np.random.default_rng(0).normal(size=(13, 9))
    ds = xr.Dataset(
        {"load": (("lon", "lat"), values)},
        coords={
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    )
    path = tmp_path / "load.nc"
    ds.to_netcdf(path)
    with netCDF4.Dataset(path) as nc:
        assert nc["load"].dimensions == ("lon", "lat")
    da = read_raster(path, "load")
    assert da.dims == ("y", "x") and da.shape == (9, 13)
    assert CRS.from_wkt(da.attrs["crs_wkt"]) == LONLAT
    assert_allclose(da.values, values.T)
    assert geometry_of(da).is_geographic


def test_netcdf_lat_lon_names_without_units_are_degrees(tmp_path):
    ds = xr.Dataset(
        {"h": (("lat", "lon"), np.ones((4, 5)))},
        coords={"lat": np.linspace(1.0, 2.5, 4), "lon": np.linspace(3.0, 5.0, 5)},
    )
    path = tmp_path / "h.nc"
    ds.to_netcdf(path)
    da = read_raster(path)
    assert CRS.from_wkt(da.attrs["crs_wkt"]) == LONLAT
    assert da["x"].attrs["units"] == "degrees_east"


def test_netcdf_float32_coordinates_come_back_evenly_spaced(tmp_path):
    lon = (170.0 + 0.01 * np.arange(300)).astype(np.float32)  # float32 steps vary by ~1e-5
    lat = (-20.0 + 0.01 * np.arange(50)).astype(np.float32)
    ds = xr.Dataset(
        {"h": (("lat", "lon"), np.ones((50, 300)))},
        coords={
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(tmp_path / "f.nc")
    da = read_raster(tmp_path / "f.nc")
    steps = np.diff(da["x"].values)
    assert np.ptp(steps) < 1e-12  # exactly even (round-off), common practice
    assert_allclose(da["x"].values, lon, rtol=0, atol=1e-4)  # float32 precision at 173 deg
    ds.assign_coords(lon=np.r_[lon[:-1], np.float32(180.0)]).to_netcdf(tmp_path / "f2.nc")
    with pytest.raises(InputError, match=r"f2\.nc: variable 'h': coordinate 'lon': not evenly"):
        read_raster(tmp_path / "f2.nc", irregular="refuse")


def test_netcdf_metric_km_without_crs(tmp_path):
    ds = xr.Dataset(
        {"h": (("y", "x"), np.ones((5, 6)), {"units": "m"})},
        coords={
            "y": ("y", np.arange(5.0) * 2, {"units": "km"}),
            "x": ("x", np.arange(6.0) * 2, {"units": "km"}),
        },
    )
    path = tmp_path / "h.nc"
    ds.to_netcdf(path)
    da = read_raster(path)
    assert da.attrs["crs_wkt"] == ""
    assert_allclose(da["x"], np.arange(6.0) * 2000.0)  # km -> m
    g = geometry_of(da)
    assert g.crs is None and g.cell_size_metres() == (2000.0, 2000.0)


# --- bad inputs: one clear InputError each -----------------------------------------------------


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nothere\.tif: file not found"):
        read_raster(tmp_path / "nothere.tif")


@pytest.mark.parametrize("name", ["broken.tif", "broken.nc"])
def test_corrupt_file(tmp_path, name):
    path = tmp_path / name
    path.write_bytes(b"II*\x00 this is not really a raster" * 10)
    with pytest.raises(InputError, match=rf"{name}: cannot read as"):
        read_raster(path)


def test_truncated_geotiff(tmp_path):
    good = write_geotiff(_lonlat_array(), tmp_path / "good.tif", LONLAT)
    bad = tmp_path / "cut.tif"
    bad.write_bytes(good.read_bytes()[:200])
    with pytest.raises(InputError, match=r"cut\.tif: cannot read as a raster"):
        read_raster(bad).values.sum()


def test_all_nodata_layer(tmp_path):
    path = tmp_path / "empty.tif"
    _write_tif(path, np.full((5, 5), -1.0), Affine(1e3, 0, 0, 0, -1e3, 5e3), UTM33, -1.0)
    with pytest.raises(InputError, match=r"empty\.tif: 'band1' has no valid values"):
        read_raster(path)


def test_unknown_crs_in_netcdf(tmp_path):
    ds = xr.Dataset(
        {
            "h": (("y", "x"), np.ones((4, 4)), {"grid_mapping": "crs"}),
            "crs": ((), 0, {"crs_wkt": "PROJCS[nonsense]"}),
        },
        coords={"y": np.arange(4.0), "x": np.arange(4.0)},
    )
    path = tmp_path / "odd.nc"
    ds.to_netcdf(path)
    with pytest.raises(
        InputError,
        match=r"odd\.nc: variable 'h': grid mapping 'crs': unknown "
        r"coordinate reference system",
    ):
        read_raster(path)


def test_unknown_variable_lists_the_valid_ones(tmp_path):
    ds = xr.Dataset(
        {"a": (("y", "x"), np.ones((4, 4))), "b": (("y", "x"), np.ones((4, 4)))},
        coords={"y": np.arange(4.0), "x": np.arange(4.0)},
    )
    path = tmp_path / "two.nc"
    ds.to_netcdf(path)
    with pytest.raises(InputError, match=r"two\.nc: no variable 'c'; variables are 'a', 'b'"):
        read_raster(path, "c")
    with pytest.raises(InputError, match=r"two\.nc: choose a variable .* 'a', 'b'"):
        read_raster(path)


def test_unknown_band_and_multiband_without_choice(tmp_path):
    path = tmp_path / "two.tif"
    _write_tif(path, np.ones((2, 4, 4)), Affine(1, 0, 0, 0, -1, 4), UTM33, count=2)
    with pytest.raises(InputError, match=r"two\.tif: has 2 bands; choose one .*'band1', 'band2'"):
        read_raster(path)
    with pytest.raises(InputError, match=r"two\.tif: no band 'band3'"):
        read_raster(path, "band3")
    assert read_raster(path, "2").name == "band2"


def test_not_two_dimensional(tmp_path):
    ds = xr.Dataset(
        {"h": (("t", "y", "x"), np.ones((3, 4, 4)))},
        coords={"t": [0, 1, 2], "y": np.arange(4.0), "x": np.arange(4.0)},
    )
    path = tmp_path / "cube.nc"
    ds.to_netcdf(path)
    with pytest.raises(InputError, match=r"cube\.nc: variable 'h': expected a 2-D grid"):
        read_raster(path)
    ds.isel(t=[0]).to_netcdf(tmp_path / "one.nc")  # a single time step is a 2-D grid
    assert read_raster(tmp_path / "one.nc").shape == (4, 4)


def test_rotated_geotiff(tmp_path):
    path = tmp_path / "rot.tif"
    _write_tif(path, np.ones((4, 4)), Affine(1000, 100, 0, 100, -1000, 4000), UTM33)
    with pytest.raises(InputError, match=r"rot\.tif: the grid is rotated or sheared"):
        read_raster(path)


def test_geotiff_with_a_crs_not_on_the_earth(tmp_path):
    path = tmp_path / "site.tif"
    _write_tif(
        path,
        np.ones((4, 4)),
        Affine(1, 0, 0, 0, -1, 4),
        CRS.from_wkt('LOCAL_CS["site grid",UNIT["metre",1]]'),
    )
    with pytest.raises(InputError, match=r"site\.tif: CRS: .* neither geographic nor projected"):
        read_raster(path)


def test_file_type_comes_from_its_bytes(tmp_path):
    # a GeoTIFF named .nc is still read by GDAL; bounds variables are not candidates
    path = write_geotiff(_lonlat_array(), tmp_path / "misnamed.nc", LONLAT)
    assert read_raster(path).shape == (40, 60)
    ds = xr.Dataset(
        {"h": (("y", "x"), np.ones((4, 4))), "x_bnds": (("x", "nv"), np.zeros((4, 2)))},
        coords={"y": np.arange(4.0), "x": ("x", np.arange(4.0), {"bounds": "x_bnds"})},
    )
    ds.to_netcdf(tmp_path / "b.nc")
    assert read_raster(tmp_path / "b.nc").name == "h"


# --- missing values (CF conventions 1.8, section 2.5.1; netCDF default fill values) ----------


def _grid_file(path, values, dtype="f4", fill_value=None, attrs=None, rows=None):
    """A NetCDF file written with netCDF4 itself; only *rows* of the variable are written
    (the rest keep whatever netCDF-C fills in)."""
    ny, nx = values.shape
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("y", ny)
        nc.createDimension("x", nx)
        for name, n in (("y", ny), ("x", nx)):
            coord = nc.createVariable(name, "f8", (name,))
            coord[:] = 1000.0 * np.arange(n)
            coord.units = "m"
        var = nc.createVariable("h", dtype, ("y", "x"), fill_value=fill_value)
        var.set_auto_maskandscale(False)
        for key, value in (attrs or {}).items():
            var.setncattr(key, value)
        written = slice(None) if rows is None else rows
        var[written, :] = values[written]
    return path


def test_netcdf_default_fill_value_is_missing(tmp_path):
    # netCDF-C fills never-written cells of a variable without _FillValue with its type's
    # default fill, 9.969209968386869e36 for float (netCDF-C default fill values, from
    # memory; netCDF4.default_fillvals)
    path = _grid_file(tmp_path / "part.nc", np.ones((6, 5)), rows=slice(0, 4))
    with netCDF4.Dataset(path) as nc:
        assert "_FillValue" not in nc["h"].ncattrs()
        nc["h"].set_auto_mask(False)
        assert nc["h"][5, 0] == np.float32(netCDF4.default_fillvals["f4"])
    da = read_raster(path)
    assert np.isnan(da.values).sum() == 10  # never 1e37 m of rock
    assert_allclose(da.values[np.isfinite(da.values)], 1.0)


def test_netcdf_default_fill_of_a_scaled_integer_grid(tmp_path):
    # int16 default fill -32767 (netCDF-C, from memory); scale_factor and add_offset
    # applied after masking (CF conventions 1.8, section 8.1)
    values = np.arange(30, dtype=np.int16).reshape(6, 5)
    attrs = {"scale_factor": 0.5, "add_offset": 100.0, "units": "m"}
    da = read_raster(_grid_file(tmp_path / "i.nc", values, "i2", attrs=attrs, rows=slice(0, 3)))
    assert_allclose(da.values[:3], values[:3] * 0.5 + 100.0)
    assert np.isnan(da.values[3:]).all()


def test_netcdf_declared_fill_missing_value_and_valid_range(tmp_path):
    # CF conventions 1.8, section 2.5.1: _FillValue, missing_value and valid_range
    values = np.array([[1.0, -9999.0, 3.0], [-1.0, 5.0, 9e3], [2.0, 2.0, 2.0]])
    attrs = {"missing_value": -1.0, "valid_range": np.array([0.0, 8000.0])}
    da = read_raster(_grid_file(tmp_path / "m.nc", values, "f8", -9999.0, attrs))
    assert_array_equal(np.isnan(da.values), [[0, 1, 0], [1, 0, 1], [0, 0, 0]])
    # a declared _FillValue other than the default: default-valued cells are not missing,
    # but such a value is refused as an undeclared fill rather than read as 1e37 m
    values[2, 2] = netCDF4.default_fillvals["f8"]
    with pytest.raises(InputError, match=r"d\.nc: 'h' has 1 cell\(s\) holding 9\.96921e\+36"):
        read_raster(_grid_file(tmp_path / "d.nc", values, "f8", -9999.0))


def test_geotiff_float32_fill_without_nodata_is_refused(tmp_path):
    # -3.4e38 (float32 minimum) is a common undeclared GDAL fill (common practice)
    values = np.ones((4, 4), dtype=np.float32)
    values[0, 0] = np.finfo(np.float32).min
    _write_tif(tmp_path / "f.tif", values, Affine(1e3, 0, 0, 0, -1e3, 4e3), UTM33, None, "float32")
    with pytest.raises(InputError, match=r"f\.tif: 'band1' has 1 cell\(s\) .* declare it"):
        read_raster(tmp_path / "f.tif")


# --- coordinates: snapped when rounded, resampled when irregular ------------------------------


def test_rounded_coordinates_are_snapped_with_a_note(tmp_path, caplog):
    # 1/30 degree cells stored with 4 decimals: steps differ by up to 3e-3 of a step
    # (common practice in NetCDF files)
    lat = np.round(-10.0 + np.arange(40) / 30.0, 4)
    lon = np.round(150.0 + np.arange(50) / 30.0, 4)
    steps = np.diff(lat)
    assert np.ptp(steps) / steps.mean() > 2e-3
    ds = xr.Dataset(
        {"h": (("lat", "lon"), np.ones((40, 50)))},
        coords={
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(tmp_path / "r.nc")
    with caplog.at_level("INFO", logger="gridflex.io.rasters"):
        da = read_raster(tmp_path / "r.nc")
    assert "snapped onto a regular axis" in caplog.text
    assert np.ptp(np.diff(da["y"].values)) < 1e-12
    assert_allclose(da["y"].values, -10.0 + np.arange(40) / 30.0, rtol=0, atol=6e-5)


def _mercator_file(path, name="h"):
    """Latitudes spaced like a Mercator grid (equal steps in y = ln tan(pi/4 + lat/2));
    values linear in latitude and longitude."""
    merc = np.linspace(np.log(np.tan(np.pi / 4 + np.radians(10.0) / 2)), 1.0, 30)
    lat = np.degrees(2 * np.arctan(np.exp(merc)) - np.pi / 2)
    lon = 20.0 + 0.5 * np.arange(12)
    values = 3.0 * lat[:, None] - 2.0 * lon[None, :]
    ds = xr.Dataset(
        {name: (("lat", "lon"), values)},
        coords={
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(path)
    return lat, lon


def test_irregular_latitudes_are_resampled_onto_the_median_step(tmp_path, caplog):
    lat, lon = _mercator_file(tmp_path / "merc.nc")
    with caplog.at_level("WARNING", logger="gridflex.io.rasters"):
        da = read_raster(tmp_path / "merc.nc")
    assert "resampled linearly" in caplog.text
    y = da["y"].values
    assert y[0] == pytest.approx(lat[0], abs=1e-12) and y[-1] == pytest.approx(lat[-1], abs=1e-9)
    step = np.median(np.diff(lat))
    assert abs(np.diff(y)[0] - step) < 0.5 * step / (y.size - 1)  # the median, rounded
    assert np.ptp(np.diff(y)) < 1e-9
    # linear interpolation of a field linear in latitude is exact (common practice)
    assert_allclose(da.values, 3.0 * y[:, None] - 2.0 * lon[None, :], rtol=0, atol=1e-9)


def test_irregular_axis_refused_when_asked_and_unsorted_axis_always(tmp_path):
    _mercator_file(tmp_path / "merc.nc")
    with pytest.raises(
        InputError,
        match=r"merc\.nc: variable 'h': coordinate 'lat': not evenly .* "
        r"write it on a regular grid",
    ):
        read_raster(tmp_path / "merc.nc", irregular="refuse")
    ds = xr.Dataset(
        {"h": (("y", "x"), np.ones((4, 4)))},
        coords={"y": [0.0, 2.0, 1.0, 3.0], "x": np.arange(4.0)},
    )
    ds.to_netcdf(tmp_path / "u.nc")
    with pytest.raises(InputError, match=r"u\.nc: .*'y': values are not strictly increasing"):
        read_raster(tmp_path / "u.nc")


def test_packed_coordinates_are_unpacked(tmp_path):
    # scale_factor and add_offset on a coordinate variable (CF conventions 1.8, section 8.1)
    with netCDF4.Dataset(tmp_path / "p.nc", "w") as nc:
        for name, n in (("y", 4), ("x", 5)):
            nc.createDimension(name, n)
            coord = nc.createVariable(name, "i2", (name,))
            coord.set_auto_maskandscale(False)
            coord.setncatts({"scale_factor": 500.0, "add_offset": 1.0e4, "units": "m"})
            coord[:] = np.arange(n, dtype=np.int16)
        nc.createVariable("h", "f8", ("y", "x"))[:] = np.ones((4, 5))
    da = read_raster(tmp_path / "p.nc")
    assert_allclose(da["x"].values, 1.0e4 + 500.0 * np.arange(5))
