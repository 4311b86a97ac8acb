"""Flexural backstripping: the water-loaded tectonic subsidence of a sediment column.

PHYSICS.md 9.3; Steckler & Watts 1978, *Earth Planet. Sci. Lett.* 41, 1-13. The
water-loaded tectonic subsidence is the basement depth with the sediment removed and
replaced by water, the plate rebounding by w_s:

    Y = B - w_s - dSL rho_m / (rho_m - rho_w),
    D lap^2 w_s + (rho_m - rho_w) g w_s = (rho_s - rho_w) g S,

with B = S + W the basement depth below the sea level of the time (present
sea level for present-day grids), S the sediment
thickness, W the water depth, rho_s the mean bulk density of the (compacted)
sediment column and dSL the sea level of the time relative to present (positive
higher). For te = 0 this is the local (Airy) formula
Y = S (rho_m - rho_s)/(rho_m - rho_w) + W - dSL rho_m/(rho_m - rho_w).

Depths, thicknesses and subsidence are positive DOWN here (m); elevations and
levels positive up; ages in years before present.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np
import xarray as xr

from gridflex.basin.compaction import (
    Lithology,
    bulk_density,
    layer_grains,
    saturated_column,
)
from gridflex.basin.compaction import lithology as as_lithology
from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import solve
from gridflex.errors import InputError
from gridflex.grid import check_grid, grid_values
from gridflex.plate import Plate
from gridflex.validation import check_density, check_number

__all__ = ["airy_tectonic_subsidence", "backstrip", "backstrip_layers"]

_DEPTHS = ("basement_depth", "sediment_thickness", "water_depth")

_BACKSTRIP_VARIABLES = {
    "tectonic_subsidence": (
        "m",
        "water-loaded tectonic subsidence, flexural (positive down)",
    ),
    "local_tectonic_subsidence": (
        "m",
        "water-loaded tectonic subsidence, local Airy (positive down)",
    ),
    "sediment_rebound": (
        "m",
        "basement rebound when the sediment is removed (positive up)",
    ),
    "sediment_density": ("kg m-3", "mean bulk density of the sediment column"),
    "sediment_load": ("Pa", "sediment load relative to water (positive downward)"),
    "basement_depth": ("m", "present basement depth below sea level (positive down)"),
}
"""Units and long names of the variables of a :func:`backstrip` result."""


def _depth_grids(
    given: dict[str, xr.DataArray | None], max_mismatch: float
) -> tuple[xr.DataArray, dict[str, np.ndarray]]:
    """The reference grid and all three depth grids (m) from at least two of them."""
    missing = [name for name, value in given.items() if value is None]
    if len(missing) > 1:
        raise InputError(
            f"backstrip needs at least two of basement_depth, sediment_thickness "
            f"and water_depth; missing {', '.join(missing)}"
        )
    reference = next(value for value in given.values() if value is not None)
    check_grid(reference, "backstrip grid")
    arrays = {
        name: grid_values(value, reference, name)
        for name, value in given.items()
        if value is not None
    }
    if "basement_depth" not in arrays:
        arrays["basement_depth"] = arrays["sediment_thickness"] + arrays["water_depth"]
    elif "sediment_thickness" not in arrays:
        arrays["sediment_thickness"] = arrays["basement_depth"] - arrays["water_depth"]
    elif "water_depth" not in arrays:
        arrays["water_depth"] = arrays["basement_depth"] - arrays["sediment_thickness"]
    else:
        gap = np.abs(
            arrays["basement_depth"] - arrays["sediment_thickness"] - arrays["water_depth"]
        )
        if float(gap.max()) > max_mismatch:
            raise InputError(
                f"basement_depth differs from sediment_thickness + water_depth by up to "
                f"{float(gap.max()):.4g} m (max_mismatch {max_mismatch!r} m); fix the grids or "
                "give only two of them"
            )
    s = arrays["sediment_thickness"]
    if s.min() < 0:
        raise InputError(f"sediment_thickness must be >= 0 m, minimum is {s.min()!r}")
    return reference, arrays


def _column_density(
    thickness: np.ndarray,
    reference: xr.DataArray,
    lithology: str | Lithology,
    sediment_density: float | xr.DataArray | None,
    water_density: float,
    mantle_density: float,
) -> tuple[np.ndarray, str]:
    """Mean bulk density of the sediment column (kg m^-3) and where it comes from."""
    if sediment_density is None:
        lith = as_lithology(lithology)
        rho_s = bulk_density(np.zeros_like(thickness), thickness, lith, water_density)
        how = f"porosity law of {lith.name}"
    else:
        rho_s = grid_values(sediment_density, reference, "sediment_density", unit="kg/m^3")
        how = "given"
    if np.any(rho_s >= mantle_density) or np.any(rho_s < water_density):
        raise InputError(
            f"sediment_density must lie in [water_density={water_density}, "
            f"mantle_density={mantle_density}) kg/m^3"
        )
    return rho_s, how


def backstrip(
    basement_depth: xr.DataArray | None,
    sediment_thickness: xr.DataArray | None,
    water_depth: xr.DataArray | None,
    plate: Plate,
    *,
    lithology: str | Lithology = "shale",
    sediment_density: float | xr.DataArray | None = None,
    sea_level_change: float = 0.0,
    water_density: float = SEA_WATER_DENSITY,
    max_mismatch: float = 1.0,
    edges: str = "infinite",
    pad_factor: float = 4.5,
) -> xr.Dataset:
    """Water-loaded tectonic subsidence with flexural compensation of the sediment.

    Parameters
    ----------
    basement_depth : xarray.DataArray or None
        Depth of the basement below the sea level of the time (m, positive down):
        sediment thickness + water depth; for present-day grids, below present sea
        level.
    sediment_thickness : xarray.DataArray or None
        Present (compacted) sediment thickness (m, >= 0).
    water_depth : xarray.DataArray or None
        Water depth (m, positive down; negative for land above sea level).
        One of the three may be ``None``; it is then derived from
        basement = sediment + water.
    plate : Plate
        te (a number, 0 for local isostasy, or a grid) and rho_m, g;
        ``plate.infill_density`` is replaced by *water_density*.
    lithology : str or Lithology, default "shale"
        Porosity law giving the mean bulk density of the column from 0 to S.
    sediment_density : float or xarray.DataArray, optional
        Mean bulk density of the column (kg m^-3), instead of *lithology*.
    sea_level_change : float, default 0
        Sea level at the time of the water depth relative to present (m,
        positive higher).
    water_density : float, default 1030.0
        kg m^-3.
    max_mismatch : float, default 1.0
        With all three grids: largest allowed |basement - (sediment + water)| (m).
    edges, pad_factor
        As in :func:`gridflex.solve`.

    Returns
    -------
    xarray.Dataset
        ``tectonic_subsidence`` (m, positive down, flexural), ``local_tectonic_subsidence``
        (m, the Airy backstrip), ``sediment_rebound`` (m, upward rebound of the
        basement when the sediment is removed), ``sediment_density`` (kg m^-3),
        ``sediment_load`` (Pa, (rho_s - rho_w) g S), ``basement_depth``.

    Raises
    ------
    InputError
        Missing or inconsistent grids, bad densities.
    """
    given = dict(zip(_DEPTHS, (basement_depth, sediment_thickness, water_depth), strict=True))
    reference, arrays = _depth_grids(given, max_mismatch)
    s = arrays["sediment_thickness"]
    rho_w = check_density("water_density", water_density)
    rho_m, g = plate.mantle_density, plate.gravity
    rho_s, how = _column_density(s, reference, lithology, sediment_density, rho_w, rho_m)
    dsl = check_number("sea_level_change", sea_level_change, unit="m")
    load = reference.copy(data=(rho_s - rho_w) * g * s)
    load.name = "load"
    water_plate = dataclasses.replace(plate, infill_density=rho_w)
    result = solve(load, water_plate, edges=edges, pad_factor=pad_factor)
    rebound = np.asarray(result["deflection"].values)
    sea_term = dsl * rho_m / (rho_m - rho_w)
    basement = arrays["basement_depth"]
    fields = {
        "tectonic_subsidence": basement - rebound - sea_term,
        "local_tectonic_subsidence": airy_tectonic_subsidence(
            s, rho_s, arrays["water_depth"], dsl, rho_m, rho_w
        ),
        "sediment_rebound": rebound,
        "sediment_density": np.broadcast_to(rho_s, s.shape).copy(),
        "sediment_load": load.values,
        "basement_depth": basement,
    }
    attrs: dict[str, Any] = dict(result.attrs)
    attrs.update(
        {
            "title": "flexural backstrip (water-loaded tectonic subsidence)",
            "sediment_density_from": how,
            "sea_level_change": dsl,
            "water_density": rho_w,
            "sign_convention": "depths and subsidence positive downward",
        }
    )
    data_vars = {name: (("y", "x"), values, _attributes(name)) for name, values in fields.items()}
    coords = {"y": reference["y"].variable, "x": reference["x"].variable}
    return xr.Dataset(data_vars, coords=coords, attrs=attrs)


def airy_tectonic_subsidence(
    sediment_thickness: Any,
    sediment_density: Any,
    water_depth: Any,
    sea_level_change: Any,
    mantle_density: float,
    water_density: float,
) -> np.ndarray:
    """Local (Airy) water-loaded tectonic subsidence of a column (m, positive down).

    Steckler & Watts 1978 (PHYSICS.md 9.2):
    Y = S (rho_m - rho_s)/(rho_m - rho_w) + W - dSL rho_m/(rho_m - rho_w), with S the
    sediment thickness (m), rho_s its mean bulk density, W the water depth (m, negative
    above sea level) and dSL the sea level relative to present (m, positive higher).
    Arguments broadcast against each other.

    Examples
    --------
    >>> round(float(airy_tectonic_subsidence(1000.0, 2300.0, 200.0, 0.0, 3300.0, 1000.0)), 6)
    634.782609
    """
    s, rho_s = np.asarray(sediment_thickness), np.asarray(sediment_density)
    contrast = mantle_density - water_density
    return np.asarray(
        s * (mantle_density - rho_s) / contrast
        + np.asarray(water_depth)
        - np.asarray(sea_level_change) * mantle_density / contrast
    )


def _attributes(name: str) -> dict[str, str]:
    units, long_name = _BACKSTRIP_VARIABLES[name]
    return {"units": units, "long_name": long_name}


def _checked_layers(
    layers: Sequence[tuple[xr.DataArray, str | Lithology]],
) -> tuple[xr.DataArray, list[np.ndarray], list[Lithology]]:
    """The reference grid, present thicknesses (m) and lithologies of the layers."""
    reference = layers[0][0]
    check_grid(reference, "layer 0 thickness")
    thickness = []
    liths = []
    for index, (grid, lith) in enumerate(layers):
        h = grid_values(grid, reference, f"layer {index} thickness")
        if h.min() < 0:
            raise InputError(f"layer {index} thickness must be >= 0 m, minimum is {h.min()!r}")
        thickness.append(h)
        liths.append(as_lithology(lith))
    return reference, thickness, liths


def _decompacted(
    grains: list[np.ndarray], liths: list[Lithology], water_density: float
) -> tuple[np.ndarray, np.ndarray]:
    """Thickness (m) and mean bulk density (kg m^-3) of the layers decompacted to the
    surface (at least the water density). Each layer's mass is its thickness times its
    mean bulk density, so the column's density is a thickness-weighted mean that stays
    physical for vanishing columns; where there is no sediment at all, the limit: the
    top layer's density at the surface."""
    _, masses, total = saturated_column(grains, liths, water_density)
    mass = np.zeros(total.shape)
    for layer_mass in masses:
        mass += layer_mass
    fallback = bulk_density(0.0, 0.0, liths[0], water_density)
    with np.errstate(invalid="ignore", divide="ignore"):
        density = np.where(total > 0, mass / np.where(total > 0, total, 1.0), fallback)
    return total, np.clip(density, water_density, None)


def backstrip_layers(
    layers: Sequence[tuple[xr.DataArray, str | Lithology]],
    water_depths: Sequence[float | xr.DataArray],
    plate: Plate,
    *,
    sea_level_changes: Sequence[float] | None = None,
    ages: Sequence[float] | None = None,
    water_density: float = SEA_WATER_DENSITY,
    edges: str = "infinite",
    pad_factor: float = 4.5,
) -> xr.Dataset:
    """Backstrip a layered column step by step: remove the top layer, decompact the rest.

    Step j removes the j youngest layers; the remaining ones are decompacted to the
    surface (grains conserved, :mod:`gridflex.basin.compaction`) and the column is
    backstripped with :func:`backstrip` using the water depth and sea level of that
    time (Steckler & Watts 1978; Watts, Karner & Steckler 1982).

    Parameters
    ----------
    layers : sequence of (thickness, lithology)
        Present (compacted) thickness grids (m) with their lithology, youngest (top)
        first.
    water_depths : sequence of float or xarray.DataArray
        Water depth (m, positive down) at the end of the deposition of each layer,
        same order: ``water_depths[0]`` is the present water depth.
    plate : Plate
        As in :func:`backstrip`.
    sea_level_changes : sequence of float, optional
        Sea level at those times relative to present (m, positive higher); 0 by default.
    ages : sequence of float, optional
        Ages of those times (years before present), written as a coordinate.
    water_density, edges, pad_factor
        As in :func:`backstrip`.

    Returns
    -------
    xarray.Dataset
        On dims ``("step", "y", "x")``: ``tectonic_subsidence``,
        ``local_tectonic_subsidence``, ``sediment_rebound`` (m), ``sediment_thickness``
        (decompacted, m), ``sediment_density`` (kg m^-3), ``basement_depth`` (m below
        the sea level of the time); ``sea_level_change`` (m, on ``step``; also the
        attribute ``sea_level_changes``).

    Raises
    ------
    InputError
        Empty or mismatched sequences, bad grids.
    """
    items = list(layers)
    if not items:
        raise InputError("backstrip_layers needs at least one (thickness, lithology) layer")
    count = len(items)
    depths = list(water_depths)
    levels = [0.0] * count if sea_level_changes is None else list(sea_level_changes)
    for name, values in (("water_depths", depths), ("sea_level_changes", levels)):
        if len(values) != count:
            raise InputError(f"{name} must have one entry per layer ({count}), got {len(values)}")
    if ages is not None and len(ages) != count:
        raise InputError(f"ages must have one entry per layer ({count}), got {len(ages)}")
    reference, thickness, liths = _checked_layers(items)
    # grains of each layer from its present burial
    grains, top = [], np.zeros(reference.shape)
    for h, lith in zip(thickness, liths, strict=True):
        grains.append(layer_grains(top, h, lith))
        top = top + h
    results = []
    for step in range(count):
        total, density = _decompacted(grains[step:], liths[step:], water_density)
        water = grid_values(depths[step], reference, f"water_depths[{step}]")
        out = backstrip(
            None,
            reference.copy(data=total),
            reference.copy(data=water),
            plate,
            sediment_density=reference.copy(data=density),
            sea_level_change=levels[step],
            water_density=water_density,
            edges=edges,
            pad_factor=pad_factor,
        )
        out["sediment_thickness"] = (
            ("y", "x"),
            total,
            {"units": "m", "long_name": "decompacted sediment thickness"},
        )
        results.append(out.drop_vars("sediment_load"))
    combined = xr.concat(results, dim="step", combine_attrs="override")
    combined = combined.assign_coords(step=np.arange(count))
    # each step has its own sea level: kept per step, not the first step's as an attribute
    changes = np.asarray(
        [check_number(f"sea_level_changes[{i}]", v, unit="m") for i, v in enumerate(levels)]
    )
    combined["sea_level_change"] = (
        "step",
        changes,
        {"units": "m", "long_name": "sea level of the step's time relative to present"},
    )
    combined.attrs["sea_level_change"] = "per step: see the sea_level_change variable"
    combined.attrs["sea_level_changes"] = changes
    if ages is not None:
        combined = combined.assign_coords(
            age=("step", np.asarray(ages, dtype=float), {"units": "years before present"})
        )
    combined.attrs["lithologies"] = ", ".join(lith.name for lith in liths)
    return combined
