"""Instantaneous elastic response of the Earth to a surface load (an elastic half-space).

The plate-over-mantle models of :mod:`gridflex.glacial.response` move only as the mantle
flows; the solid Earth also deforms elastically, at once, under every change of the load
(what GPS rates under changing ice record). Here that part is the surface displacement of
a homogeneous elastic half-space (Boussinesq; Timoshenko & Goodier 1951), computed by a
free-space FFT convolution (:mod:`gridflex.solvers.elastic_halfspace`), and added to the
viscous deflection when a run asks for ``elastic=True``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.grid import check_grid
from gridflex.solvers.elastic_halfspace import ElasticHalfSpace

__all__ = [
    "EARTH_POISSON_RATIO",
    "EARTH_YOUNGS_MODULUS",
    "elastic_deflection_attrs",
    "elastic_halfspace_response",
]

EARTH_YOUNGS_MODULUS = 1.74e11
"""Default Young's modulus of the elastic Earth (Pa): the uppermost mantle of PREM
(Dziewonski & Anderson 1981, *Phys. Earth Planet. Inter.* 25, 297–356; from memory:
rho 3380 kg m⁻³, vp 8.11 km/s, vs 4.49 km/s give mu = rho vs² = 68 GPa, lambda = 86 GPa,
E = mu (3 lambda + 2 mu) / (lambda + mu) = 174 GPa). A half-space of one material is a
crude stand-in for the layered Earth: choose moduli for the depths the loads reach."""

EARTH_POISSON_RATIO = 0.28
"""Default Poisson's ratio of the elastic Earth, lambda / (2 (lambda + mu)) of the same
PREM values (0.279; from memory)."""


def elastic_deflection_attrs() -> dict[str, str]:
    """CF-style attributes of the ``elastic_deflection`` variable."""
    return {
        "units": "m",
        "long_name": "instantaneous elastic displacement of the Earth (positive downward)",
        "comment": "elastic half-space (Boussinesq) under the load of that time; included "
        "in the deflection",
    }


def elastic_halfspace_response(
    load: xr.DataArray,
    youngs_modulus: float = EARTH_YOUNGS_MODULUS,
    poisson_ratio: float = EARTH_POISSON_RATIO,
) -> xr.DataArray:
    """Surface displacement of an elastic half-space under a vertical surface load.

    A point force P moves the surface down by (1 − ν²) P / (π E r) (Boussinesq;
    Timoshenko & Goodier 1951); the load is convolved with this kernel, each cell's load
    uniform over the cell (the kernel integrated over it in closed form) on a zero-padded
    grid of twice the size: no periodic copies, and a net load is allowed (its field
    decays like 1 / r). A uniformly loaded disc of radius a sinks by
    2 (1 − ν²) p a / E at its centre and 4 (1 − ν²) p a / (π E) at its edge.

    Parameters
    ----------
    load : xarray.DataArray
        Vertical stress on the surface (Pa, positive down), dims ``("y", "x")``.
    youngs_modulus : float, default 1.74e11
        E of the half-space (Pa); default: uppermost mantle of PREM (see
        :data:`EARTH_YOUNGS_MODULUS`).
    poisson_ratio : float, default 0.28
        ν, in (0, 0.5].

    Returns
    -------
    xarray.DataArray
        ``elastic_deflection``: vertical displacement (m, positive down) on the load's grid.

    Raises
    ------
    InputError
        A load that is not a finite grid, or bad moduli.

    Examples
    --------
    >>> from gridflex.synthetic import disc_height, empty_grid
    >>> grid = empty_grid(64, 64, 5e3)
    >>> load = disc_height(grid, 60e3, 1e6)   # 1 MPa on a disc of 60 km
    >>> w = elastic_halfspace_response(load, 1e11, 0.25)
    >>> round(float(w.max()), 2)   # centre: 2 (1 - 0.25**2) 1e6 60e3 / 1e11 = 1.125 m
    1.12
    """
    spec = check_grid(load, "load")
    values = np.asarray(load.values, dtype=np.float64)
    if not np.all(np.isfinite(values)):
        raise InputError("load contains NaN or infinite values")
    engine = ElasticHalfSpace.build(spec, youngs_modulus, poisson_ratio)
    return _wrap(engine.response(values), load)


def _wrap(values: np.ndarray, like: Any) -> xr.DataArray:
    coords = {"y": like["y"].variable, "x": like["x"].variable}
    return xr.DataArray(
        values,
        dims=("y", "x"),
        coords=coords,
        name="elastic_deflection",
        attrs=elastic_deflection_attrs(),
    )
