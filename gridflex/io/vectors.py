"""GeoJSON outlines of a result (RFC 7946): moat, forebulge crest, zero-deflection line.

RFC 7946 (Butler et al. 2016, *The GeoJSON Format*): positions are WGS84
longitude, latitude in degrees (section 4); polygon rings are closed, exterior
rings counter-clockwise and holes clockwise (section 3.1.6). Longitudes are
wrapped into [-180, 180]; outlines that cross the antimeridian are not split.
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

from ..errors import InputError
from ..geo import parse_crs, to_lonlat
from ..outlines import Polygon, forebulge_crest, moat_outline, signed_area, zero_line
from .atomic import atomic_path

__all__ = ["COORDINATE_DECIMALS", "outline_features", "write_geojson"]

log = logging.getLogger(__name__)

COORDINATE_DECIMALS = 7
"""Decimals kept in longitude/latitude (1e-7 degree is about 1 cm)."""


def _lonlat(points: np.ndarray, crs: CRS) -> np.ndarray:
    lon, lat = to_lonlat(points[:, 0], points[:, 1], crs)
    return np.round(np.column_stack([lon, lat]), COORDINATE_DECIMALS)


def _ring(points: np.ndarray, crs: CRS, counter_clockwise: bool) -> list[list[float]] | None:
    ring = _lonlat(points, crs)
    ring[-1] = ring[0]  # closed exactly, whatever the rounding did
    if len(np.unique(ring[:-1], axis=0)) < 3:
        return None
    if (signed_area(ring) > 0) != counter_clockwise:
        ring = ring[::-1]
    return ring.tolist()


def _polygon(polygon: Polygon, crs: CRS) -> list[list[list[float]]] | None:
    exterior = _ring(polygon.exterior, crs, True)
    if exterior is None:
        return None
    holes = [h for h in (_ring(h, crs, False) for h in polygon.holes) if h is not None]
    return [exterior, *holes]


def _lines(lines: Sequence[np.ndarray], crs: CRS) -> list[list[list[float]]]:
    out = []
    for line in lines:
        coords = _lonlat(line, crs)
        if len(coords) >= 2:
            out.append(coords.tolist())
    return out


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
    crs = crs if isinstance(crs, CRS) else parse_crs(crs, "outline crs")
    for name in ("deflection", "load"):
        if name not in result:
            raise InputError(f"result has no variable {name!r}; it is needed for the outlines")
    deflection = result["deflection"].copy(deep=False)
    deflection.attrs = {**deflection.attrs, "crs_wkt": crs.to_wkt()}
    w = np.asarray(deflection.values, float)
    features = []

    polygons = [p for p in (_polygon(p, crs) for p in moat_outline(deflection, moat_depth)) if p]
    if polygons:
        geometry = ({"type": "Polygon", "coordinates": polygons[0]} if len(polygons) == 1
                    else {"type": "MultiPolygon", "coordinates": polygons})
        features.append(_feature(geometry, {
            "name": "moat", "long_name": f"region where the deflection is at least {moat_depth} m",
            "level": float(moat_depth), "units": "m",
        }))
    else:
        log.info("deflection never reaches the moat depth %s m: no moat outline", moat_depth)

    crest = _lines(forebulge_crest(deflection, result["load"]), crs)
    if crest:
        features.append(_feature({"type": "MultiLineString", "coordinates": crest}, {
            "name": "forebulge_crest",
            "long_name": "forebulge crest (level: the deflection at the highest uplift)",
            "level": float(np.nanmin(w)), "units": "m",
        }))
    else:
        log.info("no forebulge crest found")

    zero = _lines(zero_line(deflection), crs)
    if zero:
        features.append(_feature({"type": "MultiLineString", "coordinates": zero}, {
            "name": "zero_deflection", "long_name": "zero-deflection line",
            "level": 0.0, "units": "m",
        }))
    else:
        log.info("no zero-deflection line found")
    return features


def write_geojson(
    features: Iterable[dict], path: str | Path, overwrite: bool = False,
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
    log.info("wrote %s", path)
    return Path(path)
