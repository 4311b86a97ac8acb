"""Vertical stress (Pa, positive downward) from layers of material.

A layer of density rho and thickness h resting in air presses down with
q = rho g h. A layer that replaces water (a submarine edifice, sediment on the
sea floor) presses with its density minus the water's: pass that difference as
the density.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import xarray as xr

from .errors import InputError

__all__ = ["pressure_from_height", "pressure_from_layers"]

Density = float | xr.DataArray


def pressure_from_height(
    height: xr.DataArray, density: Density, gravity: float = 9.81
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
    if not isinstance(density, xr.DataArray) and not np.isfinite(density):
        raise InputError(f"density must be a finite number (kg/m^3), got {density!r}")
    if not np.isfinite(gravity) or gravity <= 0:
        raise InputError(f"gravity must be a positive number (m/s^2), got {gravity!r}")
    stress = height * density * gravity
    stress.name = "load"
    stress.attrs = {"units": "Pa", "long_name": "vertical stress of the load (positive downward)"}
    return stress


LayerSpec = tuple[xr.DataArray, Density]


def pressure_from_layers(
    layers: Iterable[LayerSpec] | Mapping[str, LayerSpec], gravity: float = 9.81
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
    items = list(layers.values()) if isinstance(layers, Mapping) else list(layers)
    if not items:
        raise InputError("pressure_from_layers needs at least one (height, density) layer")
    total: xr.DataArray | None = None
    for index, item in enumerate(items):
        try:
            height, density = item
        except (TypeError, ValueError) as exc:
            raise InputError(f"layer {index} must be a (height, density) pair") from exc
        stress = pressure_from_height(height, density, gravity)
        if total is not None and stress.shape != total.shape:
            raise InputError(
                f"layer {index} has shape {stress.shape}, the first layer {total.shape}; "
                "put every layer on one grid first"
            )
        total = stress if total is None else total + stress
    assert total is not None
    total.name = "load"
    total.attrs = {"units": "Pa", "long_name": "vertical stress of the load (positive downward)"}
    return total
