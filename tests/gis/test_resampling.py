"""Aggregation that keeps the integral and point sampling that keeps the values."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from numpy.testing import assert_allclose

from gridflex.gis import resampling
from gridflex.gis.geometry import (
    LONLAT,
    GridGeometry,
    cell_areas,
    local_projection,
    reproject_values,
    working_geometry,
)

# an invented high-latitude patch of 0.01 degree cells, where cells are far from square
SOURCE = GridGeometry(LONLAT, Affine(0.01, 0.0, 20.0, 0.0, -0.01, 61.0), (150, 200))


def _rough_load(seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    q = np.zeros(SOURCE.shape)
    q[40:110, 60:150] = rng.uniform(0.0, 3e7, (70, 90))  # Pa, cell-to-cell rough
    q[70:75, 90:95] = np.nan  # nodata inside the load
    return q


@pytest.mark.parametrize("spacing", [400.0, 1500.0, 4000.0])
def test_aggregation_keeps_the_total_force_on_a_geographic_grid(spacing):
    # force = ∫ q dA with true (ellipsoidal) cell areas on both sides; the working grid is
    # equal-area (Snyder 1987, Map Projections: A Working Manual, ch. 24), so the total
    # must be kept exactly (issue target 1e-6; GDAL's "average" was off by 0.1-0.9 % here)
    q = _rough_load()
    dst = working_geometry(SOURCE, local_projection(SOURCE), spacing)
    out = resampling.aggregate_values(q, SOURCE, dst)
    before = np.nansum(q * cell_areas(SOURCE))
    after = np.nansum(out * cell_areas(dst))
    assert abs(after / before - 1.0) < 1e-9
    gdal = reproject_values(q, SOURCE, dst, "average")
    assert abs(np.nansum(gdal * cell_areas(dst)) / before - 1.0) > 1e-4  # why we do not use it


def test_aggregation_of_a_uniform_field_is_uniform_inside_and_partial_at_the_edges():
    # common practice: a constant keeps its value in fully covered cells ("sum" and "mean");
    # cells half outside the footprint carry part of it with "sum", all of it with "mean".
    # Sharing sub-cells among four cells leaves a ripple (computed: 0.18 % here)
    q = np.full(SOURCE.shape, 5.0)
    dst = working_geometry(SOURCE, local_projection(SOURCE), 3000.0)
    summed = resampling.aggregate_values(q, SOURCE, dst, "sum")
    mean = resampling.aggregate_values(q, SOURCE, dst, "mean")
    inner = (slice(5, -5), slice(5, -5))
    assert_allclose(summed[inner], 5.0, rtol=5e-3)
    assert_allclose(mean[np.isfinite(mean)], 5.0, rtol=1e-9)
    edge = np.isfinite(summed) & (summed < 4.99)
    assert edge.any() and (summed[edge] > 0).all()


def test_sampling_reproduces_a_plane_exactly_and_keeps_coinciding_cells():
    # bilinear interpolation is exact for a linear field (common practice)
    src = GridGeometry(None, Affine(1000.0, 0.0, 0.0, 0.0, -1000.0, 80e3), (80, 90))
    ys, xs = np.meshgrid(
        80e3 - (np.arange(80) + 0.5) * 1000.0, (np.arange(90) + 0.5) * 1000.0, indexing="ij"
    )
    plane = 3.0 + 2e-3 * xs - 5e-4 * ys
    dst = GridGeometry(None, Affine(730.0, 0.0, 2100.0, 0.0, 730.0, 3300.0), (90, 100))
    got = resampling.sample_values(plane, src, dst)
    dy, dx = np.meshgrid(
        3300.0 + (np.arange(90) + 0.5) * 730.0,
        2100.0 + (np.arange(100) + 0.5) * 730.0,
        indexing="ij",
    )
    inside = (dx > 500) & (dx < 89.5e3) & (dy > 500) & (dy < 79.5e3)
    assert_allclose(got[inside], (3.0 + 2e-3 * dx - 5e-4 * dy)[inside], rtol=1e-12)
    same = resampling.sample_values(plane, src, src)
    assert_allclose(same, plane, rtol=0, atol=1e-12)


def test_sampling_keeps_nodata_and_refuses_nothing_outside():
    q = _rough_load()
    got = resampling.sample_values(q, SOURCE, SOURCE)
    assert np.isnan(got[70:75, 90:95]).all() and np.isfinite(got[:70]).all()
    far = GridGeometry(LONLAT, Affine(0.01, 0.0, 40.0, 0.0, -0.01, 61.0), (10, 10))
    assert np.isnan(resampling.sample_values(q, SOURCE, far)).all()


def test_interpolated_coordinate_lattice_is_within_a_few_centimetres():
    # the CRS map is smooth, so linear interpolation between exactly transformed points
    # every <= 2 km errs by O(h^2); measured against the exact transform (computed)
    crs = local_projection(SOURCE)
    rows, cols = np.arange(150) + 0.5, np.arange(200) + 0.5
    exact = resampling._transform(
        (LONLAT, crs), *resampling._apply(SOURCE.transform, cols[None, :], rows[:, None])
    )
    lattice = resampling._lattice_points(
        (LONLAT, crs), SOURCE.transform, rows, cols, max(SOURCE.cell_size_metres())
    )
    assert np.abs(exact[0] - lattice[0]).max() < 0.05
    assert np.abs(exact[1] - lattice[1]).max() < 0.05


def test_aggregation_in_one_crs_keeps_the_force_and_a_constant():
    # the same rule axis by axis (sparse sharing matrices) when no CRS change is needed:
    # the integral is kept to round-off and a constant stays constant inside (common practice)
    src = GridGeometry(None, Affine(30.0, 0.0, 0.0, 0.0, -30.0, 30e3), (1000, 1200))
    dst = working_geometry(src, None, 1700.0)
    q = np.random.default_rng(5).uniform(0.0, 1e6, src.shape)
    q[400:420, 500:530] = np.nan
    out = resampling.aggregate_values(q, src, dst)
    assert abs(np.nansum(out) * 1700.0**2 / (np.nansum(q) * 30.0**2) - 1.0) < 1e-9
    flat = resampling.aggregate_values(np.full(src.shape, 2.0), src, dst, "mean")
    assert_allclose(flat[np.isfinite(flat)], 2.0, rtol=1e-12)
