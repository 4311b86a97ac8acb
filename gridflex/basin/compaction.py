"""Porosity-depth compaction of sediment layers (exponential law).

Porosity falls off exponentially with burial depth z below the sediment surface
(Athy 1930, *AAPG Bull.* 14; parameters per lithology from Sclater & Christie
1980, *J. Geophys. Res.* 85, 3711-3739):

.. math:: \\phi(z) = \\phi_0 \\exp(-z / \\lambda)

The grain (solid) thickness of a layer between burial depths z1 < z2 is the
closed-form integral

.. math:: s = \\int_{z_1}^{z_2} (1 - \\phi)\\,dz
            = (z_2 - z_1) - \\phi_0 \\lambda\\,(e^{-z_1/\\lambda} - e^{-z_2/\\lambda})

and stays the same when the layer is buried deeper or exhumed (pore water is
expelled or taken up, grains are conserved). Moving a layer to a new top depth
means solving s(z1', z2') = s for the new base z2'; s is increasing and convex
in z2', so Newton's method started from the fully porous thickness converges
monotonically; it runs on whole arrays at once.

The pores are water-saturated, so the bulk density of a layer is
rho = (rho_w P + rho_grain s) / h, with P = h - s the pore thickness.

All depths are burial depths below the top of the sediment pile (m, positive
down); thicknesses in m; densities in kg m^-3.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.errors import ConvergenceError, InputError
from gridflex.validation import check_density, check_number

__all__ = [
    "LITHOLOGIES",
    "Lithology",
    "bulk_density",
    "check_grains_sink",
    "compacted_base",
    "grain_thickness",
    "lithology",
    "move_layer",
    "porosity",
    "saturated_column",
]

_NEWTON_STEPS = 60
_NEWTON_TOLERANCE = 1e-9  # m


@dataclass(frozen=True)
class Lithology:
    """Porosity-depth parameters of one sediment type.

    Parameters
    ----------
    name : str
        Label written to output metadata.
    surface_porosity : float
        phi_0, porosity at the sediment surface, in [0, 1). ``0`` gives a
        sediment that does not compact (constant density = grain density).
    decay_length : float
        lambda (m, > 0), depth over which the porosity falls by a factor e.
    grain_density : float
        Density of the grains (kg m^-3, > 0).
    source : str, optional
        Where the numbers come from.
    """

    name: str
    surface_porosity: float
    decay_length: float
    grain_density: float
    source: str = ""

    def __post_init__(self) -> None:
        phi0 = self.surface_porosity
        if not isinstance(phi0, (int, float)) or not (0.0 <= float(phi0) < 1.0):
            raise InputError(
                f"lithology {self.name!r}: surface_porosity must lie in [0, 1), got {phi0!r}"
            )
        where = f"lithology {self.name!r}:"
        # the porosity law divides the depth by the decay length
        decay = check_number(
            f"{where} decay_length", self.decay_length, unit="m", minimum=0.0, strict=True
        )
        grains = check_density(f"{where} grain_density", self.grain_density)
        object.__setattr__(self, "decay_length", decay)
        object.__setattr__(self, "grain_density", grains)
        object.__setattr__(self, "surface_porosity", float(phi0))

    def describe(self) -> dict[str, Any]:
        """Parameters as output attributes."""
        return {
            "name": self.name,
            "surface_porosity": self.surface_porosity,
            "decay_length": self.decay_length,
            "grain_density": self.grain_density,
            "source": self.source,
        }


_SC80 = "Sclater & Christie 1980, J. Geophys. Res. 85, 3711-3739 (North Sea fits)"

LITHOLOGIES: dict[str, Lithology] = {
    # phi_0 and lambda as tabulated from Sclater & Christie (1980) (PHYSICS.md 1.4 [S]);
    # grain densities from memory of the same table (PHYSICS.md 1.4 [M]).
    "shale": Lithology("shale", 0.63, 1960.0, 2720.0, _SC80),
    "sandstone": Lithology("sandstone", 0.49, 3703.0, 2650.0, _SC80),
    "chalk": Lithology("chalk", 0.70, 1408.0, 2710.0, _SC80),
    "shaly_sandstone": Lithology("shaly_sandstone", 0.56, 2464.0, 2680.0, _SC80),
}
"""Default lithologies (Sclater & Christie 1980); keys are the accepted names."""


def check_grains_sink(grain_density: float, water_density: float, where: str) -> None:
    """Refuse grains not denser than the pore and sea water they settle through.

    Parameters
    ----------
    grain_density, water_density : float
        Densities (kg m^-3).
    where : str
        The lithology, stage or scenario key, for the message.

    Raises
    ------
    InputError
        ``grain_density <= water_density``: such grains would float, and the
        decompacted column would be lighter than the water it replaces.
    """
    if not grain_density > water_density:
        raise InputError(
            f"{where}: grain_density ({grain_density:g} kg/m^3) must exceed the water "
            f"density ({water_density:g} kg/m^3); grains lighter than water would float"
        )


def lithology(value: str | Lithology) -> Lithology:
    """A :class:`Lithology` from a name in :data:`LITHOLOGIES` or a Lithology itself.

    Raises
    ------
    InputError
        Unknown name.
    """
    if isinstance(value, Lithology):
        return value
    if isinstance(value, str) and value in LITHOLOGIES:
        return LITHOLOGIES[value]
    raise InputError(
        f"lithology must be one of {', '.join(map(repr, LITHOLOGIES))} or a "
        f"gridflex.basin.compaction.Lithology, got {value!r}"
    )


def porosity(depth: Any, lith: str | Lithology) -> np.ndarray:
    """Porosity phi_0 exp(-z / lambda) at burial depth *depth* (m, >= 0)."""
    lith = lithology(lith)
    z = np.asarray(depth, dtype=np.float64)
    return lith.surface_porosity * np.exp(-z / lith.decay_length)


def _pore_integral(top: np.ndarray, base: np.ndarray, lith: Lithology) -> np.ndarray:
    """Integral of phi from *top* to *base* (m), the pore thickness of the layer."""
    lam = lith.decay_length
    # -expm1 keeps precision for thin layers: e^-a - e^-b = e^-a (1 - e^-(b-a))
    return lith.surface_porosity * lam * np.exp(-top / lam) * -np.expm1(-(base - top) / lam)


def grain_thickness(top: Any, base: Any, lith: str | Lithology) -> np.ndarray:
    """Solid (grain) thickness of a layer between burial depths *top* and *base* (m).

    s = (base - top) - phi_0 lambda (exp(-top/lambda) - exp(-base/lambda)), the
    closed-form integral of (1 - phi) over the layer (Athy 1930 law).
    """
    lith = lithology(lith)
    z1 = np.asarray(top, dtype=np.float64)
    z2 = np.asarray(base, dtype=np.float64)
    return (z2 - z1) - _pore_integral(z1, z2, lith)


def compacted_base(top: Any, grains: Any, lith: str | Lithology) -> np.ndarray:
    """Base depth (m) of a layer with grain thickness *grains* whose top lies at *top*.

    Solves grain_thickness(top, base) = grains for *base* by Newton's method on
    whole arrays (monotone convergence from the fully porous thickness
    grains / (1 - phi(top)), which lies above the root).

    Raises
    ------
    InputError
        Negative depths or grain thicknesses.
    ConvergenceError
        If Newton's method does not reach 1e-9 m (not expected).
    """
    lith = lithology(lith)
    z1 = np.asarray(top, dtype=np.float64)
    s = np.asarray(grains, dtype=np.float64)
    if np.any(z1 < 0) or np.any(s < 0):
        raise InputError("compaction: burial depths and grain thicknesses must be >= 0 m")
    z1, s = np.broadcast_arrays(z1, s)
    if lith.surface_porosity == 0.0:
        return z1 + s
    lam, phi0 = lith.decay_length, lith.surface_porosity
    top_term = phi0 * np.exp(-z1 / lam)  # phi at the top
    base = z1 + s / (1.0 - top_term)
    offset = z1 + s + lam * top_term  # f = base - offset + lam phi(base)
    phi = np.empty_like(base)
    step = np.empty_like(base)
    for _ in range(_NEWTON_STEPS):
        # one exp per step; the absolute error of f is ~ phi0 lam eps (1e-13 m)
        np.multiply(base, -1.0 / lam, out=phi)
        np.exp(phi, out=phi)
        phi *= phi0
        np.subtract(base, offset, out=step)
        step += lam * phi
        np.subtract(1.0, phi, out=phi)
        step /= phi
        base -= step
        if float(np.max(np.abs(step), initial=0.0)) < _NEWTON_TOLERANCE:
            return base
    raise ConvergenceError(  # pragma: no cover - the iteration is monotone and quadratic
        "compaction: Newton iteration for the layer base did not converge"
    )


def move_layer(top: Any, base: Any, new_top: Any, lith: str | Lithology) -> np.ndarray:
    """New base depth (m) of the layer [top, base] moved to *new_top*, grains conserved.

    Burial (new_top > top) compacts the layer, exhumation (new_top < top)
    decompacts it.
    """
    return compacted_base(new_top, grain_thickness(top, base, lith), lith)


def bulk_density(
    top: Any, base: Any, lith: str | Lithology, water_density: float = SEA_WATER_DENSITY
) -> np.ndarray:
    """Mean bulk density (kg m^-3) of the water-saturated layer [top, base].

    rho = (rho_w P + rho_grain s) / (base - top), P the pore and s the grain
    thickness; where the layer has no thickness, the density at depth *top*.
    """
    lith = lithology(lith)
    z1 = np.asarray(top, dtype=np.float64)
    z2 = np.asarray(base, dtype=np.float64)
    h = z2 - z1
    pores = _pore_integral(z1, z2, lith)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_phi = np.where(h > 0, pores / np.where(h > 0, h, 1.0), porosity(z1, lith))
    return water_density * mean_phi + lith.grain_density * (1.0 - mean_phi)


def saturated_column(
    grains: Sequence[np.ndarray], lithologies: Sequence[Lithology], water_density: float
) -> tuple[list[np.ndarray], list[np.ndarray], np.ndarray]:
    """Layers stacked from the surface down, each compacted under the ones above it.

    Parameters
    ----------
    grains : sequence of numpy.ndarray
        Grain thickness of each layer (m), the top layer first; all of one shape.
    lithologies : sequence of Lithology
        The porosity law of each layer, same order.
    water_density : float
        Density of the pore water (kg m^-3).

    Returns
    -------
    thickness : list of numpy.ndarray
        Compacted thickness of each layer (m), same order.
    mass : list of numpy.ndarray
        Mass per area of each water-saturated layer (kg m^-2): rho_w P + rho_grain s.
    bottom : numpy.ndarray
        Burial depth of the base of the last layer (m): the thickness of the column.
    """
    thickness: list[np.ndarray] = []
    mass: list[np.ndarray] = []
    top = np.zeros(np.shape(grains[0])) if len(grains) else np.zeros(())
    for s, lith in zip(grains, lithologies, strict=True):
        base = compacted_base(top, s, lith)
        h = base - top
        thickness.append(h)
        # saturated pores: rho_w * pore thickness + rho_grain * grains
        mass.append(water_density * (h - s) + lith.grain_density * s)
        top = base
    return thickness, mass, top
