"""Moving grids between coordinate systems without changing what they mean.

Two operations, each exact for the quantity it keeps:

* :func:`aggregate_values` — area-weighted aggregation that conserves the integral
  (the total force of a stress, the volume of a thickness). Every source cell is cut
  into ``s × s`` equal sub-cells; each sub-cell gives its share (value × its true
  area) to the four destination cells nearest its centre, with bilinear
  ("cloud-in-cell") weights that sum to 1, and a destination cell's value is the sum
  of the shares over its true area. Nothing is lost or counted twice, so the total is
  kept to round-off whatever ``s`` is; ``s`` only sets how smoothly a source cell is
  spread (at most an eighth of a destination cell per sub-cell, capped at 16).
  Partially covered cells keep their share (``partial="sum"``) or the mean of what
  covers them (``partial="mean"``).
* :func:`sample_values` — values at the destination cell centres by bilinear
  interpolation of the source's cell centres (no widening kernel when the
  destination is coarser: each value is read at a point). NaN stays NaN, and
  centres outside the source's footprint are NaN.

Between grids in one CRS both work axis by axis (sparse sharing matrices, separable
interpolation). Across CRSs they work in row blocks of bounded memory; coordinates are
transformed exactly (GDAL/PROJ through rasterio) every few points and interpolated
between (:func:`_lattice_points`), every point when the target CRS is geographic.
"""

from __future__ import annotations

import math
from collections.abc import Iterator

import numpy as np
import rasterio.warp
from affine import Affine
from rasterio.crs import CRS
from scipy import sparse

from gridflex.errors import InputError
from gridflex.gis.geometry import GridGeometry, cell_areas, check_alignable, same_crs
from gridflex.memory import check_memory

__all__ = ["PARTIAL_RULES", "RESULT_EXTENTS", "RESULT_GRIDS", "aggregate_values", "sample_values"]

RESULT_GRIDS = ("input", "working")
"""Where results may be written: brought back onto the input grid, or on the grid of the
solve (no resampling back)."""
RESULT_EXTENTS = ("input", "response")
"""What the written grids cover: the input's footprint, or the whole plate response."""

PARTIAL_RULES = ("sum", "mean")
"""How :func:`aggregate_values` fills a partially covered destination cell."""

_BLOCK_POINTS = 1_000_000  # points transformed per block (about 50 MB of work arrays)
_MAX_SPLIT = 16
_LATTICE_STEP = 8  # at most this many points between exactly transformed ones
_LATTICE_SPAN = 2000.0  # m, at most this far apart


def _crs_pair(src: GridGeometry, dst: GridGeometry) -> tuple[CRS, CRS] | None:
    """The two CRSs for a transform, or None when the coordinates need none."""
    check_alignable(src.crs, dst.crs)
    if src.crs is None or dst.crs is None or same_crs(src.crs, dst.crs):
        return None
    return src.crs, dst.crs


def _transform(
    pair: tuple[CRS, CRS] | None, x: np.ndarray, y: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Points from the first CRS of *pair* into the second (unchanged if None)."""
    if pair is None:
        return x, y
    with rasterio.Env():
        tx, ty = rasterio.warp.transform(pair[0], pair[1], x.ravel(), y.ravel())
    return np.asarray(tx).reshape(x.shape), np.asarray(ty).reshape(y.shape)


def _lattice_points(
    pair: tuple[CRS, CRS] | None,
    t: Affine,
    rows: np.ndarray,
    cols: np.ndarray,
    spacing: float,
) -> tuple[np.ndarray, np.ndarray]:
    """The points ``t * (cols, rows)`` (a tensor lattice) in the second CRS of *pair*.

    Rows and columns are transformed exactly every few points (at most 8, and no
    further apart than ``_LATTICE_SPAN`` metres; *spacing* is the points' spacing
    in metres) and at the last; the rest are interpolated linearly between them.
    The map between two CRSs is smooth, so the error stays near a centimetre
    (``tests/gis/test_resampling.py`` measures it).
    """
    x, y = _apply(t, cols[None, :], rows[:, None])
    if pair is None:
        return x, y
    if pair[1].is_geographic:  # longitudes may jump at the antimeridian: every point
        return _transform(pair, x, y)
    step = int(min(_LATTICE_STEP, max(1, _LATTICE_SPAN // max(spacing, 1e-9))))
    r_nodes = np.unique(np.r_[np.arange(0, rows.size, step), rows.size - 1])
    c_nodes = np.unique(np.r_[np.arange(0, cols.size, step), cols.size - 1])
    xn, yn = _transform(pair, x[np.ix_(r_nodes, c_nodes)], y[np.ix_(r_nodes, c_nodes)])
    return (
        _interp_lattice(xn, r_nodes, c_nodes, rows.size, cols.size),
        _interp_lattice(yn, r_nodes, c_nodes, rows.size, cols.size),
    )


def _interp_lattice(
    nodes: np.ndarray, r_nodes: np.ndarray, c_nodes: np.ndarray, ny: int, nx: int
) -> np.ndarray:
    """Values on a (ny, nx) index lattice, linear between the node rows and columns."""
    along_cols = np.stack([np.interp(np.arange(nx), c_nodes, row) for row in nodes])
    return np.stack([np.interp(np.arange(ny), r_nodes, column) for column in along_cols.T], axis=1)


def _wrap_longitude(x: np.ndarray, geometry: GridGeometry) -> np.ndarray:
    """Longitudes moved by whole turns into the span of a geographic *geometry*."""
    if not geometry.is_geographic:
        return x
    west = geometry.bounds[0]
    return west + np.mod(x - west, 360.0)


def _apply(t: Affine, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The affine map *t* applied to arrays of points (broadcast)."""
    return t.a * x + t.b * y + t.c, t.d * x + t.e * y + t.f


def _row_blocks(ny: int, per_row: int) -> Iterator[tuple[int, int]]:
    rows = max(1, _BLOCK_POINTS // max(1, per_row))
    for start in range(0, ny, rows):
        yield start, min(ny, start + rows)


def _split_factor(src: GridGeometry, dst: GridGeometry) -> int:
    """Sub-cells per source-cell side so that each is at most an eighth of a destination cell."""
    src_size = max(src.cell_size_metres())
    dst_size = min(dst.cell_size_metres())
    return int(min(_MAX_SPLIT, max(1, math.ceil(8.0 * src_size / dst_size))))


def aggregate_values(
    values: np.ndarray, src: GridGeometry, dst: GridGeometry, partial: str = "sum"
) -> np.ndarray:
    """Area-weighted aggregation of *values* from *src* onto *dst*, conserving the integral.

    Parameters
    ----------
    values : numpy.ndarray
        Shape ``src.shape``: a density per unit area (a stress in Pa, a thickness in m);
        NaN marks missing cells, which contribute nothing.
    src, dst : GridGeometry
        Source and destination grids (rows in either order). Areas are the true cell
        areas (:func:`gridflex.gis.geometry.cell_areas`: ellipsoidal for geographic
        grids), so a geographic source aggregated onto an equal-area grid keeps
        ∫ values dA.
    partial : {"sum", "mean"}, default "sum"
        ``"sum"``: a destination cell's value is the integral of what falls in it over
        its whole area (a cell half covered by a load of q carries q/2: the total is
        kept). ``"mean"``: the mean of what covers it (for elevations, where a missing
        part is not a zero).

    Returns
    -------
    numpy.ndarray
        float64, shape ``dst.shape``; NaN where no valid source value falls.
    """
    if partial not in PARTIAL_RULES:
        raise InputError(f"partial must be one of {PARTIAL_RULES}, got {partial!r}")
    values = np.asarray(values, dtype=np.float64)
    if values.shape != tuple(src.shape):
        raise InputError(f"values have shape {values.shape}, the source grid {tuple(src.shape)}")
    pair = _crs_pair(src, dst)
    split = _split_factor(src, dst)
    d_up = dst.north_up()
    ny_d, nx_d = d_up.shape
    check_memory(8.0 * (3 * ny_d * nx_d + 2 * values.size), "aggregating onto the working grid")
    if pair is None:  # the same CRS: axis by axis, with sparse sharing matrices
        total, covered = _aggregate_separable(values, src, d_up, split)
    else:
        total, covered = _aggregate_points(values, src, d_up, split, pair)
    out = np.full(ny_d * nx_d, np.nan)
    has = covered > 0
    if partial == "sum":
        out[has] = total[has] / cell_areas(d_up).ravel()[has]
    else:
        out[has] = total[has] / covered[has]
    grid = out.reshape(ny_d, nx_d)
    return grid if d_up is dst else grid[::-1].copy()


def _aggregate_points(
    values: np.ndarray,
    src: GridGeometry,
    d_up: GridGeometry,
    split: int,
    pair: tuple[CRS, CRS] | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Shared integral and covered area per destination cell (flat), sub-cell by sub-cell
    through the CRS transform."""
    ny_d, nx_d = d_up.shape
    total = np.zeros(ny_d * nx_d)
    covered = np.zeros(ny_d * nx_d)
    src_area = cell_areas(src) / split**2
    inverse = ~d_up.transform
    offsets = (np.arange(split) + 0.5) / split
    sub_size = max(src.cell_size_metres()) / split
    ny_s, nx_s = src.shape
    sub_cols = (np.arange(nx_s)[:, None] + offsets[None, :]).ravel()
    for start, stop in _row_blocks(ny_s, nx_s * split * split):
        sub_rows = (np.arange(start, stop)[:, None] + offsets[None, :]).ravel()
        x, y = _lattice_points(pair, src.transform, sub_rows, sub_cols, sub_size)
        col, row = _apply(inverse, _wrap_longitude(x, d_up), y)
        block = np.repeat(np.repeat(values[start:stop], split, axis=0), split, axis=1)
        area = np.repeat(np.repeat(src_area[start:stop], split, axis=0), split, axis=1)
        keep = (col >= 0) & (col <= nx_d) & (row >= 0) & (row <= ny_d) & np.isfinite(block)
        for index, weight in _cloud_in_cell(row[keep] - 0.5, col[keep] - 0.5, ny_d, nx_d):
            total += np.bincount(
                index, weights=weight * block[keep] * area[keep], minlength=total.size
            )
            covered += np.bincount(index, weights=weight * area[keep], minlength=covered.size)
    return total, covered


def _axis_sharing(
    src_start: float,
    src_step: float,
    n_src: int,
    dst_start: float,
    dst_step: float,
    n_dst: int,
    split: int,
) -> sparse.csr_matrix:
    """(n_dst, n_src) weights sharing each source cell's ``split`` sub-cells among the two
    nearest destination centres along one axis (each source column sums to 1, less what
    falls beyond the destination's outer edges)."""
    offsets = (np.arange(split) + 0.5) / split
    source = np.repeat(np.arange(n_src), split)
    position = src_start + src_step * (source + np.tile(offsets, n_src))
    u = (position - dst_start) / dst_step  # in destination cells from its outer edge
    inside = (u >= 0) & (u <= n_dst)
    source, u = source[inside], u[inside] - 0.5
    lower = np.floor(u).astype(np.int64)
    frac = u - lower
    rows = np.concatenate([np.clip(lower, 0, n_dst - 1), np.clip(lower + 1, 0, n_dst - 1)])
    cols = np.concatenate([source, source])
    data = np.concatenate([1.0 - frac, frac]) / split
    return sparse.csr_matrix((data, (rows, cols)), shape=(n_dst, n_src))


def _aggregate_separable(
    values: np.ndarray, src: GridGeometry, d_up: GridGeometry, split: int
) -> tuple[np.ndarray, np.ndarray]:
    """As :func:`_aggregate_points` for grids in one CRS: the sharing is the product of
    one matrix per axis, applied as two sparse products (no per-point work)."""
    t, d = src.transform, d_up.transform
    ny_s, nx_s = src.shape
    ny_d, nx_d = d_up.shape
    along_x = _axis_sharing(t.c, t.a, nx_s, d.c, d.a, nx_d, split)
    along_y = _axis_sharing(t.f, t.e, ny_s, d.f, d.e, ny_d, split)
    area = cell_areas(src)
    known = np.isfinite(values)
    force = np.where(known, values, 0.0) * area
    cover = known * area
    total = along_y @ (along_x @ force.T).T
    covered = along_y @ (along_x @ cover.T).T
    return np.asarray(total).ravel(), np.asarray(covered).ravel()


def _cloud_in_cell(
    row: np.ndarray, col: np.ndarray, ny: int, nx: int
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Flat cell indices and weights sharing points among their four nearest centres.

    *row*, *col* are fractional positions in units of cells from the first centre. Each
    point's weights sum to 1 (a share beyond the outermost centres goes to the edge
    cell), so what is shared is kept; a lattice of points finer than the cells gives a
    smooth field, where dropping each point into one cell would alias (common practice
    of particle deposition, the "cloud-in-cell" weights).
    """
    r0 = np.floor(row).astype(np.int64)
    c0 = np.floor(col).astype(np.int64)
    fr, fc = _snap(row - r0), _snap(col - c0)
    shares = []
    for dr, wr in ((0, 1.0 - fr), (1, fr)):
        for dc, wc in ((0, 1.0 - fc), (1, fc)):
            rr = np.clip(r0 + dr, 0, ny - 1)
            cc = np.clip(c0 + dc, 0, nx - 1)
            shares.append((rr * nx + cc, wr * wc))
    return shares


def sample_values(values: np.ndarray, src: GridGeometry, dst: GridGeometry) -> np.ndarray:
    """Bilinear values of the *src* grid at the cell centres of *dst*.

    Parameters
    ----------
    values : numpy.ndarray
        Shape ``src.shape``; NaN marks missing values (a NaN neighbour gives NaN).
    src, dst : GridGeometry
        Source and destination grids (rows in either order).

    Returns
    -------
    numpy.ndarray
        float64, shape ``dst.shape``; NaN at centres outside *src*'s outer cell edges.
        Between the outermost source centres and those edges the edge value is kept.
    """
    values = np.asarray(values, dtype=np.float64)
    if values.shape != tuple(src.shape):
        raise InputError(f"values have shape {values.shape}, the source grid {tuple(src.shape)}")
    pair = _crs_pair(dst, src)
    ny_s, nx_s = src.shape
    ny_d, nx_d = dst.shape
    check_memory(8.0 * (ny_d * nx_d + 6 * min(_BLOCK_POINTS, ny_d * nx_d)), "sampling a grid")
    if pair is None:  # the same CRS: one axis at a time
        return _sample_separable(values, src, dst)
    inverse = ~src.transform
    out = np.empty((ny_d, nx_d))
    cols = np.arange(nx_d) + 0.5
    size = max(dst.cell_size_metres())
    for start, stop in _row_blocks(ny_d, nx_d):
        x, y = _lattice_points(pair, dst.transform, np.arange(start, stop) + 0.5, cols, size)
        col, row = _apply(inverse, _wrap_longitude(x, src), y)
        col = col - 0.5  # fractional index of the source cell centres
        row = row - 0.5
        inside = (col >= -0.5) & (col <= nx_s - 0.5) & (row >= -0.5) & (row <= ny_s - 0.5)
        got = _bilinear(values, np.clip(row, 0, ny_s - 1), np.clip(col, 0, nx_s - 1))
        out[start:stop] = np.where(inside, got, np.nan)
    return out


def _snap(frac: np.ndarray) -> np.ndarray:
    """Fractions within 1e-9 of 0 or 1 set to it: a centre that coincides with a source
    centre up to round-off reads that centre alone."""
    return np.where(frac < 1e-9, 0.0, np.where(frac > 1.0 - 1e-9, 1.0, frac))


def _axis_weights(
    src_start: float, src_step: float, n_src: int, dst_start: float, dst_step: float, n_dst: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per destination centre along one axis: the two source cells, their weights, and
    whether it lies within the source's outer edges."""
    position = dst_start + dst_step * (np.arange(n_dst) + 0.5)
    index = (position - src_start) / src_step - 0.5  # in source centres
    inside = (index >= -0.5) & (index <= n_src - 0.5)
    index = np.clip(index, 0, n_src - 1)
    lower = np.minimum(np.floor(index).astype(np.int64), max(n_src - 2, 0))
    frac = _snap(index - lower)
    return lower, np.minimum(lower + 1, n_src - 1), 1.0 - frac, frac, inside


def _sample_separable(values: np.ndarray, src: GridGeometry, dst: GridGeometry) -> np.ndarray:
    """:func:`sample_values` for grids in one CRS: interpolate along x, then along y. A
    neighbour of zero weight is not read (a NaN there does not spread)."""
    t, d = src.transform, dst.transform
    (ny_s, nx_s), (ny_d, nx_d) = src.shape, dst.shape
    c0, c1, wc0, wc1, in_x = _axis_weights(t.c, t.a, nx_s, d.c, d.a, nx_d)
    r0, r1, wr0, wr1, in_y = _axis_weights(t.f, t.e, ny_s, d.f, d.e, ny_d)
    along_x = np.where(wc0 > 0, wc0 * values[:, c0], 0.0) + np.where(
        wc1 > 0, wc1 * values[:, c1], 0.0
    )
    out = np.where(wr0[:, None] > 0, wr0[:, None] * along_x[r0], 0.0)
    out += np.where(wr1[:, None] > 0, wr1[:, None] * along_x[r1], 0.0)
    out[~in_y, :] = np.nan
    out[:, ~in_x] = np.nan
    return out


def _bilinear(values: np.ndarray, row: np.ndarray, col: np.ndarray) -> np.ndarray:
    """Bilinear interpolation at fractional (row, col) inside the array's centres.

    A neighbour of zero weight is not read, so a point on a valid centre next to a
    missing one keeps its value; a missing neighbour of positive weight gives NaN.
    """
    ny, nx = values.shape
    r0 = np.minimum(np.floor(row).astype(np.int64), max(ny - 2, 0))
    c0 = np.minimum(np.floor(col).astype(np.int64), max(nx - 2, 0))
    fr, fc = _snap(row - r0), _snap(col - c0)
    r1, c1 = np.minimum(r0 + 1, ny - 1), np.minimum(c0 + 1, nx - 1)
    out = np.zeros(row.shape)
    for rr, cc, weight in (
        (r0, c0, (1 - fr) * (1 - fc)),
        (r0, c1, (1 - fr) * fc),
        (r1, c0, fr * (1 - fc)),
        (r1, c1, fr * fc),
    ):
        value = values[rr, cc]
        out += np.where(weight > 0, weight * np.where(weight > 0, value, 0.0), 0.0)
        out[(weight > 0) & ~np.isfinite(value)] = np.nan
    return out
