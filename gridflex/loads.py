"""Vertical stress (Pa, positive downward) from layers of material.

A layer of density rho and thickness h resting in air presses down with
q = rho g h. A layer that replaces water (a submarine edifice, sediment on the
sea floor) presses with its density minus the water's: pass that difference as
the density.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage

from gridflex.constants import DEFAULT_GRAVITY, SEA_WATER_DENSITY
from gridflex.errors import InputError
from gridflex.grid import check_grid, check_same_grid, grid_values
from gridflex.validation import check_density, check_number

__all__ = [
    "load_attrs",
    "load_from_elevation",
    "load_from_layers",
    "pressure_from_height",
    "pressure_from_layers",
    "regional_surface",
]

Density = float | xr.DataArray
LayerSpec = tuple[xr.DataArray, Density]
Surface = float | xr.DataArray
LOAD_KINDS = ("thickness", "stress", "elevation")  # a layer in m, in Pa, or a surface in m


def load_attrs() -> dict[str, str]:
    """CF-style attributes of a ``load`` variable (Pa, positive downward)."""
    return {"units": "Pa", "long_name": "vertical stress of the load (positive downward)"}


def _layer_items(
    layers: Iterable[LayerSpec] | Mapping[str, LayerSpec], caller: str, what: str
) -> list[LayerSpec]:
    """The layers as a list; none is an error of *caller*."""
    items = list(layers.values()) if isinstance(layers, Mapping) else list(layers)
    if not items:
        raise InputError(f"{caller} needs at least one ({what}, density) layer")
    return items


def _layer_pair(item: Any, index: int, what: str) -> tuple[xr.DataArray, Density]:
    """Unpack layer *index*, a (*what* DataArray, density) pair."""
    try:
        grid, density = item
    except (TypeError, ValueError) as exc:
        raise InputError(f"layer {index} must be a ({what}, density) pair") from exc
    return grid, density


def pressure_from_height(
    height: xr.DataArray, density: Density, gravity: float = DEFAULT_GRAVITY
) -> xr.DataArray:
    """Vertical stress of a layer of material: q = rho g h.

    Parameters
    ----------
    height : xarray.DataArray
        Thickness of the layer (m), dims ``("y", "x")``. Negative values are
        allowed and remove load (for example an excavated valley).
    density : float or xarray.DataArray
        Density of the layer (kg m^-3), or its density contrast with what it
        replaces (``rho_rock - rho_water`` under the sea).
    gravity : float, default 9.81
        Gravitational acceleration (m s^-2).

    Returns
    -------
    xarray.DataArray
        Vertical stress (Pa, positive downward) on *height*'s grid.

    Raises
    ------
    InputError
        If *height* is not a DataArray or *density* or *gravity* is not finite.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> h = xr.DataArray(np.full((4, 4), 100.0), dims=("y", "x"))
    >>> float(pressure_from_height(h, 2700.0)[0, 0])
    2648700.0
    """
    if not isinstance(height, xr.DataArray):
        raise InputError(f"height must be an xarray.DataArray, got {type(height).__name__}")
    if not isinstance(density, xr.DataArray):
        # any sign: a density contrast with what the layer replaces may be negative
        density = check_number("density", density, unit="kg/m^3")
    gravity = check_number("gravity", gravity, unit="m/s^2", minimum=0.0, strict=True)
    stress = height * density * gravity
    stress.name = "load"
    stress.attrs = load_attrs()
    return stress


def pressure_from_layers(
    layers: Iterable[LayerSpec] | Mapping[str, LayerSpec], gravity: float = DEFAULT_GRAVITY
) -> xr.DataArray:
    """Sum of the vertical stresses of several layers, each with its own density.

    Parameters
    ----------
    layers : iterable of (height, density) or mapping of name to (height, density)
        Thickness grids (m) on one grid, with their densities (kg m^-3).
    gravity : float, default 9.81
        Gravitational acceleration (m s^-2).

    Returns
    -------
    xarray.DataArray
        Total vertical stress (Pa, positive downward).

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> ice = xr.DataArray(np.full((4, 4), 1000.0), dims=("y", "x"))
    >>> rock = xr.DataArray(np.full((4, 4), 10.0), dims=("y", "x"))
    >>> q = pressure_from_layers({"ice": (ice, 910.0), "rock": (rock, 2700.0)})
    >>> float(q[0, 0])
    9191970.0
    """
    items = _layer_items(layers, "pressure_from_layers", "height")
    total: xr.DataArray | None = None
    for index, item in enumerate(items):
        height, density = _layer_pair(item, index, "height")
        stress = pressure_from_height(height, density, gravity)
        if total is not None and stress.shape != total.shape:
            raise InputError(
                f"layer {index} has shape {stress.shape}, the first layer {total.shape}; "
                "put every layer on one grid first"
            )
        total = stress if total is None else total + stress
    assert total is not None
    total.name = "load"
    total.attrs = load_attrs()
    return total


# --- loads from elevation models and thickness grids --------------------------------------


def regional_surface(elevation: xr.DataArray, radius: float) -> xr.DataArray:
    """Regional surface by robust (median) smoothing of an elevation grid.

    Each cell gets the median of the elevations within *radius* of it, so an
    edifice covering less than half of that disc does not raise the regional
    surface. For speed the median is taken on a grid coarsened so that the radius
    spans at most 8 coarse cells (block means), then interpolated back linearly.
    Beyond the grid edges the surface is continued by odd reflection (a regional
    slope goes on).

    Parameters
    ----------
    elevation : xarray.DataArray
        Elevation (m, positive up), dims ``("y", "x")``, evenly spaced.
    radius : float
        Smoothing radius (m); choose it larger than the edifice's radius.

    Returns
    -------
    xarray.DataArray
        Regional surface (m, positive up) on *elevation*'s grid.

    Raises
    ------
    InputError
        Bad grid, or a radius that is not a positive number.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(64) * 1e3
    >>> z = np.full((64, 64), -4000.0); z[30:34, 30:34] = 500.0
    >>> e = xr.DataArray(z, dims=("y", "x"), coords={"y": x, "x": x})
    >>> float(regional_surface(e, 10e3)[32, 32])
    -4000.0
    """
    spec = check_grid(elevation, "elevation")
    radius = check_number("radius", radius, unit="m", minimum=0.0, strict=True)
    values = np.asarray(elevation.values, dtype=np.float64)
    step = max(1, int(radius / (8.0 * max(spec.dx, spec.dy))))
    ny, nx = spec.shape
    cy, cx = -(-ny // step), -(-nx // step)
    padded = np.pad(values, ((0, cy * step - ny), (0, cx * step - nx)), mode="edge")
    coarse = padded.reshape(cy, step, cx, step).mean(axis=(1, 3))
    ry = radius / (spec.dy * step)
    rx = radius / (spec.dx * step)
    iy = np.arange(-int(ry), int(ry) + 1)[:, None]
    ix = np.arange(-int(rx), int(rx) + 1)[None, :]
    footprint = (iy / max(ry, 1e-9)) ** 2 + (ix / max(rx, 1e-9)) ** 2 <= 1.0
    # continue the surface beyond the edges by odd reflection, which keeps a regional
    # slope going (an edge value repeated or mirrored would bias the median there)
    py, px = int(ry), int(rx)
    extended = np.pad(coarse, ((py, py), (px, px)), mode="reflect", reflect_type="odd")
    smooth = ndimage.median_filter(extended, footprint=footprint, mode="nearest")
    # fine cell centres in coarse-index units of the extended grid; linear interpolation
    # (the reflected margin lets it continue the slope up to the edges)
    fy = (np.arange(ny) + 0.5) / step - 0.5 + py
    fx = (np.arange(nx) + 0.5) / step - 0.5 + px
    grid_y, grid_x = np.meshgrid(fy, fx, indexing="ij")
    result = ndimage.map_coordinates(smooth, [grid_y, grid_x], order=1, mode="nearest")
    out = elevation.copy(data=result)
    out.name = "regional_surface"
    out.attrs = {
        "units": "m",
        "long_name": "regional surface (median of the elevation within the smoothing radius)",
        "smoothing_radius": radius,
    }
    return out


def _submerged_split(
    base: np.ndarray, thickness: np.ndarray, sea_level: float
) -> tuple[np.ndarray, np.ndarray]:
    """Parts of a layer from *base* up by *thickness* below and above sea level."""
    below = np.clip(sea_level - base, 0.0, None)
    submerged = np.minimum(np.clip(thickness, 0.0, None), below)
    return submerged, thickness - submerged


def load_from_layers(
    base: Surface,
    layers: Iterable[LayerSpec] | Mapping[str, LayerSpec],
    *,
    sea_level: float = 0.0,
    water_density: float = SEA_WATER_DENSITY,
    gravity: float = DEFAULT_GRAVITY,
) -> xr.Dataset:
    """Load of layers stacked on a surface, buoyed by sea water where submerged.

    The layers are stacked in the order given, the first on *base*. The part of a
    layer below sea level replaces water and presses with (rho - rho_water) g h;
    the part above sea level presses with rho g h (PHYSICS.md section 0, rule 3).

    Parameters
    ----------
    base : float or xarray.DataArray
        Elevation (m, positive up) of the surface the layers rest on; a number or a
        grid on the layers' grid.
    layers : iterable of (thickness, density) or mapping of name to (thickness, density)
        Thickness grids (m, >= 0) with their densities (kg m^-3).
    sea_level : float, default 0.0
        Sea-level elevation (m).
    water_density : float, default 1030.0
        Sea-water density (kg m^-3).
    gravity : float, default 9.81
        Gravitational acceleration (m s^-2).

    Returns
    -------
    xarray.Dataset
        ``load`` (Pa, positive down), ``initial_surface`` (m, top of the stack),
        ``reference_surface`` (m, *base*) and ``load_height`` (m, total thickness);
        attribute ``load_density`` (kg m^-3) when all layers share one density.

    Raises
    ------
    InputError
        Empty or malformed layers, grids that differ, negative thickness.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(4) * 1e3
    >>> ice = xr.DataArray(np.full((4, 4), 100.0), dims=("y", "x"), coords={"y": x, "x": x})
    >>> ds = load_from_layers(-50.0, [(ice, 910.0)])
    >>> round(float(ds["load"][0, 0]))
    387495
    """
    items = _layer_items(layers, "load_from_layers", "thickness")
    rho_w = check_density("water_density", water_density)
    gravity = check_number("gravity", gravity, unit="m/s^2", minimum=0.0, strict=True)
    sea_level = check_number("sea_level", sea_level, unit="m")
    first = items[0][0] if isinstance(items[0], tuple) and len(items[0]) == 2 else None
    if not isinstance(first, xr.DataArray):
        raise InputError("layer 0 must be a (thickness DataArray, density) pair")
    check_grid(first, "layer 0 thickness")
    bottom = grid_values(base, first, "base")
    top = bottom.copy()
    stress = np.zeros(first.shape)
    densities = set()
    for index, item in enumerate(items):
        thickness, density = _layer_pair(item, index, "thickness")
        if not isinstance(thickness, xr.DataArray):
            raise InputError(f"layer {index} thickness must be an xarray.DataArray")
        check_grid(thickness, f"layer {index} thickness")
        check_same_grid(thickness, first, f"layer {index} thickness")
        h = np.asarray(thickness.values, dtype=np.float64)
        if h.min() < 0:
            raise InputError(f"layer {index} thickness must be >= 0 m, minimum is {h.min()!r}")
        rho = check_density(f"layer {index} density", density)
        densities.add(rho)
        submerged, emerged = _submerged_split(top, h, sea_level)
        stress += gravity * ((rho - rho_w) * submerged + rho * emerged)
        top = top + h
    coords = {"y": first["y"].variable, "x": first["x"].variable}
    attrs: dict[str, float] = {"sea_level": float(sea_level), "water_density": rho_w}
    if len(densities) == 1:
        attrs["load_density"] = densities.pop()
    return xr.Dataset(
        {
            "load": (("y", "x"), stress, load_attrs()),
            "initial_surface": (
                ("y", "x"),
                top,
                {"units": "m", "long_name": "surface with the load, before flexure"},
            ),
            "reference_surface": (
                ("y", "x"),
                bottom,
                {"units": "m", "long_name": "surface under the load"},
            ),
            "load_height": (
                ("y", "x"),
                top - bottom,
                {"units": "m", "long_name": "thickness of the load"},
            ),
        },
        coords=coords,
        attrs=attrs,
    )


def load_from_elevation(
    elevation: xr.DataArray,
    rock_density: float,
    regional: Surface,
    *,
    sea_level: float = 0.0,
    water_density: float = SEA_WATER_DENSITY,
    gravity: float = DEFAULT_GRAVITY,
) -> xr.Dataset:
    """Load of an edifice read from an elevation model.

    The edifice is the rock above the regional surface, h = max(elevation -
    regional, 0). Its submarine part weighs (rho_rock - rho_water) g h and its
    part above sea level rho_rock g h.

    Parameters
    ----------
    elevation : xarray.DataArray
        Bathymetry/topography (m, positive up, relative to the datum of
        *sea_level*), dims ``("y", "x")``.
    rock_density : float
        Density of the edifice (kg m^-3).
    regional : float or xarray.DataArray
        The reference surface (m, positive up): a constant regional seafloor
        elevation (e.g. ``-4000.0``) or a grid such as :func:`regional_surface`.
    sea_level, water_density, gravity
        As in :func:`load_from_layers`.

    Returns
    -------
    xarray.Dataset
        As :func:`load_from_layers`: ``load``, ``initial_surface``,
        ``reference_surface``, ``load_height``; attribute ``load_density``.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> x = np.arange(4) * 1e3
    >>> z = xr.DataArray(np.full((4, 4), -3000.0), dims=("y", "x"), coords={"y": x, "x": x})
    >>> ds = load_from_elevation(z, 2800.0, -4000.0)
    >>> round(float(ds["load"][0, 0]) / (9.81 * 1000.0))
    1770
    """
    check_grid(elevation, "elevation")
    ref = grid_values(regional, elevation, "regional")
    rho = check_density("rock_density", rock_density)
    height = np.clip(np.asarray(elevation.values, dtype=np.float64) - ref, 0.0, None)
    thickness = elevation.copy(data=height)
    base = regional if isinstance(regional, xr.DataArray) else float(regional)
    return load_from_layers(
        base,
        [(thickness, rho)],
        sea_level=sea_level,
        water_density=water_density,
        gravity=gravity,
    )
