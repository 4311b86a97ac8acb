"""Ice and ocean on the bed: the pointwise floatation rules and the load they put on a plate.

The vertical stress on the bed (PHYSICS.md section 7.1) is

    sigma = g max(rho_i H, rho_w max(z_sl − b, 0))

so grounded ice (rho_i H ≥ rho_w (z_sl − b)) presses with its weight, floating ice
presses exactly like the water it displaces, open ocean with its water column and
ice-free land not at all. A plate is driven by sigma − sigma_ref, the change from a
reference state in which its deflection is zero (:class:`IceLoad`, the one copy of that
rule, used by :class:`gridflex.IceStepper` and so by :func:`gridflex.ice_response`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from gridflex.constants import DEFAULT_GRAVITY, SEA_WATER_DENSITY
from gridflex.solvers.row_blocks import block_rows, for_row_blocks

__all__ = ["ICE_DENSITY", "IceLoad", "bed_stress", "grounded_mask"]

ICE_DENSITY = 910.0
"""Default density of glacier ice (kg/m^3; common practice)."""

ArrayLike = Any


def bed_stress(
    ice_thickness: ArrayLike,
    bed: ArrayLike,
    sea_level: ArrayLike = 0.0,
    *,
    ice_density: float = ICE_DENSITY,
    water_density: float = SEA_WATER_DENSITY,
    gravity: float = DEFAULT_GRAVITY,
    out: np.ndarray | None = None,
) -> ArrayLike:
    """Vertical stress on the bed of ice and ocean water (Pa, positive down).

    .. math:: \\sigma = g\\,\\max\\left(\\rho_i H,\\ \\rho_w \\max(z_{sl} - b, 0)\\right)

    Parameters
    ----------
    ice_thickness : array_like or xarray.DataArray
        Ice thickness H (m, >= 0).
    bed : array_like or xarray.DataArray
        Bed elevation b (m, positive up, same datum as *sea_level*).
    sea_level : float or array_like, default 0
        Sea-level elevation z_sl (m).
    ice_density, water_density : float
        rho_i and rho_w (kg m^-3), default 910 and 1030.
    gravity : float, default 9.81
        g (m s^-2).
    out : numpy.ndarray, optional
        numpy inputs only: the array (float64, of the broadcast shape) to write sigma
        into, and return; it may be *bed* itself. The same operations in the same
        order as without it, so the values are bit for bit the same.

    Returns
    -------
    array or xarray.DataArray
        sigma (Pa), broadcast over the inputs.

    Examples
    --------
    >>> float(bed_stress(1000.0, 100.0))          # grounded ice on land
    8927100.0
    >>> float(bed_stress(300.0, -500.0))         # floating: only the displaced water
    5052150.0
    >>> float(bed_stress(0.0, -500.0))           # the same water column, no ice
    5052150.0
    """
    # ufuncs with out=: fresh arrays (or DataArrays) without it, in place with it
    ocean = np.multiply(
        water_density, np.maximum(np.subtract(sea_level, bed, out=out), 0.0, out=out), out=out
    )
    return np.multiply(
        gravity, np.maximum(np.multiply(ice_density, ice_thickness), ocean, out=out), out=out
    )


def grounded_mask(
    ice_thickness: ArrayLike,
    bed: ArrayLike,
    sea_level: ArrayLike = 0.0,
    *,
    ice_density: float = ICE_DENSITY,
    water_density: float = SEA_WATER_DENSITY,
) -> ArrayLike:
    """True where there is ice and it rests on the bed: H > 0 and
    rho_i H >= rho_w (z_sl − b)."""
    return (ice_thickness > 0) & (ice_density * ice_thickness >= water_density * (sea_level - bed))


@dataclass
class IceLoad:
    """The load (Pa, positive down) that ice and ocean put on a plate whose bed moves.

    The bed at deflection w (m, positive down) is ``bed − w``; the load is
    sigma(H, z_sl, bed − w) − sigma_ref with sigma of :func:`bed_stress` and sigma_ref
    that of the reference state (ice *reference_ice*, sea level *reference_level*, bed
    *bed*), in which the deflection is zero. numpy arrays in SI units.
    """

    bed: np.ndarray
    ice_density: float
    water_density: float
    gravity: float
    reference_ice: np.ndarray
    reference_level: float
    reference_stress: np.ndarray = field(init=False)
    """sigma_ref (Pa) of the reference state."""

    def __post_init__(self) -> None:
        # row-major copies of grids given in another memory order (a transposed bed, say):
        # every step reads them row block by row block (4x slower strided at 512²)
        self.bed = np.ascontiguousarray(self.bed, dtype=np.float64)
        self.reference_ice = np.ascontiguousarray(self.reference_ice, dtype=np.float64)
        self.reference_stress = self.stress(self.reference_ice, self.reference_level, 0.0)

    def stress(self, ice: ArrayLike, level: ArrayLike, w: ArrayLike) -> np.ndarray:
        """sigma (Pa) of *ice* (m) and sea *level* (m) on the bed moved down by *w* (m)."""
        return np.asarray(
            bed_stress(
                ice,
                self.bed - w,
                level,
                ice_density=self.ice_density,
                water_density=self.water_density,
                gravity=self.gravity,
            ),
            dtype=np.float64,
        )

    def change(
        self,
        ice: np.ndarray,
        level: float | np.ndarray,
        w: np.ndarray,
        out: np.ndarray | None = None,
    ) -> np.ndarray:
        """sigma − sigma_ref (Pa), the load that drives the plate, for *ice* and *w* on the
        grid (and *level* a number or on the grid).

        The rule of :meth:`stress` evaluated in cache-sized blocks of rows shared among
        threads (bit for bit the same values), into *out* when given (float64, the
        grid's shape; not one of the inputs), which is returned."""
        if out is None:
            out = np.empty(self.bed.shape)
        sea = np.asarray(level, dtype=np.float64)
        ny, nx = out.shape

        def rows(j0: int, j1: int, _thread: int) -> None:
            block = out[j0:j1]
            np.subtract(self.bed[j0:j1], w[j0:j1], out=block)  # the bed now
            bed_stress(
                ice[j0:j1],
                block,
                sea if sea.ndim == 0 else sea[j0:j1],
                ice_density=self.ice_density,
                water_density=self.water_density,
                gravity=self.gravity,
                out=block,
            )
            block -= self.reference_stress[j0:j1]

        for_row_blocks(ny, block_rows(nx, ny), rows)
        return out

    def grounded(self, ice: ArrayLike, level: ArrayLike, w: ArrayLike) -> np.ndarray:
        """Where *ice* rests on the bed moved down by *w*."""
        return np.asarray(
            grounded_mask(
                ice,
                self.bed - w,
                level,
                ice_density=self.ice_density,
                water_density=self.water_density,
            )
        )
