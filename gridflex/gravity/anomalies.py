"""Free-air and Bouguer anomalies of a flexure result.

The column after loading is, from the top (PHYSICS.md sections 5.1 and 6.3):
water up to sea level (air above it), a fill layer (sediment of thickness
``fill_sediment`` for an infill result; the constant-density infill of the
plate, thickness w, for a plain :func:`gridflex.solve` result), the load
(density rho_l, ``load_height`` above the reference surface), the crust
(rho_c, ``crust_thickness``) and the mantle (rho_m), all below the fill moved
down by w. The reference state is the same column before loading: water,
crust with its top on the reference surface, mantle.

Each state is written as a sum of steps c_i(x) H(s_i(x) - z) (s_i the
interface elevation, c_i the density below minus the density above; the sea
surface is the step rho_w at max(top, 0)). Every step is summed with
:func:`gridflex.gravity.interfaces.parker_series` relative to sea level; since the steps
of both states add up to rho_m in every column, the flat parts cancel exactly
and the free-air anomaly is the final sum minus the reference sum
(superposition; no linearisation). The Bouguer anomaly subtracts the
attraction of the final topography relative to sea level with the reduction
density (PHYSICS.md 6.4): +rho_B above sea level, -(rho_B - rho_w) for the sea;
beyond the grid the topography is taken to be the reference surface at the level
of its edges.

An infill result with a buried load (``load_root``) has load material of
``load_density`` as the fill under the load.

A plain :func:`gridflex.solve` result is read as a column whose depression is
filled with ``plate_infill_density`` material when that is denser than water
(a solid fill of thickness w), and with water below sea level (air above)
otherwise.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL, SEA_WATER_DENSITY
from gridflex.errors import InputError
from gridflex.gravity.interfaces import (
    DEFAULT_GRAVITY_PAD_FACTOR,
    blocks_to_grid,
    check_series_arguments,
    gravity_padded_shape,
    parker_spectrum,
    spectrum_to_grid,
    warn_if_not_converged,
)
from gridflex.grid import GridSpec, check_grid, grid_values
from gridflex.validation import check_density, check_number

__all__ = ["BOUGUER_DENSITY", "model_free_air_anomaly", "model_gravity"]

log = logging.getLogger(__name__)

BOUGUER_DENSITY = 2670.0
"""Default Bouguer reduction density (kg m^-3), the conventional crustal value."""

Surface = float | xr.DataArray

Interface = tuple[np.ndarray, np.ndarray | float]
"""One step of a column: its elevation (m above sea level) and its density contrast
(kg m^-3, density below minus density above; a number or a grid)."""


def _pick(name: str, given: Any, result: xr.Dataset, attr: str, default: Any = None) -> Any:
    if given is not None:
        return given
    if attr in result.attrs and not isinstance(result.attrs[attr], str):
        return result.attrs[attr]
    if default is not None:
        return default
    raise InputError(
        f"{name} is needed: pass {name}= or use a result whose attributes hold {attr!r}"
    )


@dataclass(frozen=True)
class _Columns:
    """The final and reference columns of a flexure result, as steps (see module docstring)."""

    deflection: xr.DataArray
    top: np.ndarray
    """Elevation of the final surface (m above sea level)."""
    reference_surface: np.ndarray
    """Elevation of the surface under the load before loading (m above sea level)."""
    final: list[Interface]
    reference: list[Interface]
    info: dict[str, float | str]
    """The densities (kg m^-3), crustal thickness and sea level (m) used."""


def _deflection_grid(result: xr.Dataset) -> xr.DataArray:
    if not isinstance(result, xr.Dataset) or "deflection" not in result:
        raise InputError("result must be an xarray.Dataset with a 'deflection' variable")
    check_grid(result["deflection"], "deflection")
    return result["deflection"]


def _load_geometry(
    result: xr.Dataset, options: dict[str, Any], w_da: xr.DataArray, sea: float
) -> tuple[np.ndarray, np.ndarray]:
    """Reference surface (m above sea level) and load height (m) on the deflection's grid."""
    ref_given = options["reference_surface"]
    if ref_given is None:
        if "reference_surface" not in result:
            raise InputError(
                "reference_surface (m, positive up: the surface under the load "
                "before loading) is needed: pass it or use a load Dataset result"
            )
        ref_given = result["reference_surface"]
    z_ref = grid_values(ref_given, w_da, "reference_surface") - sea
    height_given = options["load_height"]
    if height_given is None:
        if "load_height" in result:
            height_given = result["load_height"]
        elif "initial_surface" in result:
            height_given = result["initial_surface"] - sea - xr.DataArray(z_ref, dims=w_da.dims)
        else:
            raise InputError("load_height (m) is needed: pass it or use a load Dataset result")
    return z_ref, grid_values(height_given, w_da, "load_height")


def _load_density(
    result: xr.Dataset, options: dict[str, Any], load_height: np.ndarray, crust_density: float
) -> float:
    """The load's density (kg m^-3); the crust's when the load has no height."""
    given = options["load_density"]
    if given is None and "load_density" not in result.attrs and np.any(load_height):
        raise InputError("load_density (kg/m^3) is needed: pass it or use a load Dataset result")
    return check_density(
        "load_density", _pick("load_density", given, result, "load_density", crust_density)
    )


def _fill(
    result: xr.Dataset, w: np.ndarray, water_density: float, load_density: float
) -> tuple[np.ndarray, np.ndarray | float]:
    """Thickness (m) and density (kg m^-3) of the layer filling the depression.

    An infill result's sediment (with load material under a buried load), else the
    plate's infill of thickness w when it is denser than water, else nothing (the
    water, or air, above the surface fills it).
    """
    if "fill_sediment" in result:
        thickness = np.asarray(result["fill_sediment"].values, dtype=np.float64)
        sediment_density = float(result.attrs.get("infill_sediment_density", water_density))
        if "load_root" not in result:
            return thickness, sediment_density
        root = np.asarray(result["load_root"].values, dtype=np.float64)
        return thickness + root, np.where(root != 0.0, load_density, sediment_density)
    infill_density = check_density(
        "infill density", _pick("infill density", None, result, "plate_infill_density")
    )
    if infill_density > water_density:
        return w, infill_density
    return np.zeros_like(w), water_density


def _columns(result: xr.Dataset, options: dict[str, Any]) -> _Columns:
    """Interfaces (elevation above sea level, contrast) of the final and reference states."""
    w_da = _deflection_grid(result)
    w = np.asarray(w_da.values, dtype=np.float64)

    def value(name: str, attr: str, default: float | None = None) -> Any:
        return _pick(name, options[name], result, attr, default)

    sea = check_number("sea_level", value("sea_level", "infill_sea_level", 0.0), unit="m")
    rho_w = check_density(
        "water_density", value("water_density", "infill_water_density", SEA_WATER_DENSITY)
    )
    rho_c = check_density("crust_density", value("crust_density", "plate_crust_density"))
    t_c = check_number(
        "crust_thickness",
        value("crust_thickness", "plate_crust_thickness"),
        unit="m",
        minimum=0.0,
        strict=True,
    )
    rho_m = check_density("mantle_density", value("mantle_density", "plate_mantle_density"))
    z_ref, h_l = _load_geometry(result, options, w_da, sea)
    rho_l = _load_density(result, options, h_l, rho_c)
    fill, fill_density = _fill(result, w, rho_w, rho_l)
    z0 = z_ref + h_l
    top = z0 - w + fill
    final: list[Interface] = [
        (np.maximum(top, 0.0), rho_w),
        (top, fill_density - rho_w),
        (z0 - w, rho_l - fill_density),
        (z_ref - w, rho_c - rho_l),
        (z_ref - t_c - w, rho_m - rho_c),
    ]
    reference: list[Interface] = [
        (np.maximum(z_ref, 0.0), rho_w),
        (z_ref, rho_c - rho_w),
        (z_ref - t_c, rho_m - rho_c),
    ]
    info: dict[str, float | str] = {
        "water_density": rho_w,
        "crust_density": rho_c,
        "crust_thickness": t_c,
        "mantle_density": rho_m,
        "load_density": rho_l,
        "fill_density": (
            float(fill_density)
            if np.ndim(fill_density) == 0
            else "load under the load, else sediment"
        ),
        "sea_level": sea,
    }
    return _Columns(w_da, top, z_ref, final, reference, info)


@dataclass(frozen=True)
class _Series:
    """Parker series of several interfaces summed on one FFT grid."""

    spec: GridSpec
    shape: tuple[int, int]
    plane: float
    """Depth (m) of sea level below the observation plane."""
    terms: int
    isolated: bool

    def difference(
        self, added: list[Interface], removed: list[Interface]
    ) -> tuple[np.ndarray, float]:
        """Anomaly (mGal) of the *added* steps minus the *removed* ones, and the largest
        change (mGal) their last series terms make."""
        half = (self.shape[0], self.shape[1] // 2 + 1)
        total = np.zeros(half, complex)
        last = np.zeros(half, complex)
        images: np.ndarray | None = None
        for sign, interfaces in ((1.0, added), (-1.0, removed)):
            for elevation, contrast in interfaces:
                if np.all(np.asarray(contrast) == 0.0) or not np.any(elevation):
                    continue
                spectrum, last_term, _, image = parker_spectrum(
                    elevation,
                    contrast,
                    self.plane,
                    self.spec,
                    self.terms,
                    self.shape,
                    isolated=self.isolated,
                )
                total += sign * spectrum
                if last_term is not None:
                    last += sign * last_term
                if image is not None:
                    images = sign * image if images is None else images + sign * image
        anomaly = spectrum_to_grid(total, self.spec, self.shape)
        if images is not None:
            anomaly = anomaly - blocks_to_grid(images, self.spec)
        return anomaly, float(np.abs(spectrum_to_grid(last, self.spec, self.shape)).max())


def _topography_interfaces(
    top: np.ndarray, rho_b: float, rho_w: float, reference: np.ndarray
) -> tuple[list[Interface], list[Interface], float]:
    """Topography relative to sea level with density rho_B, as steps to add and subtract.

    Beyond the grid the surface is taken to be the reference (pre-load) surface at its
    edge level (the median of its border cells), as the free-air sum takes the state
    beyond the grid to be the reference state: the field of that infinite flat layer
    is added exactly (the returned slab value, mGal) and its finite part on the grid is
    taken out (the second, subtracted step), so the series only sees the relief about
    that level, which is localised and treated as isolated.
    """
    contrast = np.where(top > 0.0, rho_b, rho_b - rho_w)
    border = np.concatenate([reference[0], reference[-1], reference[1:-1, 0], reference[1:-1, -1]])
    level = float(np.median(border))
    edge_contrast = rho_b if level > 0.0 else rho_b - rho_w
    slab = 2.0 * math.pi * GRAVITATIONAL_CONSTANT * edge_contrast * level / MGAL
    return [(top, contrast)], [(np.full(top.shape, level), edge_contrast)], slab


def _check_below_plane(top: np.ndarray, height: float, sea_level: float) -> None:
    highest = float(top.max())
    if highest >= height:
        raise InputError(
            f"observation_height ({height!r} m) must be above the highest point of the final "
            f"surface ({highest + sea_level:.6g} m); the series needs every "
            "mass below the observation plane"
        )


def model_gravity(
    result: xr.Dataset,
    *,
    observation_height: float = 0.0,
    terms: int = 6,
    bouguer_density: float = BOUGUER_DENSITY,
    reference_surface: Surface | None = None,
    load_height: xr.DataArray | None = None,
    load_density: float | None = None,
    crust_thickness: float | None = None,
    crust_density: float | None = None,
    mantle_density: float | None = None,
    water_density: float | None = None,
    sea_level: float | None = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_GRAVITY_PAD_FACTOR,
) -> xr.Dataset:
    """Free-air and Bouguer anomalies (mGal) of a flexure result.

    Parameters
    ----------
    result : xarray.Dataset
        From :func:`gridflex.solve_with_infill` (uses ``deflection``,
        ``fill_sediment``, the load geometry and the attributes) or from
        :func:`gridflex.solve` (then the depression is taken as filled with
        ``plate_infill_density`` material, and the load geometry must be given).
    observation_height : float, default 0.0
        Height of the level observation plane above sea level (m); it must be
        above the highest point of the final surface.
    terms : int, default 6
        Terms of each Parker series.
    bouguer_density : float, default 2670.0
        Reduction density rho_B (kg m^-3).
    reference_surface : float or xarray.DataArray, optional
        Elevation of the surface under the load before loading (m, positive up);
        default the result's ``reference_surface``.
    load_height : xarray.DataArray, optional
        Thickness of the load above the reference surface (m); default the
        result's ``load_height`` (or ``initial_surface - reference_surface``).
    load_density : float, optional
        Load density; default the result's ``load_density`` attribute (required
        when the load has a height).
    crust_thickness, crust_density, mantle_density : float, optional
        Default: the result's ``plate_*`` attributes (from :class:`gridflex.Plate`).
    water_density, sea_level : float, optional
        Default: the result's ``infill_*`` attributes, else 1030 and 0.
    edges : {"infinite", "periodic"}, default "infinite"
        As in :func:`gridflex.interface_gravity`.
    pad_factor : float, default 4.5
        Padding in multiples of the deepest interface depth.

    Returns
    -------
    xarray.Dataset
        ``free_air_anomaly`` and ``bouguer_anomaly`` (mGal, positive for mass
        excess) on the result's grid, with the densities used as attributes.

    Raises
    ------
    InputError
        Missing geometry or densities, or a surface reaching the observation plane.
    """
    options = {
        "reference_surface": reference_surface,
        "load_height": load_height,
        "load_density": load_density,
        "crust_thickness": crust_thickness,
        "crust_density": crust_density,
        "mantle_density": mantle_density,
        "water_density": water_density,
        "sea_level": sea_level,
    }
    terms, edges, height, pad_factor = check_series_arguments(
        terms, edges, observation_height, pad_factor
    )
    rho_b = check_density("bouguer_density", bouguer_density)
    columns = _columns(result, options)
    spec = check_grid(columns.deflection, "deflection")
    _check_below_plane(columns.top, height, float(columns.info["sea_level"]))
    deepest = height - min(float(e.min()) for e, _ in columns.final + columns.reference)
    shape = spec.shape if edges == "periodic" else gravity_padded_shape(spec, deepest, pad_factor)
    series = _Series(spec, shape, height, terms, isolated=edges != "periodic")
    free_air, last = series.difference(columns.final, columns.reference)
    topo_add, topo_remove, slab = _topography_interfaces(
        columns.top, rho_b, float(columns.info["water_density"]), columns.reference_surface
    )
    topography, last_topography = series.difference(topo_add, topo_remove)
    bouguer = free_air - (topography + slab)
    last = max(last, last_topography)
    spread = float(free_air.max() - free_air.min())
    warn_if_not_converged(terms, last, spread, f"free-air range {spread:.3g} mGal")
    log.info("model gravity: %d terms, FFT grid %s, last term %.3g mGal", terms, shape, last)
    attrs = {f"gravity_{k}": v for k, v in columns.info.items()}
    attrs.update(
        {
            "gravity_observation_height": height,
            "gravity_series_terms": terms,
            "gravity_series_last_term": last,
            "gravity_bouguer_density": rho_b,
            "gravitational_constant": GRAVITATIONAL_CONSTANT,
            "gravity_edges": edges,
        }
    )
    return xr.Dataset(
        {
            "free_air_anomaly": (
                ("y", "x"),
                free_air,
                {"units": "mGal", "long_name": "free-air gravity anomaly of the flexure model"},
            ),
            "bouguer_anomaly": (
                ("y", "x"),
                bouguer,
                {
                    "units": "mGal",
                    "long_name": "Bouguer gravity anomaly of the flexure model",
                    "bouguer_density": rho_b,
                },
            ),
        },
        coords={"y": columns.deflection["y"].variable, "x": columns.deflection["x"].variable},
        attrs=attrs,
    )


def model_free_air_anomaly(result: xr.Dataset, **options: Any) -> xr.DataArray:
    """Free-air anomaly (mGal) of a flexure result, for comparison with observations.

    Same arguments as :func:`model_gravity` (keyword-only); returns its
    ``free_air_anomaly`` variable with the gravity attributes.
    """
    gravity = model_gravity(result, **options)
    out = gravity["free_air_anomaly"]
    out.attrs.update(gravity.attrs)
    return out
