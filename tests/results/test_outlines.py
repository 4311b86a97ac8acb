"""Moat, zero-line and forebulge outlines and their GeoJSON (results.outlines, io.vectors)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose
from rasterio.crs import CRS
from scipy import optimize, special

from gridflex import InputError, Plate, solve
from gridflex.gis.geometry import LONLAT, GridGeometry, from_lonlat, reproject_values
from gridflex.io.vectors import outline_features, write_geojson
from gridflex.results.outlines import forebulge_crest, moat_outline, signed_area, zero_line
from tests.helpers import make_grid

# invented open-ocean spot for the local projection
LOCAL = CRS.from_proj4("+proj=laea +lat_0=-12 +lon_0=-150 +datum=WGS84 +units=m +no_defs")


@pytest.fixture(scope="module")
def point_load():
    """Spectral solve of a point load P = 1e12 N on a 256 x 256 grid of 2 km cells."""
    n, dx, force = 256, 2e3, 1e12
    plate = Plate(te=10e3, youngs_modulus=70e9, infill_density=2300.0)
    load = make_grid(n, n, dx)
    load = load.isel(y=slice(None, None, -1))  # north-up rows, like a raster
    load.loc[{"y": 0.0, "x": 0.0}] = force / dx**2
    return solve(load, plate), plate, force, dx


def _validate_geojson(collection: dict) -> None:
    """RFC 7946 checks: closed rings, right-hand rule, WGS84 coordinate ranges."""
    assert collection["type"] == "FeatureCollection"
    for feature in collection["features"]:
        assert feature["type"] == "Feature" and set(feature["properties"]) >= {
            "name",
            "level",
            "units",
        }
        geometry = feature["geometry"]
        kind, coords = geometry["type"], geometry["coordinates"]
        polygons = {"Polygon": [coords], "MultiPolygon": coords}.get(kind)
        lines = {"MultiLineString": coords}.get(kind)
        assert polygons is not None or lines is not None, kind
        for polygon in polygons or []:
            for i, ring in enumerate(polygon):
                ring = np.asarray(ring)
                assert len(ring) >= 4 and np.array_equal(ring[0], ring[-1])  # RFC 7946 3.1.6
                # exterior counter-clockwise, holes clockwise (RFC 7946 3.1.6)
                assert (signed_area(ring) > 0) == (i == 0)
        for part in (lines or []) + [r for p in polygons or [] for r in p]:
            part = np.asarray(part)
            assert part.ndim == 2 and part.shape[1] == 2 and len(part) >= 2
            assert np.all(np.abs(part[:, 0]) <= 180) and np.all(np.abs(part[:, 1]) <= 90)


def _radii(points: np.ndarray) -> np.ndarray:
    return np.hypot(points[:, 0], points[:, 1])


def test_point_load_outlines_match_hertz_kei_solution(point_load, tmp_path):
    # Hertz 1884 (Annalen der Physik und Chemie 22); Brotchie & Silvester 1969 (JGR 74):
    # w(r) = w0 kei(r/l) / kei(0). Moat edge at depth d: kei(r/l) / kei(0) = d / w0;
    # zero line: first zero of kei; forebulge crest: first zero of kei'.
    result, plate, force, dx = point_load
    ell = plate.relative_stiffness_radius
    w0 = force * ell**2 / (8 * plate.rigidity)
    depth = 0.3 * w0
    r_moat = ell * optimize.brentq(lambda t: special.kei(t) / special.kei(0) - 0.3, 0.1, 3.9)
    r_zero = ell * optimize.brentq(special.kei, 3.0, 4.5)
    r_crest = ell * optimize.brentq(special.keip, 4.0, 5.5)

    path = write_geojson(outline_features(result, LOCAL, depth), tmp_path / "outlines.geojson")
    collection = json.loads(path.read_text())
    _validate_geojson(collection)
    features = {f["properties"]["name"]: f for f in collection["features"]}
    assert set(features) == {"moat", "forebulge_crest", "zero_deflection"}
    moat = features["moat"]
    assert moat["geometry"]["type"] == "Polygon" and len(moat["geometry"]["coordinates"]) == 1
    assert moat["properties"]["level"] == pytest.approx(depth)

    def radii(coords):
        lonlat = np.asarray(coords)
        return _radii(np.column_stack(from_lonlat(lonlat[:, 0], lonlat[:, 1], LOCAL)))

    # issue target: the analytic radius within a cell
    assert np.abs(radii(moat["geometry"]["coordinates"][0]) - r_moat).max() < dx
    zero = features["zero_deflection"]["geometry"]["coordinates"]
    assert len(zero) == 1  # the weak second zero of kei at 8.34 l is left out
    assert np.abs(radii(zero[0]) - r_zero).max() < dx
    crest = features["forebulge_crest"]["geometry"]["coordinates"]
    assert len(crest) == 1
    assert np.abs(radii(crest[0]) - r_crest).max() < dx
    assert features["forebulge_crest"]["properties"]["level"] < 0  # uplift, w positive down


def test_line_load_crest_and_zero_match_hetenyi():
    # Hetényi 1946, Beams on Elastic Foundation: w = w0 exp(-x/a)(cos + sin)(x/a);
    # first zero at x = 3 pi a / 4, forebulge crest at x = pi a.
    plate = Plate(te=20e3, youngs_modulus=70e9, infill_density=2300.0)
    alpha = plate.flexural_parameter
    dx = alpha / 20
    load = make_grid(8, 480, dx)
    load[:, 240] = 1e12 / dx
    w = solve(load, plate, edges="periodic")["deflection"]
    for lines, expected in (
        (forebulge_crest(w, load), np.pi * alpha),
        (zero_line(w), 0.75 * np.pi * alpha),
    ):
        assert len(lines) == 2  # one on each side of the load
        for line in lines:
            assert np.abs(np.abs(line[:, 0]) - expected).max() < dx  # within a cell


def test_moat_with_a_hole_and_two_moats():
    # invented field (not physics): a ring-shaped trough and a separate round one
    grid = make_grid(120, 160, 1e3).isel(y=slice(None, None, -1))
    r1 = np.hypot(grid.x + 30e3, grid.y)
    r2 = np.hypot(grid.x - 55e3, grid.y)
    w = (np.exp(-(((r1 - 25e3) / 6e3) ** 2)) + np.exp(-((r2 / 8e3) ** 2))).transpose("y", "x")
    polygons = moat_outline(w, 0.5)
    assert len(polygons) == 2
    ring, disc = sorted(polygons, key=lambda p: -len(p.holes))
    assert len(ring.holes) == 1 and len(disc.holes) == 0
    assert signed_area(ring.exterior) > 0 and signed_area(ring.holes[0]) < 0
    # w = 0.5 where |r - 25 km| = 6 km sqrt(ln 2); outer and inner edges within a cell
    half = 6e3 * np.sqrt(np.log(2))
    centre = np.array([-30e3, 0.0])
    assert np.abs(_radii(ring.exterior - centre) - (25e3 + half)).max() < 1e3
    assert np.abs(_radii(ring.holes[0] - centre) - (25e3 - half)).max() < 1e3
    assert ring.area == pytest.approx(np.pi * ((25e3 + half) ** 2 - (25e3 - half) ** 2), rel=0.02)
    assert moat_outline(w, 5.0) == []  # never that deep

    ds = xr.Dataset({"deflection": w, "load": w * 0 + (r2 < 5e3)})
    features = outline_features(ds, LOCAL, 0.5)
    moat = next(f for f in features if f["properties"]["name"] == "moat")
    assert moat["geometry"]["type"] == "MultiPolygon"
    _validate_geojson({"type": "FeatureCollection", "features": features})


def test_outlines_on_a_lonlat_grid(point_load):
    # the point-load result resampled onto a longitude/latitude grid: the crest is traced with
    # distances in metres (cell sizes from the ellipsoid), Hertz 1884 radius within a cell
    result, plate, _, _ = point_load
    src = GridGeometry.from_coords(result.y.values, result.x.values, LOCAL)
    lon = -150.0 + 0.02 * (np.arange(180) - 89.5)
    lat = -12.0 - 0.02 * (np.arange(150) - 74.5)
    dst = GridGeometry.from_coords(lat, lon, LONLAT)
    values = {
        name: reproject_values(result[name].values, src, dst) for name in ("deflection", "load")
    }
    ds = xr.Dataset(
        {name: (("y", "x"), v) for name, v in values.items()}, coords={"y": lat, "x": lon}
    )
    features = outline_features(ds, LONLAT, 1e-3)
    _validate_geojson({"type": "FeatureCollection", "features": features})
    crest = next(f for f in features if f["properties"]["name"] == "forebulge_crest")
    points = np.asarray(crest["geometry"]["coordinates"][0])
    r = _radii(np.column_stack(from_lonlat(points[:, 0], points[:, 1], LOCAL)))
    ell = plate.relative_stiffness_radius
    cell = 0.02 * 111e3  # about one cell (m)
    assert_allclose(r, ell * optimize.brentq(special.keip, 4.0, 5.5), rtol=0, atol=cell)


def test_bad_outline_requests(point_load, tmp_path):
    result = point_load[0]
    with pytest.raises(InputError, match="cannot be placed in longitude/latitude"):
        outline_features(result, None, 1e-3)
    with pytest.raises(InputError, match="moat depth must be a finite number > 0"):
        moat_outline(result["deflection"], -1.0)
    with pytest.raises(InputError, match="result has no variable 'load'"):
        outline_features(result[["deflection"]], LOCAL, 1e-3)
    with pytest.raises(InputError, match="must be a 2-D DataArray"):
        zero_line(result["deflection"].isel(y=0))
    path = write_geojson([], tmp_path / "empty.geojson")
    assert json.loads(path.read_text()) == {"type": "FeatureCollection", "features": []}
    with pytest.raises(InputError, match="output exists"):
        write_geojson([], path)


def test_no_load_or_no_uplift_gives_no_crest():
    grid = make_grid(16, 16, 1e3)
    assert forebulge_crest(grid + 1.0, grid) == []  # no load
    assert forebulge_crest(grid + 1.0, grid + 1.0) == []  # no uplift
    assert zero_line(grid) == []


def test_outlines_across_the_antimeridian_are_cut_there(point_load):
    # RFC 7946 section 3.1.9: a geometry crossing the antimeridian is cut in two; positions
    # stay in [-180, 180]. The pieces together keep the moat's area (Hertz 1884 radius).
    result, plate, force, dx = point_load
    crs = CRS.from_proj4("+proj=laea +lat_0=-12 +lon_0=179.9 +datum=WGS84 +units=m +no_defs")
    ell = plate.relative_stiffness_radius
    w0 = force * ell**2 / (8 * plate.rigidity)
    r_moat = ell * optimize.brentq(lambda t: special.kei(t) / special.kei(0) - 0.3, 0.1, 3.9)
    features = {f["properties"]["name"]: f for f in outline_features(result, crs, 0.3 * w0)}
    _validate_geojson({"type": "FeatureCollection", "features": list(features.values())})
    moat = features["moat"]["geometry"]
    assert moat["type"] == "MultiPolygon" and len(moat["coordinates"]) == 2
    area = 0.0
    for polygon in moat["coordinates"]:
        ring = np.asarray(polygon[0])
        assert ring[:, 0].max() <= 180 and ring[:, 0].min() >= -180
        assert np.ptp(ring[:, 0]) < 1.0  # each piece stays on its side: no jump across
        x, y = from_lonlat(ring[:, 0], ring[:, 1], crs)
        area += signed_area(np.column_stack([x, y]))
    # the cut edge is interpolated linearly between cell centres: within 1% of pi r^2
    assert area == pytest.approx(np.pi * r_moat**2, rel=0.01)
    for name in ("forebulge_crest", "zero_deflection"):
        parts = features[name]["geometry"]["coordinates"]
        assert len(parts) == 2  # one closed loop cut into two lines, each ending on the seam
        for part in parts:
            part = np.asarray(part)
            assert np.abs(np.diff(part[:, 0])).max() < 1.0
            assert np.abs(part[[0, -1], 0]).tolist() == [180.0, 180.0]


def test_lonlat_grid_across_the_antimeridian_reprojects_and_conserves_load():
    # a 0-360 longitude grid spanning 180E: the local equal-area grid keeps the load's
    # integral (Snyder 1987, USGS PP 1395, ch. 24; issue target 1%)
    from gridflex.gis.geometry import cell_areas, local_projection, working_geometry

    lon = 176.0 + 0.04 * np.arange(200)
    lat = -10.0 - 0.04 * np.arange(120)
    src = GridGeometry.from_coords(lat, lon, LONLAT)
    q = np.exp(-((lon[None, :] - 180.2) ** 2 + (lat[:, None] + 12.4) ** 2) / (2 * 0.4**2))
    crs = local_projection(src)
    assert crs.to_dict()["lon_0"] == pytest.approx(179.98)
    dst = working_geometry(src, crs)
    out = reproject_values(q, src, dst)
    assert_allclose(np.nansum(out) * dst.transform.a**2, (q * cell_areas(src)).sum(), rtol=0.01)
