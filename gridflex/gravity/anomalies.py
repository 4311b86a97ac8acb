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
import warnings
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import GravitySeriesWarning, InputError
from gridflex.gravity.interfaces import (
    DEFAULT_GRAVITY_PAD_FACTOR,
    GRAVITY_EDGES,
    _check_number,
    _check_terms,
    blocks_to_grid,
    gravity_padded_shape,
    parker_spectrum,
    spectrum_to_grid,
)
from gridflex.gravity.prisms import GRAVITATIONAL_CONSTANT, MGAL
from gridflex.grid import check_grid, grid_values

__all__ = ["BOUGUER_DENSITY", "model_free_air_anomaly", "model_gravity"]

log = logging.getLogger(__name__)

BOUGUER_DENSITY = 2670.0
"""Default Bouguer reduction density (kg m^-3), the conventional crustal value."""

Surface = float | xr.DataArray


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


def _columns(result: xr.Dataset, options: dict[str, Any]):
    """Interfaces (elevation above sea level, contrast) of the final and reference states."""
    if not isinstance(result, xr.Dataset) or "deflection" not in result:
        raise InputError("result must be an xarray.Dataset with a 'deflection' variable")
    w_da = result["deflection"]
    check_grid(w_da, "deflection")
    w = np.asarray(w_da.values, dtype=np.float64)

    def value(name: str, attr: str, default: float | None = None) -> float:
        return _check_number(name, _pick(name, options[name], result, attr, default))

    sea = value("sea_level", "infill_sea_level", 0.0)
    rho_w = value("water_density", "infill_water_density", 1030.0)
    rho_c = value("crust_density", "plate_crust_density")
    t_c = value("crust_thickness", "plate_crust_thickness")
    rho_m = value("mantle_density", "plate_mantle_density")
    if t_c <= 0:
        raise InputError(f"crust_thickness must be > 0 m, got {t_c!r}")
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
    h_l = grid_values(height_given, w_da, "load_height")
    if options["load_density"] is None and "load_density" not in result.attrs and np.any(h_l):
        raise InputError("load_density (kg/m^3) is needed: pass it or use a load Dataset result")
    rho_l = _check_number(
        "load_density",
        _pick("load_density", options["load_density"], result, "load_density", rho_c),
    )
    if "fill_sediment" in result:
        fill = np.asarray(result["fill_sediment"].values, dtype=np.float64)
        rho_fill = float(result.attrs.get("infill_sediment_density", rho_w))
        if "load_root" in result:  # a buried load: load material fills under it
            root = np.asarray(result["load_root"].values, dtype=np.float64)
            rho_fill = np.where(root != 0.0, rho_l, rho_fill)
            fill = fill + root
    else:  # constant-density infill of a plain solve: thickness w of plate_infill_density
        rho_fill = _check_number(
            "infill density", _pick("infill density", None, result, "plate_infill_density")
        )
        # a fill no denser than water is the water (or air) above the surface
        fill = w if rho_fill > rho_w else np.zeros_like(w)
        rho_fill = rho_fill if rho_fill > rho_w else rho_w
    z0 = z_ref + h_l
    top = z0 - w + fill
    final = [
        (np.maximum(top, 0.0), rho_w),
        (top, rho_fill - rho_w),
        (z0 - w, rho_l - rho_fill),
        (z_ref - w, rho_c - rho_l),
        (z_ref - t_c - w, rho_m - rho_c),
    ]
    reference = [
        (np.maximum(z_ref, 0.0), rho_w),
        (z_ref, rho_c - rho_w),
        (z_ref - t_c, rho_m - rho_c),
    ]
    fill_attr = float(rho_fill) if np.ndim(rho_fill) == 0 else "load under the load, else sediment"
    info = {
        "water_density": rho_w,
        "crust_density": rho_c,
        "crust_thickness": t_c,
        "mantle_density": rho_m,
        "load_density": rho_l,
        "fill_density": fill_attr,
        "sea_level": sea,
    }
    info["reference_surface"] = z_ref
    return w_da, top, final, reference, info


def _spectrum_sum(interfaces, sign, spec, plane, terms, shape, sums, isolated):
    """Add sign * the Parker spectra of *interfaces* to ``sums["total"]``, their last
    terms to ``sums["last"]`` (arrays on the FFT grid *shape*) and their periodic
    copies' fields to ``sums["images"]`` (on the grid)."""
    for elevation, contrast in interfaces:
        if np.all(np.asarray(contrast) == 0.0) or not np.any(elevation):
            continue
        spectrum, last_term, _, images = parker_spectrum(
            elevation, contrast, plane, spec, terms, shape, isolated=isolated
        )
        sums["total"] += sign * spectrum
        if last_term is not None:
            sums["last"] += sign * last_term
        if images is not None:
            if sums["images"] is None:
                sums["images"] = np.zeros_like(images)
            sums["images"] += sign * images


def _images(sums, spec) -> np.ndarray | float:
    return 0.0 if sums["images"] is None else blocks_to_grid(sums["images"], spec)


def _new_sums(spec, shape) -> dict[str, np.ndarray | None]:
    half = (shape[0], shape[1] // 2 + 1)
    return {"total": np.zeros(half, complex), "last": np.zeros(half, complex), "images": None}


def _topography_interfaces(top, rho_b, rho_w, reference):
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
    terms = _check_terms(terms)
    if edges not in GRAVITY_EDGES:
        raise InputError(f"edges must be one of {GRAVITY_EDGES!r}, got {edges!r}")
    height = _check_number("observation_height", observation_height)
    rho_b = _check_number("bouguer_density", bouguer_density)
    w_da, top, final, reference, info = _columns(result, options)
    spec = check_grid(w_da, "deflection")
    if float(top.max()) >= height:
        raise InputError(
            f"observation_height ({height!r} m) must be above the highest point of the final "
            f"surface ({float(top.max()) + info['sea_level']:.6g} m); the series needs every "
            "mass below the observation plane"
        )
    deepest = height - min(float(e.min()) for e, _ in final + reference)
    shape = spec.shape if edges == "periodic" else gravity_padded_shape(spec, deepest, pad_factor)
    isolated = edges != "periodic"
    sums = _new_sums(spec, shape)
    _spectrum_sum(final, 1.0, spec, height, terms, shape, sums, isolated)
    _spectrum_sum(reference, -1.0, spec, height, terms, shape, sums, isolated)
    free_air = spectrum_to_grid(sums["total"], spec, shape) - _images(sums, spec)
    last = float(np.abs(spectrum_to_grid(sums["last"], spec, shape)).max())
    topo_add, topo_remove, slab = _topography_interfaces(
        top, rho_b, info["water_density"], info.pop("reference_surface")
    )
    sums = _new_sums(spec, shape)
    _spectrum_sum(topo_add, 1.0, spec, height, terms, shape, sums, isolated)
    _spectrum_sum(topo_remove, -1.0, spec, height, terms, shape, sums, isolated)
    topography = spectrum_to_grid(sums["total"], spec, shape) - _images(sums, spec) + slab
    bouguer = free_air - topography
    last = max(last, float(np.abs(spectrum_to_grid(sums["last"], spec, shape)).max()))
    spread = float(free_air.max() - free_air.min())
    if terms > 1 and last > max(0.01 * spread, 1e-3):
        warnings.warn(
            f"gravity series not converged: the last of {terms} terms still changes the "
            f"anomaly by {last:.3g} mGal (free-air range {spread:.3g} mGal); "
            "use more terms or a higher observation_height",
            GravitySeriesWarning,
            stacklevel=2,
        )
    log.info("model gravity: %d terms, FFT grid %s, last term %.3g mGal", terms, shape, last)
    coords = {"y": w_da["y"].variable, "x": w_da["x"].variable}
    attrs = {f"gravity_{k}": v for k, v in info.items()}
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
        coords=coords,
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
