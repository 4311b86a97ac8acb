"""The one front door for grid inputs: real GeoTIFF and NetCDF files written and read back."""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine
from numpy.testing import assert_allclose

from gridflex.errors import InputError, NodataWarning
from gridflex.gis.geometry import GridGeometry
from gridflex.workflows.grid_input import apply_missing_policy, read_grid_input
from tests.helpers import write_both_orders

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
    assert_allclose(da.values, _values()[::-1] * 1e3)  # rows come back south to north
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
    assert np.all(da.values[-1, :3] == 0.0)  # the file's first (northern) row
    assert_allclose(da.values[:-1], _values()[1:][::-1])


def test_nodata_policy_zero_for_an_elevation_leaves_them_for_the_regional_surface(holed):
    # no data is no edifice: the cells stay NaN, counted in the warning, and the load sets
    # them to its regional surface (tests/workflows/test_layers.py checks the load)
    with pytest.warns(NodataWarning, match="3 nodata or NaN cell.*no edifice"):
        da = read_grid_input(holed, None, WHERE, missing="zero", elevation=True)
    assert int(np.isnan(da.values).sum()) == 3


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
    path = _write_tiff(
        tmp_path / "geo.tif", _values(), crs="EPSG:4326", step=0.01, west=10.0, north=50.0
    )
    with pytest.raises(InputError, match=r"geo\.tif: variable .* longitude/latitude"):
        read_grid_input(path, None, WHERE, metric=True)
    assert read_grid_input(path, None, WHERE).shape == (NY, NX)  # allowed when resampled


def test_projected_grid_in_km_coordinates_is_metric(tmp_path):
    """A projected CRS is metric, whatever its coordinates are called."""
    path = _write_tiff(tmp_path / "utm.tif", _values())
    da = read_grid_input(path, None, WHERE, metric=True)
    assert_allclose(da.values, _values()[::-1])


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


# --- units of every role (gridflex.units, one table) ------------------------------------------


@pytest.mark.parametrize(
    ("units", "dimension", "factor"),
    [
        ("cm", "length", 1e-2),
        ("mm", "length", 1e-3),
        ("ft", "length", 0.3048),  # international foot (1959 agreement, from memory)
        ("g cm-3", "density", 1e3),
        ("kg m-3", "density", 1.0),
        ("kPa", "pressure", 1e3),
        ("Pa", "pressure", 1.0),
    ],
)
def test_cf_units_of_each_quantity(tmp_path, units, dimension, factor):
    # CF conventions 1.8, section 3.1: the units attribute of the variable
    path = _write_netcdf(tmp_path / "u.nc", _values(), units)
    da = read_grid_input(path, "h", WHERE, dimension=dimension)
    assert_allclose(da.values, _values() * factor, rtol=1e-15)


def test_a_pressure_unit_on_a_thickness_is_refused(tmp_path):
    path = _write_netcdf(tmp_path / "p.nc", _values(), "Pa")
    with pytest.raises(
        InputError, match=r"p\.nc: variable 'h': unit 'Pa' is not a length \(it is a pressure\)"
    ):
        read_grid_input(path, "h", WHERE, role="thickness")


# --- missing data and physical ranges -----------------------------------------------------


def test_netcdf_default_fill_is_missing_not_rock(tmp_path):
    # cells never written hold netCDF's default float fill 9.969209968386869e36 when no
    # _FillValue is declared (netCDF-C default fill values, from memory): missing, counted
    path = tmp_path / "part.nc"
    with netCDF4.Dataset(path, "w") as nc:
        for name, n in (("y", NY), ("x", NX)):
            nc.createDimension(name, n)
            coord = nc.createVariable(name, "f8", (name,))
            coord[:] = STEP * np.arange(n)
        var = nc.createVariable("h", "f4", ("y", "x"))
        var.units = "km"
        var[: NY - 1, :] = 1.5
    with pytest.raises(InputError, match=rf"part\.nc: {NX} nodata or NaN cell\(s\)"):
        read_grid_input(path, "h", WHERE, role="thickness")
    with pytest.warns(NodataWarning):
        da = read_grid_input(path, "h", WHERE, role="thickness", missing="zero")
    assert float(da.max()) == 1500.0


@pytest.mark.parametrize(
    ("role", "units", "value", "message"),
    [
        ("thickness", "m", -3.0, r"1 cell\(s\) below 0, down to -3 \(a thickness"),
        # deepest trench ~11 km, highest summit < 9 km (common knowledge)
        ("elevation", "km", 12.0, r"1 cell\(s\) above 11000, up to 12000 \(an elevation"),
        ("depth", "ft", -40000.0, r"1 cell\(s\) below -11000, down to -12192 \(a depth"),
        # thickest ice today < 5 km (common knowledge, from memory)
        ("ice_thickness", "m", 5200.0, r"1 cell\(s\) above 5000, up to 5200 \(an ice"),
    ],
)
def test_values_out_of_the_roles_range_are_refused(tmp_path, role, units, value, message):
    values = np.full((NY, NX), 0.1)
    values[2, 3] = value
    path = _write_netcdf(tmp_path / "r.nc", values, units)
    with pytest.raises(InputError, match=r"r\.nc: variable 'h': " + message):
        read_grid_input(path, "h", WHERE, role=role)


def test_elevation_flag_checks_the_elevation_range(tmp_path):
    # an elevation model in km read as metres would be refused, not silently 1000x
    path = _write_tiff(tmp_path / "dem.tif", _values(), unit="km")
    with pytest.raises(InputError, match=r"dem\.tif: variable 'band1': 37 cell\(s\) above 11000"):
        read_grid_input(path, None, WHERE, elevation=True)


# --- coordinates and row order ------------------------------------------------------------


def test_mask_on_an_irregular_axis_is_refused_with_a_fix(tmp_path):
    y = np.array([0.0, 1000.0, 2500.0, 4500.0, 7000.0, 10000.0])
    ds = xr.Dataset(
        {"m": (("y", "x"), np.ones((NY, NX)))}, coords={"y": y, "x": STEP * np.arange(NX)}
    )
    ds.to_netcdf(tmp_path / "mask.nc")
    with pytest.raises(
        InputError,
        match=r"mask\.nc: variable 'm': coordinate 'y': not evenly .*"
        r"not interpolated; write it on a regular grid",
    ):
        read_grid_input(tmp_path / "mask.nc", "m", WHERE, dimension=None)
    da = read_grid_input(tmp_path / "mask.nc", "m", WHERE)  # a continuous value: resampled
    assert da.sizes["y"] == 6 and float(da["y"][-1]) == 10000.0  # median step 2000 m


def _field() -> xr.DataArray:
    y = 6.0e6 + STEP * (np.arange(NY) + 0.5)
    x = 5.0e5 + STEP * (np.arange(NX) + 0.5)
    values = np.add.outer(np.arange(NY) * 10.0, np.arange(NX)) + 1.0
    return xr.DataArray(values, dims=("y", "x"), coords={"y": y, "x": x}, name="h")


def test_geotiff_and_south_up_netcdf_of_the_same_cells_are_the_same_grid(tmp_path):
    # north-up GeoTIFF (GDAL convention) and south-up NetCDF (y increasing): same cells,
    # same values at the same coordinates (common practice)
    tif, nc = write_both_orders(tmp_path, "h", _field())
    from_tif = read_grid_input(tif, None, WHERE, role="thickness")
    from_nc = read_grid_input(nc, "h", WHERE, role="thickness")
    assert np.all(np.diff(from_tif["y"].values) > 0)  # documented order: y increasing
    assert_allclose(from_tif["y"].values, from_nc["y"].values, rtol=0, atol=1e-6)
    assert_allclose(from_tif.values, from_nc.values, rtol=0, atol=0)
    assert_allclose(from_nc.values, _field().values)
    # each lies on the other's grid, whichever order the reference has
    on_tif = read_grid_input(nc, "h", WHERE, reference=from_tif)
    assert_allclose(on_tif.values, from_tif.values, rtol=0, atol=0)
    north_up = from_tif.isel(y=slice(None, None, -1))
    on_north = read_grid_input(nc, "h", WHERE, reference=north_up)
    assert np.all(np.diff(on_north["y"].values) < 0)  # the reference's order
    assert_allclose(on_north.values, north_up.values, rtol=0, atol=0)


def test_a_grid_with_the_same_coordinates_in_another_crs_is_refused(tmp_path):
    # the same numbers in another projection are other places: never taken as the grid
    tif, _ = write_both_orders(tmp_path, "h", _field(), crs="EPSG:32633")
    other, _ = write_both_orders(tmp_path, "g", _field(), crs="EPSG:32634")
    reference = read_grid_input(tif, None, WHERE)
    with pytest.raises(InputError, match="another coordinate reference system"):
        read_grid_input(other, None, WHERE, reference=reference)


def test_run_layers_from_a_geotiff_and_a_netcdf_share_one_grid(tmp_path):
    # two [[loads]] layers of the same cells, one north-up GeoTIFF and one south-up NetCDF:
    # no resampling, the layers add cell by cell (common practice)
    from gridflex.scenario.tables import load_scenario
    from gridflex.workflows.layers import build_working_layers

    field = _field()
    tif, _ = write_both_orders(tmp_path, "a", field)
    _, nc = write_both_orders(tmp_path, "b", field * 2.0)
    (tmp_path / "two.toml").write_text(
        f'[plate]\nelastic_thickness = "10 km"\n'
        f'[[loads]]\nfile = "{tif.name}"\ndensity = 2800\n'
        f'[[loads]]\nfile = "{nc.name}"\nvariable = "b"\ndensity = 2800\n'
        '[output]\nfile = "out.nc"\n'
    )
    layers, grid = build_working_layers(load_scenario(tmp_path / "two.toml"))
    assert not grid.resampled
    assert_allclose(layers[1].values, 2.0 * layers[0].values, rtol=0, atol=0)
    assert_allclose(layers[0].values, field.values)
