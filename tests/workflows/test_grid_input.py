"""The one front door for grid inputs: real GeoTIFF and NetCDF files written and read back."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine
from numpy.testing import assert_allclose

from gridflex.errors import InputError, NodataWarning
from gridflex.gis.geometry import GridGeometry
from gridflex.workflows.grid_input import apply_missing_policy, read_grid_input

NY, NX, STEP = 6, 8, 1000.0
WHERE = "s.toml: [plate] elastic_thickness_file"


def _values() -> np.ndarray:
    return np.arange(NY * NX, dtype=np.float64).reshape(NY, NX) + 1.0


def _write_tiff(path, values, crs="EPSG:32633", unit="", step=STEP, west=500e3, north=6e6):
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=values.shape[1],
        height=values.shape[0],
        count=1,
        dtype="float64",
        crs=crs,
        transform=Affine(step, 0.0, west, 0.0, -step, north),
        nodata=-9999.0,
    ) as dst:
        dst.write(np.where(np.isnan(values), -9999.0, values), 1)
        if unit:
            dst.set_band_unit(1, unit)
    return path


def _write_netcdf(path, values, units=None, dx=STEP):
    y = (np.arange(NY) - NY / 2 + 0.5) * STEP
    x = (np.arange(NX) - NX / 2 + 0.5) * dx
    attrs = {"units": units} if units else {}
    ds = xr.Dataset(
        {"h": (("y", "x"), values, attrs)},
        coords={"y": ("y", y, {"units": "m"}), "x": ("x", x, {"units": "m"})},
    )
    ds.to_netcdf(path)
    return path


def _reference(dx=STEP) -> xr.DataArray:
    y = (np.arange(NY) - NY / 2 + 0.5) * STEP
    x = (np.arange(NX) - NX / 2 + 0.5) * dx
    return xr.DataArray(np.zeros((NY, NX)), dims=("y", "x"), coords={"y": y, "x": x})


def test_geotiff_in_km_is_read_in_metres(tmp_path):
    path = _write_tiff(tmp_path / "te.tif", _values(), unit="km")
    da = read_grid_input(path, None, WHERE)
    assert_allclose(da.values, _values() * 1e3)
    assert da.attrs["units"] == "m"
    assert da.attrs["crs_wkt"]  # the CRS travels with the grid


def test_netcdf_in_km_and_without_units(tmp_path):
    km = read_grid_input(_write_netcdf(tmp_path / "km.nc", _values(), "km"), "h", WHERE)
    plain = read_grid_input(_write_netcdf(tmp_path / "m.nc", _values()), "h", WHERE)
    assert_allclose(km.values, _values() * 1e3)
    assert_allclose(plain.values, _values())  # no units attribute: SI (m)


def test_stress_grid_in_megapascals(tmp_path):
    path = _write_netcdf(tmp_path / "s.nc", _values(), "MPa")
    da = read_grid_input(path, "h", WHERE, dimension="pressure")
    assert_allclose(da.values, _values() * 1e6)
    assert da.attrs["units"] == "Pa"


def test_unknown_unit_is_refused_naming_file_and_variable(tmp_path):
    path = _write_netcdf(tmp_path / "odd.nc", _values(), "furlong")
    with pytest.raises(InputError, match=r"elastic_thickness_file: odd\.nc: variable 'h': unit "):
        read_grid_input(path, "h", WHERE)


def test_mask_units_are_not_read(tmp_path):
    path = _write_netcdf(tmp_path / "mask.nc", np.ones((NY, NX)), "1")
    assert_allclose(read_grid_input(path, "h", WHERE, dimension=None).values, 1.0)


@pytest.fixture
def holed(tmp_path):
    values = _values()
    values[0, :3] = np.nan
    return _write_tiff(tmp_path / "holed.tif", values)


def test_nodata_policy_error_refuses_with_count_and_file(holed):
    with pytest.raises(InputError, match=r"holed\.tif: 3 nodata or NaN cell\(s\); fill them, or"):
        read_grid_input(holed, None, WHERE, missing_hint="set missing = 'zero'")


def test_nodata_policy_zero_fills_and_warns(holed):
    with pytest.warns(NodataWarning, match="3 nodata or NaN cell"):
        da = read_grid_input(holed, None, WHERE, missing="zero")
    assert np.all(da.values[0, :3] == 0.0)
    assert_allclose(da.values[1:], _values()[1:])


def test_nodata_policy_zero_for_an_elevation_takes_the_median(holed):
    with pytest.warns(NodataWarning, match="no edifice"):
        da = read_grid_input(holed, None, WHERE, missing="zero", elevation=True)
    assert np.all(da.values[0, :3] == np.median(_values().ravel()[3:]))


def test_nodata_policy_keep_leaves_nan(holed):
    da = read_grid_input(holed, None, WHERE, missing="keep")
    assert int(np.isnan(da.values).sum()) == 3


def test_all_nodata_is_refused_under_every_policy():
    da = xr.DataArray(np.full((2, 2), np.nan), dims=("y", "x"))
    for policy in ("error", "zero", "keep"):
        with pytest.raises(InputError, match="no valid value"):
            apply_missing_policy(da, policy, "here")
    with pytest.raises(InputError, match="missing policy must be one of"):
        apply_missing_policy(da, "ignore", "here")


def test_geographic_grid_is_known_by_its_crs(tmp_path):
    path = _write_tiff(tmp_path / "geo.tif", _values(), crs="EPSG:4326", step=0.01, west=10.0)
    with pytest.raises(InputError, match=r"geo\.tif: variable .* longitude/latitude"):
        read_grid_input(path, None, WHERE, metric=True)
    assert read_grid_input(path, None, WHERE).shape == (NY, NX)  # allowed when resampled


def test_projected_grid_in_km_coordinates_is_metric(tmp_path):
    """A projected CRS is metric, whatever its coordinates are called."""
    path = _write_tiff(tmp_path / "utm.tif", _values())
    da = read_grid_input(path, None, WHERE, metric=True)
    assert_allclose(da.values, _values())


def test_grid_off_the_reference_grid_is_refused_naming_the_file(tmp_path):
    path = _write_netcdf(tmp_path / "te.nc", _values(), "m", dx=2 * STEP)
    with pytest.raises(InputError, match=r"te\.nc: variable 'h' is not on the load grid"):
        read_grid_input(path, "h", WHERE, reference=_reference())


def test_grid_on_the_reference_grid_takes_its_coordinates(tmp_path):
    path = _write_netcdf(tmp_path / "te.nc", _values(), "km")
    reference = _reference()
    da = read_grid_input(path, "h", WHERE, reference=reference)
    assert_allclose(da["x"].values, reference["x"].values)
    assert_allclose(da.values, _values() * 1e3)


def test_grid_is_resampled_onto_another_working_grid(tmp_path):
    """A constant field stays constant after bilinear resampling onto a finer grid inside it."""
    path = _write_tiff(tmp_path / "c.tif", np.full((NY, NX), 2.0), unit="km")
    transform = Affine(STEP / 2, 0.0, 501e3, 0.0, -STEP / 2, 6e6 - 1e3)
    working = GridGeometry(rasterio.crs.CRS.from_epsg(32633), transform, (4, 8))
    y, x = working.coords()
    reference = xr.DataArray(np.zeros((4, 8)), dims=("y", "x"), coords={"y": y, "x": x})
    da = read_grid_input(path, None, WHERE, reference=reference, working=working)
    assert da.shape == (4, 8)
    assert_allclose(da.values, 2000.0)


def test_grid_that_does_not_cover_the_working_grid_is_refused(tmp_path):
    path = _write_tiff(tmp_path / "small.tif", _values())
    transform = Affine(STEP, 0.0, 500e3, 0.0, -STEP, 6e6 + 3 * STEP)  # half above the file
    working = GridGeometry(rasterio.crs.CRS.from_epsg(32633), transform, (NY, NX))
    y, x = working.coords()
    reference = xr.DataArray(np.zeros((NY, NX)), dims=("y", "x"), coords={"y": y, "x": x})
    with pytest.raises(InputError, match=r"small\.tif: .* without a value"):
        read_grid_input(path, None, WHERE, reference=reference, working=working)
    kept = read_grid_input(path, None, WHERE, missing="keep", reference=reference, working=working)
    assert np.isnan(kept.values[0]).all() and np.isfinite(kept.values[-1]).all()


def test_unreadable_file_names_the_scenario_key(tmp_path):
    with pytest.raises(InputError, match=r"elastic_thickness_file: .*nothere\.tif: file not found"):
        read_grid_input(tmp_path / "nothere.tif", None, WHERE)
