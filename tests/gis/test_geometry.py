"""Georeferencing and reprojection (gridflex.gis.geometry)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from affine import Affine
from numpy.testing import assert_allclose
from rasterio.crs import CRS

from gridflex import InputError
from gridflex.gis.geometry import (
    LONLAT,
    GridGeometry,
    cell_areas,
    even_step,
    from_lonlat,
    local_projection,
    parse_crs,
    reproject_values,
    to_lonlat,
    working_geometry,
)

WGS84_A = 6378137.0  # EPSG:7030 semi-major axis (m), from memory
WGS84_RF = 298.257223563  # EPSG:7030 inverse flattening, from memory


def _lonlat_grid(lon0=-30.0, lat0=22.0, step=0.05, shape=(80, 100)) -> GridGeometry:
    return GridGeometry(LONLAT, Affine(step, 0.0, lon0, 0.0, -step, lat0), shape)


def _gaussian(geometry: GridGeometry, lon_c: float, lat_c: float, width: float) -> np.ndarray:
    lat, lon = geometry.coords()
    return np.exp(-((lon[None, :] - lon_c) ** 2 + (lat[:, None] - lat_c) ** 2) / (2 * width**2))


# --- parse_crs ---------------------------------------------------------------------------------


def test_parse_crs_accepts_codes_proj_and_wkt():
    assert parse_crs("EPSG:4326", "crs") == LONLAT
    assert parse_crs(4326, "crs") == LONLAT
    assert parse_crs(LONLAT.to_wkt(), "crs") == LONLAT
    assert parse_crs("+proj=utm +zone=33 +datum=WGS84", "crs").is_projected


@pytest.mark.parametrize("text", ["EPSG:999999", "not a crs", ""])
def test_parse_crs_unknown_names_the_place(text):
    with pytest.raises(InputError, match=r"scenario\.toml \[load\] crs: .*coordinate reference"):
        parse_crs(text, "scenario.toml [load] crs")


# --- GridGeometry ------------------------------------------------------------------------------


def test_coords_round_trip_with_decreasing_y():
    y = 5000.0 - 1000.0 * np.arange(6)
    x = -2000.0 + 500.0 * np.arange(9)
    g = GridGeometry.from_coords(y, x, None)
    assert g.shape == (6, 9)
    assert g.transform == Affine(500.0, 0.0, -2250.0, 0.0, -1000.0, 5500.0)
    gy, gx = g.coords()
    assert_allclose(gy, y, rtol=0, atol=1e-9)  # exact arithmetic up to round-off
    assert_allclose(gx, x, rtol=0, atol=1e-9)
    assert g.bounds == (-2250.0, -500.0, 2250.0, 5500.0)
    assert g.cell_size_metres() == (1000.0, 500.0)
    assert not g.is_geographic


def test_from_coords_rejects_uneven_spacing():
    with pytest.raises(InputError, match="'x' is not evenly spaced"):
        GridGeometry.from_coords([0.0, 1.0, 2.0], [0.0, 1.0, 3.0], None)


def test_geographic_cell_size_uses_the_ellipsoid():
    # At the equator a degree of longitude is 2 pi a / 360 and a degree of latitude is
    # a (1 - e^2) pi / 180 (meridional radius of curvature; Snyder 1987, USGS PP 1395, 4-18).
    e2 = (2 - 1 / WGS84_RF) / WGS84_RF
    g = GridGeometry(LONLAT, Affine(0.5, 0, -1.0, 0, -0.5, 1.0), (4, 4))
    dy, dx = g.cell_size_metres()
    assert_allclose(dx, 0.5 * 2 * math.pi * WGS84_A / 360, rtol=1e-12)  # closed form
    assert_allclose(dy, 0.5 * WGS84_A * (1 - e2) * math.pi / 180, rtol=1e-12)  # closed form


def test_geographic_cell_size_agrees_with_proj_at_mid_latitude():
    # Independent check through PROJ: a small step in longitude/latitude measured in a
    # local equal-area projection centred there (scale 1 at the centre; Snyder 1987 ch. 24).
    g = _lonlat_grid(lon0=9.0, lat0=47.0, step=0.01, shape=(200, 200))  # centre 10E, 46N
    dy, dx = g.cell_size_metres()
    local = local_projection(g)
    x, y = from_lonlat([10.0, 10.001, 10.0], [46.0, 46.0, 46.001], local)
    assert_allclose(dx, 0.01 * np.hypot(x[1] - x[0], y[1] - y[0]) / 0.001, rtol=1e-5)
    assert_allclose(dy, 0.01 * np.hypot(x[2] - x[0], y[2] - y[0]) / 0.001, rtol=1e-5)


def test_cell_areas_sum_to_the_ellipsoid_surface():
    # WGS84 surface area 5.10065622e14 m^2 (from memory); midpoint rule on 1 degree cells.
    g = GridGeometry(LONLAT, Affine(1.0, 0, -180.0, 0, -1.0, 90.0), (180, 360))
    assert_allclose(cell_areas(g).sum(), 5.10065622e14, rtol=1e-4)


# --- local projection and round trips ----------------------------------------------------------


def test_local_projection_is_centred_equal_area_in_metres():
    g = _lonlat_grid()  # 30W-25W, 18N-22N
    crs = local_projection(g)
    params = crs.to_dict()
    assert params["proj"] == "laea"
    assert params["lon_0"] == pytest.approx(-27.5)
    assert params["lat_0"] == pytest.approx(20.0)
    assert crs.linear_units_factor[1] == 1.0
    x, y = from_lonlat([-27.5], [20.0], crs)
    assert_allclose([x[0], y[0]], [0.0, 0.0], atol=1e-6)  # the centre maps to the origin


def test_projected_metres_keep_their_crs_and_unknown_stays_unknown():
    utm = CRS.from_epsg(32633)
    g = GridGeometry(utm, Affine(1000.0, 0, 400000.0, 0, -1000.0, 5.1e6), (50, 50))
    assert local_projection(g) == utm
    assert local_projection(GridGeometry(None, g.transform, g.shape)) is None


def test_lonlat_to_local_and_back_round_trip():
    g = _lonlat_grid()
    crs = local_projection(g)
    rng = np.random.default_rng(1)
    lon = rng.uniform(-30.0, -25.0, 200)
    lat = rng.uniform(18.0, 22.0, 200)
    x, y = from_lonlat(lon, lat, crs)
    assert np.abs(x).max() < 3e5 and np.abs(y).max() < 3e5  # metres near the centre
    lon2, lat2 = to_lonlat(x, y, crs)
    assert_allclose(lon2, lon, rtol=0, atol=1e-9)  # PROJ inverse, round-off only
    assert_allclose(lat2, lat, rtol=0, atol=1e-9)


def test_to_lonlat_wraps_longitude_and_refuses_unknown_crs():
    lon, lat = to_lonlat(np.array([[190.0, -190.0]]), np.array([[5.0, 6.0]]), LONLAT)
    assert lon.shape == (1, 2)
    assert_allclose(lon, [[-170.0, 170.0]])
    with pytest.raises(InputError, match="no coordinate reference system"):
        to_lonlat([0.0], [0.0], None)


# --- working grid and reprojection ---------------------------------------------------------------


def test_working_geometry_covers_the_footprint_north_up():
    g = _lonlat_grid()
    crs = local_projection(g)
    w = working_geometry(g, crs)
    assert w.transform.a == -w.transform.e == pytest.approx(min(g.cell_size_metres()))
    assert w.transform.e < 0
    t = np.linspace(0.0, 1.0, 51)  # the source's outer edge, densely
    lon = np.concatenate([-30 + 5 * t, np.full(51, -25.0), -30 + 5 * t, np.full(51, -30.0)])
    lat = np.concatenate([np.full(51, 18.0), 18 + 4 * t, np.full(51, 22.0), 18 + 4 * t])
    x, y = from_lonlat(lon, lat, crs)
    for spacing in (None, 10e3):
        grid = working_geometry(g, crs, spacing)
        step = grid.transform.a
        left, bottom, right, top = grid.bounds
        assert np.all((x >= left) & (x <= right) & (y >= bottom) & (y <= top))
        # no more than one spare cell across the footprint
        assert right - left < x.max() - x.min() + step + 1e-6
        assert top - bottom < y.max() - y.min() + step + 1e-6
    assert working_geometry(g, crs, 10e3).transform.a == 10e3


def test_working_geometry_keeps_cells_of_a_metric_grid():
    g = GridGeometry.from_coords(1000.0 * np.arange(20), 1000.0 * np.arange(30), None)
    w = working_geometry(g, None)
    assert w.shape == g.shape and w.transform.e < 0 and w.bounds == g.bounds
    values = np.arange(600.0).reshape(20, 30)
    assert_allclose(reproject_values(values, g, w), values[::-1], rtol=0, atol=0)  # same cells


def test_reprojected_load_conserves_its_integral():
    # Lambert azimuthal equal-area preserves area (Snyder 1987, USGS PP 1395, ch. 24), so the
    # integral of a load is kept; issue target 1%.
    g = _lonlat_grid(lon0=-30.0, lat0=52.0, step=0.05, shape=(80, 100))
    q = _gaussian(g, -27.5, 50.0, 0.3)
    total = float((q * cell_areas(g)).sum())
    crs = local_projection(g)
    for method, spacing in (("bilinear", None), ("average", 12e3)):
        w = working_geometry(g, crs, spacing)
        out = reproject_values(q, g, w, resampling=method)
        assert np.isnan(out).any()  # corners outside the curved footprint
        assert_allclose(np.nansum(out) * w.transform.a**2, total, rtol=0.01)
    # the check can fail: Mercator is conformal, not equal-area (scale 1/cos(lat) squared)
    mercator = CRS.from_epsg(3395)
    w = working_geometry(g, mercator, 5e3)
    out = reproject_values(q, g, w)
    assert abs(np.nansum(out) * 5e3**2 / total - 1) > 0.5


def test_reprojection_round_trip_and_nodata():
    g = _lonlat_grid()
    q = _gaussian(g, -27.5, 20.0, 0.8)
    q[:5, :5] = np.nan
    w = working_geometry(g, local_projection(g))
    there = reproject_values(q, g, w)
    back = reproject_values(there, w, g)
    inner = np.s_[10:-10, 10:-10]
    # two bilinear resamplings of a smooth field: error ~ (h / width)^2, common practice
    assert_allclose(back[inner], q[inner], rtol=0, atol=5e-3)
    assert np.isnan(back[:3, :3]).all()  # nodata stays nodata


def test_reproject_rejects_bad_requests():
    g = _lonlat_grid()
    w = working_geometry(g, local_projection(g))
    values = np.zeros(g.shape)
    with pytest.raises(InputError, match="resampling must be one of 'bilinear'"):
        reproject_values(values, g, w, resampling="smooth")
    unknown = GridGeometry(None, w.transform, w.shape)
    with pytest.raises(InputError, match="cannot align a grid with no coordinate reference"):
        reproject_values(values, g, unknown)
    with pytest.raises(InputError, match="values have shape"):
        reproject_values(values[:-1], g, w)


def test_solve_through_the_local_grid_matches_a_direct_metric_solve(tmp_path):
    # issue target: the reprojected solve agrees with the same load solved directly in metres
    # within 1% (of the peak deflection). The load is a smooth seamount defined by distance in
    # the local equal-area frame, so both grids sample the same function.
    from gridflex import Plate, solve
    from gridflex.gis.geometry import geometry_of
    from gridflex.io.rasters import read_raster, write_geotiff

    lon = -150.6 + 0.012 * (np.arange(100) + 0.5)
    lat = -11.4 - 0.012 * (np.arange(100) + 0.5)
    src = GridGeometry.from_coords(lat, lon, LONLAT)
    crs = local_projection(src)

    def load(x, y):  # Pa, positive down
        return 2800.0 * 9.81 * 3000.0 * np.exp(-(x**2 + y**2) / (2 * 12e3**2))

    x, y = from_lonlat(lon[None, :], lat[:, None], crs)
    path = tmp_path / "load.tif"
    da = xr.DataArray(load(x, y), dims=("y", "x"), coords={"y": lat, "x": lon}, name="load")
    write_geotiff(da, path, LONLAT)
    read = read_raster(path)
    geometry = geometry_of(read)
    assert geometry.crs == LONLAT and geometry.shape == src.shape
    assert geometry.transform.almost_equals(src.transform, precision=1e-12)

    work = working_geometry(geometry, crs)
    q = np.nan_to_num(reproject_values(read.values, geometry, work), nan=0.0)
    wy, wx = work.coords()
    grid = xr.DataArray(q, dims=("y", "x"), coords={"y": wy, "x": wx})
    plate = Plate(te=8e3)
    w_reprojected = solve(grid, plate)["deflection"].values
    direct = xr.DataArray(
        load(wx[None, :], wy[:, None]), dims=("y", "x"), coords={"y": wy, "x": wx}
    )
    w_direct = solve(direct, plate)["deflection"].values
    peak = w_direct.max()
    assert np.abs(w_reprojected - w_direct).max() < 0.01 * peak
    # back onto the input grid: the same cells as the input file
    back = reproject_values(w_reprojected, work, geometry)
    out = write_geotiff(read.copy(data=back).rename("deflection"), tmp_path / "w.tif", LONLAT)
    again = geometry_of(read_raster(out))
    assert again.crs == LONLAT and again.shape == geometry.shape
    assert again.transform.almost_equals(geometry.transform, precision=1e-12)
    assert np.nanmax(back) == pytest.approx(peak, rel=0.01)


def test_even_step_with_a_tolerance_accepts_rounded_centres():
    # centres of 1/30-degree cells rounded to 4 decimals lie within 1.5e-3 of a step of
    # the regular axis (common practice); the strict default refuses them
    rounded = np.round(np.arange(40) / 30.0, 4)
    with pytest.raises(InputError, match="not evenly spaced"):
        even_step(rounded, "lat")
    first, step, n = even_step(rounded, "lat", tolerance=0.01)
    assert (first, n) == (0.0, 40) and step == pytest.approx(1 / 30.0, rel=1e-5)
    with pytest.raises(InputError, match="not evenly spaced"):
        even_step(np.array([0.0, 1.0, 2.05, 3.0]), "y", tolerance=0.01)
    with pytest.raises(InputError, match="not evenly spaced"):
        even_step(np.array([0.0, 2.0, 1.0, 3.0]), "y", tolerance=1.0)  # not monotonic
