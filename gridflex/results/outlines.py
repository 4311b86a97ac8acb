"""Outlines traced on a deflection grid: the moat, the zero-deflection line, the forebulge crest.

All shapes are in the grid's own coordinates (``x``, ``y``); :func:`outline_features`
turns them into GeoJSON features in longitude/latitude. Contours come from
contourpy (the marching-squares engine shipped with matplotlib) and are linear
interpolations between cell centres.

Definitions (w positive down, m):

* **moat** at depth d: the region where w >= d, as polygons with holes.
* **zero-deflection line**: the w = 0 contour around the depressed regions
  (connected, 8-neighbour, w > 0) whose deepest point reaches
  :data:`ZERO_LINE_MIN_AMPLITUDE` of the largest w on the grid; the weak
  far-field lobes (the second zero of a point or line load) and round-off
  ripples far from the load are dropped.
* **forebulge crest**: let d be the distance (m) from the load footprint (cells
  where the load exceeds :data:`FOOTPRINT_FRACTION` of its peak;
  scipy.ndimage.distance_transform_edt) and n = grad d / |grad d| the direction
  away from the load. The crest is the zero contour of dw/dn = grad w . n — where
  the plate stops rising when walking away from the load — kept only where the
  uplift is at least :data:`CREST_MIN_UPLIFT` of the highest uplift
  (w < -0.1 max(-w)). Between two loads, on the line where their distances are
  equal, n flips direction; a crest traced there is where the two bulges meet.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import cast

import contourpy
import numpy as np
import xarray as xr
from scipy import ndimage

from gridflex.errors import InputError
from gridflex.gis.geometry import geometry_of
from gridflex.validation import check_number

__all__ = [
    "CREST_MIN_UPLIFT",
    "FOOTPRINT_FRACTION",
    "Polygon",
    "ZERO_LINE_MIN_AMPLITUDE",
    "check_moat_depth",
    "forebulge_crest",
    "moat_outline",
    "signed_area",
    "zero_line",
]

log = logging.getLogger(__name__)

FOOTPRINT_FRACTION = 0.01
"""A cell is under the load when the load exceeds this fraction of its peak."""

CREST_MIN_UPLIFT = 0.1
"""The crest is traced only where the uplift -w exceeds this fraction of its maximum."""

ZERO_LINE_MIN_AMPLITUDE = 0.01
"""Depressions shallower than this fraction of max w get no zero line (the second lobe of a
line load is exp(-2 pi) = 0.19% of its peak: Hetényi 1946)."""


def signed_area(ring: np.ndarray) -> float:
    """Shoelace area of a closed ring ``(N, 2)``: positive when counter-clockwise."""
    x, y = ring[:, 0], ring[:, 1]
    return 0.5 * float(np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]))


def _oriented(ring: np.ndarray, counter_clockwise: bool) -> np.ndarray:
    if not np.array_equal(ring[0], ring[-1]):
        ring = np.vstack([ring, ring[:1]])
    if (signed_area(ring) > 0) != counter_clockwise:
        ring = ring[::-1]
    return np.ascontiguousarray(ring)


@dataclass(frozen=True)
class Polygon:
    """A polygon with holes; rings are closed ``(N, 2)`` arrays of ``(x, y)``.

    The exterior runs counter-clockwise and the holes clockwise (the GeoJSON
    right-hand rule, RFC 7946 section 3.1.6).
    """

    exterior: np.ndarray
    holes: tuple[np.ndarray, ...] = field(default=())

    def __post_init__(self) -> None:
        object.__setattr__(self, "exterior", _oriented(np.asarray(self.exterior, float), True))
        object.__setattr__(
            self, "holes", tuple(_oriented(np.asarray(h, float), False) for h in self.holes)
        )

    @property
    def area(self) -> float:
        """Area in squared coordinate units (exterior minus holes)."""
        return signed_area(self.exterior) + sum(signed_area(h) for h in self.holes)


def _field(da: xr.DataArray, label: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if not isinstance(da, xr.DataArray) or da.ndim != 2 or set(da.dims) != {"y", "x"}:
        raise InputError(f"{label} must be a 2-D DataArray on dims ('y', 'x')")
    da = da.transpose("y", "x")
    values = np.asarray(da.values, dtype=np.float64)
    if min(values.shape) < 2:
        raise InputError(f"{label} needs at least 2 cells along each axis, got {values.shape}")
    return np.asarray(da["x"].values, float), np.asarray(da["y"].values, float), values


def _generator(x: np.ndarray, y: np.ndarray, z: np.ndarray) -> contourpy.ContourGenerator:
    return contourpy.contour_generator(
        x,
        y,
        np.ma.masked_invalid(z),
        name="serial",
        corner_mask=True,
        line_type=contourpy.LineType.Separate,
        fill_type=contourpy.FillType.OuterOffset,
    )


def _lines(x: np.ndarray, y: np.ndarray, z: np.ndarray, level: float) -> list[np.ndarray]:
    return [np.asarray(line, float) for line in _generator(x, y, z).lines(level) if len(line) > 1]


def check_moat_depth(depth: object) -> float:
    """*depth* as a float; InputError unless it is a finite number > 0 (m)."""
    return check_number("moat depth", depth, unit="m", minimum=0.0, strict=True)


def moat_outline(deflection: xr.DataArray, depth: float) -> list[Polygon]:
    """Polygons of the region where the deflection reaches *depth* (w >= depth).

    Parameters
    ----------
    deflection : xarray.DataArray
        w (m, positive down) on dims ``("y", "x")``; NaN cells are left out.
    depth : float
        Moat depth (m, positive).

    Returns
    -------
    list of Polygon
        In the grid's coordinates; empty when w never reaches *depth*.
    """
    x, y, w = _field(deflection, "deflection")
    depth = check_moat_depth(depth)
    top = np.nanmax(w) if np.any(np.isfinite(w)) else -np.inf
    if not top >= depth:
        return []
    box = _bounding_box(w >= depth, margin=1)
    x, y, w = x[box[1]], y[box[0]], w[box]
    # a generator made with FillType.OuterOffset fills as (points, offsets) per polygon;
    # contourpy's return type is the union over all fill types
    points, offsets = cast(
        tuple[list[np.ndarray], list[np.ndarray]],
        _generator(x, y, w).filled(float(depth), float(top) + 1.0),
    )
    polygons = []
    for pts, off in zip(points, offsets, strict=True):
        rings = [pts[off[i] : off[i + 1]] for i in range(len(off) - 1)]
        rings = [r for r in rings if len(r) >= 4]
        if rings:
            polygons.append(Polygon(rings[0], tuple(rings[1:])))
    return polygons


def zero_line(deflection: xr.DataArray) -> list[np.ndarray]:
    """The zero-deflection line(s) as ``(N, 2)`` arrays of ``(x, y)``.

    The w = 0 contour around the depressed regions (connected, w > 0) whose
    deepest point reaches :data:`ZERO_LINE_MIN_AMPLITUDE` of the largest w
    (module docstring). Closed loops repeat their first point.
    """
    x, y, w = _field(deflection, "deflection")
    finite = np.isfinite(w)
    if not finite.any() or not np.nanmax(w) > 0:
        return []
    w = np.where(finite, w, np.nan)
    top = float(np.nanmax(w))
    labels, count = ndimage.label(finite & (w > 0), structure=np.ones((3, 3), bool))
    strong = np.zeros(count + 1, dtype=bool)  # regions holding a cell deep enough
    strong[labels[w >= ZERO_LINE_MIN_AMPLITUDE * top]] = True
    strong[0] = False
    keep = strong[labels]
    # weak depressions and exact zeros become slightly negative: no crossing is traced there,
    # while the crossings next to the kept regions use the true values on both sides
    z = np.where(keep | (w < 0), w, -1e-12 * top)
    box = _bounding_box(keep, margin=1)  # every crossing is next to a kept cell
    return _lines(x[box[1]], y[box[0]], z[box], 0.0)


def _cell_metres(da: xr.DataArray) -> tuple[float, float]:
    """Cell size (dy, dx) in metres: from the CRS in attrs["crs_wkt"] if geographic."""
    wkt = da.attrs.get("crs_wkt", "")
    y = np.asarray(da["y"].values, float)
    x = np.asarray(da["x"].values, float)
    if wkt:
        return geometry_of(da.transpose("y", "x")).cell_size_metres()
    return (abs(float(y[1] - y[0])), abs(float(x[1] - x[0])))


def forebulge_crest(deflection: xr.DataArray, load: xr.DataArray) -> list[np.ndarray]:
    """The forebulge crest line(s) as ``(N, 2)`` arrays of ``(x, y)``.

    Parameters
    ----------
    deflection : xarray.DataArray
        w (m, positive down). A geographic grid needs ``attrs["crs_wkt"]`` so
        that distances are measured in metres.
    load : xarray.DataArray
        The load (any unit, positive down) on the same grid.

    Returns
    -------
    list of numpy.ndarray
        Zero contour of the derivative of w away from the load footprint, where
        the uplift exceeds 10% of its maximum (see the module docstring). Empty
        when there is no load or no uplift.
    """
    x, y, w = _field(deflection, "deflection")
    _, _, q = _field(load, "load")
    if q.shape != w.shape:
        raise InputError(f"load shape {q.shape} differs from the deflection's {w.shape}")
    q = np.where(np.isfinite(q), q, 0.0)
    peak = float(q.max())
    uplift = float(-np.nanmin(w)) if np.any(np.isfinite(w)) else 0.0
    if peak <= 0.0 or uplift <= 0.0:
        log.info("no load or no uplift: no forebulge crest")
        return []
    footprint = q > FOOTPRINT_FRACTION * peak
    raised = w < -CREST_MIN_UPLIFT * uplift
    # work in the box holding the load and the raised region, with a margin of 2 cells so that
    # the central differences there are those of the full grid
    box = _bounding_box(footprint | raised, margin=2)
    footprint, raised, w, y, x = footprint[box], raised[box], w[box], y[box[0]], x[box[1]]
    dy, dx = _cell_metres(deflection)
    distance = ndimage.distance_transform_edt(~footprint, sampling=(dy, dx))
    gdy, gdx = np.gradient(distance, dy, dx)
    gwy, gwx = np.gradient(w, dy, dx)
    norm = np.hypot(gdy, gdx)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = (gwy * gdy + gwx * gdx) / norm
    slope[~raised | (norm == 0)] = np.nan
    return _lines(x, y, slope, 0.0)


def _bounding_box(mask: np.ndarray, margin: int) -> tuple[slice, slice]:
    """Slices of the smallest box holding every True cell of *mask*, grown by *margin*."""
    box = []
    for axis in (1, 0):
        hits = np.flatnonzero(mask.any(axis=axis))
        box.append(slice(max(int(hits[0]) - margin, 0), int(hits[-1]) + margin + 1))
    return box[0], box[1]
