"""GeoJSON outlines of a result (RFC 7946): moat, forebulge crest, zero-deflection line.

RFC 7946 (Butler et al. 2016, *The GeoJSON Format*): positions are WGS84
longitude, latitude in degrees (section 4); polygon rings are closed, exterior
rings counter-clockwise and holes clockwise (section 3.1.6). Longitudes are
wrapped into [-180, 180]; outlines that cross the antimeridian are cut there
(section 3.1.9). Domains that contain a pole are not handled.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.errors import InputError
from gridflex.gis.geometry import parse_crs, to_lonlat
from gridflex.io.atomic import atomic_path
from gridflex.results.outlines import (
    Polygon,
    check_moat_depth,
    forebulge_crest,
    moat_outline,
    signed_area,
    zero_line,
)

__all__ = ["COORDINATE_DECIMALS", "outline_features", "write_geojson"]

log = logging.getLogger(__name__)

COORDINATE_DECIMALS = 7
"""Decimals kept in longitude/latitude (1e-7 degree is about 1 cm)."""


class _Seam:
    """The antimeridian as seen from a domain centred at longitude *centre* (degrees).

    Longitudes are unwrapped into [centre - 180, centre + 180), where the
    antimeridian is the single line ``lon = at`` (180 or -180). A piece of an
    outline on the far side of it is shifted by 360 degrees, so that every
    position stays in [-180, 180] and no piece crosses (RFC 7946 section 3.1.9).
    """

    def __init__(self, centre: float):
        self.centre = centre
        self.at = 180.0 if centre >= 0 else -180.0

    def unwrap(self, lon: np.ndarray) -> np.ndarray:
        return self.centre + (lon - self.centre + 180.0) % 360.0 - 180.0

    def far(self, lon: np.ndarray) -> np.ndarray:
        """True beyond the antimeridian (the side that is shifted)."""
        return lon > self.at if self.at > 0 else lon < self.at

    def shift(self, lon: np.ndarray) -> np.ndarray:
        return lon - 360.0 if self.at > 0 else lon + 360.0


def _seam(deflection: xr.DataArray, crs: CRS) -> _Seam | None:
    """The antimeridian seam if the domain crosses it, else None (poles are not handled)."""
    x = np.asarray(deflection["x"].values, float)
    y = np.asarray(deflection["y"].values, float)
    cx, cy = 0.5 * (x[0] + x[-1]), 0.5 * (y[0] + y[-1])
    centre = float(to_lonlat([cx], [cy], crs)[0][0])
    edge_x = np.concatenate([x, np.full(y.size, x[-1]), x[::-1], np.full(y.size, x[0])])
    edge_y = np.concatenate([np.full(x.size, y[0]), y, np.full(x.size, y[-1]), y[::-1]])
    seam = _Seam(centre)
    lon = seam.unwrap(to_lonlat(edge_x, edge_y, crs)[0])
    return seam if np.any(seam.far(lon)) else None


def _positions(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    return np.round(np.column_stack([lon, lat]), COORDINATE_DECIMALS)


def _ring(
    points: np.ndarray,
    crs: CRS,
    counter_clockwise: bool,
    seam: _Seam | None = None,
    far: bool = False,
) -> list[list[float]] | None:
    lon, lat = to_lonlat(points[:, 0], points[:, 1], crs)
    if seam is not None:  # a piece cut at the antimeridian: snap onto it, then shift
        lon = seam.unwrap(lon)
        side = np.maximum if (seam.at > 0) == far else np.minimum
        lon = side(lon, seam.at)
        lon = seam.shift(lon) if far else lon
    ring = _positions(lon, lat)
    ring[-1] = ring[0]  # closed exactly, whatever the rounding did
    if len(np.unique(ring[:-1], axis=0)) < 3:
        return None
    if (signed_area(ring) > 0) != counter_clockwise:
        ring = ring[::-1]
    return ring.tolist()


def _polygon(
    polygon: Polygon, crs: CRS, seam: _Seam | None = None, far: bool = False
) -> list[list[list[float]]] | None:
    exterior = _ring(polygon.exterior, crs, True, seam, far)
    if exterior is None:
        return None
    holes = [h for h in (_ring(h, crs, False, seam, far) for h in polygon.holes) if h is not None]
    return [exterior, *holes]


def _moat_polygons(
    deflection: xr.DataArray, depth: float, crs: CRS, seam: _Seam | None
) -> list[list[list[list[float]]]]:
    """Moat polygons in lon/lat; cut along the antimeridian when the domain crosses it."""
    if seam is None:
        pieces = [(moat_outline(deflection, depth), False)]
    else:
        # min(w, depth + k g) >= depth is {w >= depth} on the side where g >= 0; the cut edge
        # is the linear interpolation of g = +-(lon - seam) between cell centres
        yy, xx = np.meshgrid(deflection["y"].values, deflection["x"].values, indexing="ij")
        lon = seam.unwrap(to_lonlat(xx, yy, crs)[0])
        w = np.asarray(deflection.values, float)
        distance = (lon - seam.at) if seam.at < 0 else (seam.at - lon)  # >= 0 on the near side
        scale = abs(float(depth))
        pieces = [
            (
                moat_outline(
                    deflection.copy(data=np.minimum(w, depth + scale * sign * distance)), depth
                ),
                far,
            )
            for sign, far in ((1.0, False), (-1.0, True))
        ]
    out: list[list[list[list[float]]]] = []
    for polygons, far in pieces:
        out.extend(p for p in (_polygon(p, crs, seam, far) for p in polygons) if p)
    return out


def _lines(lines: Sequence[np.ndarray], crs: CRS, seam: _Seam | None = None) -> list:
    out = []
    for line in lines:
        lon, lat = to_lonlat(line[:, 0], line[:, 1], crs)
        if seam is None:
            parts = [(lon, lat)]
        else:
            lon = seam.unwrap(lon)
            parts = _split_at_seam(lon, lat, seam)
        for plon, plat in parts:
            if len(plon) >= 2:
                out.append(_positions(plon, plat).tolist())
    return out


def _split_at_seam(lon: np.ndarray, lat: np.ndarray, seam: _Seam) -> list:
    """Pieces of an unwrapped line on either side of the antimeridian, each ending on it."""
    far = seam.far(lon)
    cuts = np.flatnonzero(far[1:] != far[:-1])
    parts, start = [], 0
    pending: tuple[float, float] | None = None
    for i in [*cuts, len(lon) - 1]:
        plon, plat = list(lon[start : i + 1]), list(lat[start : i + 1])
        if pending is not None:
            plon.insert(0, pending[0])
            plat.insert(0, pending[1])
        if i < len(lon) - 1:
            t = (seam.at - lon[i]) / (lon[i + 1] - lon[i])
            crossing = float(lat[i] + t * (lat[i + 1] - lat[i]))
            plon.append(seam.at)
            plat.append(crossing)
            pending = (seam.at, crossing)
        piece_lon = np.asarray(plon)
        if far[i]:
            piece_lon = seam.shift(piece_lon)
        parts.append((piece_lon, np.asarray(plat)))
        start = i + 1
    closed = lon[0] == lon[-1] and lat[0] == lat[-1]
    if closed and len(parts) >= 3:  # a loop: its first and last pieces are one
        (lon_a, lat_a), (lon_b, lat_b) = parts[-1], parts[0]
        parts = [
            (np.concatenate([lon_a, lon_b[1:]]), np.concatenate([lat_a, lat_b[1:]])),
            *parts[1:-1],
        ]
    return parts


def _feature(geometry: dict[str, Any], properties: dict[str, Any]) -> dict[str, Any]:
    return {"type": "Feature", "geometry": geometry, "properties": properties}


def outline_features(result: xr.Dataset, crs: CRS | str | None, moat_depth: float) -> list[dict]:
    """GeoJSON Feature dicts of the moat, forebulge crest and zero-deflection line.

    Parameters
    ----------
    result : xarray.Dataset
        With ``deflection`` (m, positive down) and ``load`` on dims ``("y", "x")``,
        coordinates in *crs* units.
    crs : CRS or str
        CRS of the result's coordinates.
    moat_depth : float
        Depth (m, positive down) of the moat outline.

    Returns
    -------
    list of dict
        ``moat`` (Polygon or MultiPolygon), ``forebulge_crest`` and
        ``zero_deflection`` (MultiLineString), positions in longitude/latitude;
        properties ``name``, ``long_name``, ``level`` and ``units``. A feature
        with nothing to draw (e.g. the deflection never reaches *moat_depth*) is
        left out and logged.

    Raises
    ------
    InputError
        No CRS (the outlines cannot be placed in longitude/latitude), or no
        ``deflection``/``load`` in *result*.
    """
    if crs is None:
        raise InputError(
            "the result has no coordinate reference system, so its outlines cannot be "
            "placed in longitude/latitude for GeoJSON; give the input a CRS"
        )
    crs_object = crs if isinstance(crs, CRS) else parse_crs(crs, "outline crs")
    for name in ("deflection", "load"):
        if name not in result:
            raise InputError(f"result has no variable {name!r}; it is needed for the outlines")
    deflection = result["deflection"].copy(deep=False)
    deflection.attrs = {**deflection.attrs, "crs_wkt": crs_object.to_wkt()}
    w = np.asarray(deflection.values, float)
    moat_depth = check_moat_depth(moat_depth)
    seam = _seam(deflection, crs_object)
    features = []

    polygons = _moat_polygons(deflection, moat_depth, crs_object, seam)
    if polygons:
        geometry = (
            {"type": "Polygon", "coordinates": polygons[0]}
            if len(polygons) == 1
            else {"type": "MultiPolygon", "coordinates": polygons}
        )
        features.append(
            _feature(
                geometry,
                {
                    "name": "moat",
                    "long_name": f"region where the deflection is at least {moat_depth} m",
                    "level": float(moat_depth),
                    "units": "m",
                },
            )
        )
    else:
        log.info("deflection never reaches the moat depth %s m: no moat outline", moat_depth)
    line_sets = (
        (
            forebulge_crest(deflection, result["load"]),
            "forebulge_crest",
            "forebulge crest (level: the deflection at the highest uplift)",
            float(np.nanmin(w)),
        ),
        (zero_line(deflection), "zero_deflection", "zero-deflection line", 0.0),
    )
    for lines, name, long_name, level in line_sets:
        coordinates = _lines(lines, crs_object, seam)
        if not coordinates:
            log.info("no %s line found", name)
            continue
        features.append(
            _feature(
                {"type": "MultiLineString", "coordinates": coordinates},
                {"name": name, "long_name": long_name, "level": level, "units": "m"},
            )
        )
    return features


def write_geojson(
    features: Iterable[dict],
    path: str | Path,
    overwrite: bool = False,
    inputs: Iterable[str | Path] = (),
) -> Path:
    """Write *features* as a GeoJSON FeatureCollection (RFC 7946), atomically.

    Returns
    -------
    pathlib.Path
        *path*.
    """
    collection = {"type": "FeatureCollection", "features": list(features)}
    with atomic_path(path, overwrite, inputs) as tmp:
        tmp.write_text(json.dumps(collection, allow_nan=False) + "\n", encoding="utf-8")
    log.debug("wrote %s", path)
    return Path(path)
