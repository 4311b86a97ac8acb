"""Linear (first-order) free-air gravity of a flexurally compensated load.

The load's own mass sits on the undeflected top of the plate (the sea floor, depth
z_t below the observation plane); the plate interfaces below it — the top of the
crust (contrast rho_c - rho_f) and the Moho (contrast rho_m - rho_c, at depth
z_t + t_c) — all move down by the deflection w. To first order in the relief
(the n = 1 term of Parker's 1973 series, PHYSICS.md 6.1 and 6.3):

.. math:: \\Delta G(k) = 2 \\pi G \\left[ e^{-k z_t} \\frac{Q(k)}{g}
          - \\left( (\\rho_c - \\rho_f) e^{-k z_t}
          + (\\rho_m - \\rho_c) e^{-k (z_t + t_c)} \\right) W(k) \\right]

With W = Φ(k) Q / ((rho_m - rho_f) g) and Φ the isostatic response function this
is ``2 pi G Q/g * compensation_factor(k)``; for a load of density contrast
rho_t with height H, Q/g = rho_t H and ``2 pi G rho_t compensation_factor`` is the
free-air admittance (McKenzie & Bowin 1976; Watts 2001 — PHYSICS.md eq. 6.2).
This module stands in for the full nonlinear gravity model until that is
available; it is exact only for relief small compared with its depth.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from gridflex.errors import InputError
from gridflex.plate import Plate
from gridflex.validation import check_density, check_number

__all__ = ["CrustLayers", "compensation_factor", "gravity_terms"]


@dataclass(frozen=True)
class CrustLayers:
    """Where the density interfaces of a flexed plate lie, for gravity.

    Parameters
    ----------
    seafloor_depth : float
        Depth (m, positive down) of the undeflected top of the plate — the sea
        floor at sea, the land surface on land — below the observation plane. The
        load's mass is placed here. Must be > 0 (sources below the plane).
    crust_thickness : float, optional
        Crustal thickness t_c (m); the Moho lies at ``seafloor_depth +
        crust_thickness``. Default: the plate's ``crust_thickness``.
    crust_density : float, optional
        Crustal density rho_c (kg m⁻³), between the plate's infill and mantle
        densities (PHYSICS.md 1.4: oceanic crust 2800–2900). Default: the
        plate's ``crust_density``.
    """

    seafloor_depth: float
    crust_thickness: float | None = None
    crust_density: float | None = None

    def __post_init__(self) -> None:
        set_ = object.__setattr__
        depth = check_number(
            "seafloor_depth", self.seafloor_depth, unit="m", minimum=0, strict=True
        )
        set_(self, "seafloor_depth", depth)
        if self.crust_thickness is not None:
            thickness = check_number("crust_thickness", self.crust_thickness, unit="m", minimum=0)
            set_(self, "crust_thickness", thickness)
        if self.crust_density is not None:
            density = check_density("crust_density", self.crust_density, allow_zero=False)
            set_(self, "crust_density", density)

    def crust(self, plate: Plate) -> tuple[float, float]:
        """(thickness, density) of the crust: these layers' values, else the plate's.

        Raises
        ------
        InputError
            Unless rho_f <= rho_c <= rho_m for *plate*.
        """
        thickness = self.crust_thickness
        density = self.crust_density
        thickness = float(plate.crust_thickness if thickness is None else thickness)
        density = float(plate.crust_density if density is None else density)
        if not plate.infill_density <= density <= plate.mantle_density:
            raise InputError(
                f"crust_density ({density!r}) must lie between the plate's "
                f"infill_density ({plate.infill_density!r}) and mantle_density "
                f"({plate.mantle_density!r})"
            )
        return thickness, density

    def check_plate(self, plate: Plate) -> None:
        """Raise :class:`InputError` unless rho_f <= rho_c <= rho_m for *plate*."""
        self.crust(plate)

    def describe(self, plate: Plate) -> dict[str, float]:
        """Parameters as a flat dict (for output attributes), crust resolved for *plate*."""
        thickness, density = self.crust(plate)
        return {
            "seafloor_depth": self.seafloor_depth,
            "crust_thickness": thickness,
            "crust_density": density,
        }


def compensation_factor(
    wavenumber: np.ndarray, response: np.ndarray, layers: CrustLayers, plate: Plate
) -> np.ndarray:
    """Dimensionless gravity filter of a compensated load (first order).

    .. math:: C(k) = e^{-k z_t} - \\Phi(k) \\frac{(\\rho_c - \\rho_f) e^{-k z_t}
              + (\\rho_m - \\rho_c) e^{-k (z_t + t_c)}}{\\rho_m - \\rho_f}

    Parameters
    ----------
    wavenumber : numpy.ndarray
        Radial angular wavenumber k (rad m⁻¹).
    response : numpy.ndarray
        Isostatic response function Φ(k) = (rho_m - rho_f) g W / Q (1 at k = 0 for
        full compensation, 0 for a rigid plate), broadcastable to *wavenumber*.
    layers : CrustLayers
        Depths and crustal density.
    plate : Plate
        Supplies rho_m and rho_f.

    Returns
    -------
    numpy.ndarray
        C(k); the free-air anomaly spectrum is ``2 pi G C(k) Q(k) / g`` (m s⁻²).
        C(0) = 0 when Φ(0) = 1 (full compensation).
    """
    top, interfaces = gravity_terms(wavenumber, layers, plate)
    return top - response * interfaces


def gravity_terms(
    wavenumber: np.ndarray, layers: CrustLayers, plate: Plate
) -> tuple[np.ndarray, np.ndarray]:
    """The plate-independent parts of :func:`compensation_factor`.

    Returns
    -------
    top : numpy.ndarray
        e^{-k z_t}, the upward continuation from the sea floor.
    interfaces : numpy.ndarray
        ((rho_c - rho_f) e^{-k z_t} + (rho_m - rho_c) e^{-k (z_t + t_c)}) / (rho_m - rho_f),
        the flexed interfaces per unit of compensation.

    With them, C(k) = top - Φ(k) interfaces for any rigidity (cache them when many
    plates are tried on one grid).
    """
    thickness, rho_c = layers.crust(plate)
    top = np.exp(-wavenumber * layers.seafloor_depth)
    moho = top * np.exp(-wavenumber * thickness)
    rho_m, rho_f = plate.mantle_density, plate.infill_density
    interfaces = ((rho_c - rho_f) * top + (rho_m - rho_c) * moho) / (rho_m - rho_f)
    return top, interfaces
