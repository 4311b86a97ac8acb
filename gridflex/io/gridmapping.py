"""CF grid-mapping attributes for a coordinate reference system.

CF-1.8 describes a map projection by a grid-mapping variable with a
``grid_mapping_name`` and its parameters (CF conventions, appendix F); ``crs_wkt``
carries the full definition and ``spatial_ref`` is what GDAL looks for. The
parameters are taken from the PROJ definition of the CRS; projections without a CF
name get only the WKT forms, which GDAL and most GIS still read.
"""

from __future__ import annotations

import math
from typing import Any

from rasterio.crs import CRS

__all__ = ["cf_grid_mapping"]

_FALSE_ORIGIN = {"false_easting": "x_0", "false_northing": "y_0"}

_CF_PROJECTIONS: dict[str, tuple[str, dict[str, str]]] = {
    "laea": (
        "lambert_azimuthal_equal_area",
        {
            "longitude_of_projection_origin": "lon_0",
            "latitude_of_projection_origin": "lat_0",
            **_FALSE_ORIGIN,
        },
    ),
    "tmerc": (
        "transverse_mercator",
        {
            "longitude_of_central_meridian": "lon_0",
            "latitude_of_projection_origin": "lat_0",
            "scale_factor_at_central_meridian": "k_0",
            **_FALSE_ORIGIN,
        },
    ),
    "stere": (
        "polar_stereographic",
        {
            "straight_vertical_longitude_from_pole": "lon_0",
            "latitude_of_projection_origin": "lat_0",
            "standard_parallel": "lat_ts",
            **_FALSE_ORIGIN,
        },
    ),
    "aeqd": (
        "azimuthal_equidistant",
        {
            "longitude_of_projection_origin": "lon_0",
            "latitude_of_projection_origin": "lat_0",
            **_FALSE_ORIGIN,
        },
    ),
    "lcc": (
        "lambert_conformal_conic",
        {
            "longitude_of_central_meridian": "lon_0",
            "latitude_of_projection_origin": "lat_0",
            **_FALSE_ORIGIN,
        },
    ),
    "merc": ("mercator", {"longitude_of_projection_origin": "lon_0", **_FALSE_ORIGIN}),
}


def cf_grid_mapping(crs: CRS) -> dict[str, Any]:
    """Attributes of a CF grid-mapping variable for *crs*.

    Parameters
    ----------
    crs : rasterio.crs.CRS

    Returns
    -------
    dict
        ``grid_mapping_name`` and parameters where CF names the projection, and
        always ``crs_wkt`` and ``spatial_ref``.

    Examples
    --------
    >>> attrs = cf_grid_mapping(CRS.from_epsg(4326))
    >>> attrs["grid_mapping_name"]
    'latitude_longitude'
    """
    wkt = crs.to_wkt()
    attrs: dict[str, Any] = {}
    params = crs.to_dict()
    proj = params.get("proj")
    if crs.is_geographic:
        attrs["grid_mapping_name"] = "latitude_longitude"
    elif proj == "utm":
        zone = int(params["zone"])
        attrs.update(
            {
                "grid_mapping_name": "transverse_mercator",
                "longitude_of_central_meridian": float(zone * 6 - 183),
                "latitude_of_projection_origin": 0.0,
                "scale_factor_at_central_meridian": 0.9996,
                "false_easting": 500000.0,
                "false_northing": 10000000.0 if params.get("south") else 0.0,
            }
        )
    elif proj in _CF_PROJECTIONS:
        name, mapping = _CF_PROJECTIONS[proj]
        attrs["grid_mapping_name"] = name
        for cf_key, proj_key in mapping.items():
            value = params.get(proj_key, 1.0 if proj_key == "k_0" else 0.0)
            if isinstance(value, (int, float)) and math.isfinite(value):
                attrs[cf_key] = float(value)
    attrs["crs_wkt"] = wkt
    attrs["spatial_ref"] = wkt
    return attrs
