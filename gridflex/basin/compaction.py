"""Porosity-depth compaction of sediment layers (exponential law).

Porosity falls off exponentially with burial depth z below the sediment surface
(Athy 1930, *AAPG Bull.* 14; parameters per lithology from Sclater & Christie
1980, *J. Geophys. Res.* 85, 3711-3739):

.. math:: \\phi(z) = \\phi_0 \\exp(-z / \\lambda)

The grain (solid) thickness of a layer of thickness h whose top lies at burial
depth z1 is the closed-form integral

.. math:: s = \\int_{z_1}^{z_1 + h} (1 - \\phi)\\,dz = h\\,(1 - \\phi(z_1)\\,E(h/\\lambda)),
          \\qquad E(x) = (1 - e^{-x}) / x = -\\mathrm{expm1}(-x) / x,

with E(0) = 1. Written this way (a thickness times a factor in [1 - phi(z1), 1],
never a difference of two depths or of two exponentials) it is exact to round-off
for any h >= 0, never negative, and s = 0 exactly for h = 0; the mean porosity of
the layer is phi(z1) E(h/lambda), whose limit for h -> 0 is the porosity at its top.
The grains stay the same when the layer is buried deeper or exhumed (pore water is
expelled or taken up, grains are conserved). Moving a layer to a new top depth
means solving s(z1', h') = s for the new thickness h' >= 0: s is increasing and
convex in h', and the root lies in the bracket [s, s / (1 - phi(z1'))], so Newton's
method started from the bracket's upper end decreases monotonically onto it; it
runs on whole arrays at once and is clipped to the bracket (h' >= s >= 0, and
h' = 0 exactly for s = 0). Thicknesses are solved as thicknesses, never as the
difference of two depths, so a layer of a few 1e-14 m keeps its relative accuracy
whatever its burial.

The pores are water-saturated, so the bulk density of a layer is
rho = rho_w phi_bar + rho_grain (1 - phi_bar), phi_bar = phi(z1) E(h/lambda) its
mean porosity (a weighted mean of the two densities, also for vanishing layers).

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
    "compacted_thickness",
    "grain_thickness",
    "layer_grains",
    "lithology",
    "mean_porosity",
    "move_layer",
    "porosity",
    "saturated_column",
]

_NEWTON_STEPS = 60
_NEWTON_TOLERANCE = 1e-6  # m, the last Newton step (the error after it is ~1e-15 m)


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
    # phi_0 and lambda = 1/c from Sclater & Christie (1980), J. Geophys. Res. 85(B7),
    # 3711-3739, Table 2 (surface porosity phi_0 and compaction coefficient c, km^-1):
    # shale 0.63, 0.51; sandstone 0.49, 0.27; chalk 0.70, 0.71; shaly sandstone 0.56,
    # 0.39 -> lambda = 1/c = 1960, 3703, 1408, 2564 m (truncated to the metre). The c
    # values are quoted from memory of the table and of the secondary tables that
    # reproduce it (the primary table was not re-checked here); the first three
    # lambdas agree with PHYSICS.md 1.4 [S], whose 2464 m for shaly sandstone (also
    # printed in one textbook) is not 1/0.39 km^-1 and is taken as a misprint.
    # Grain densities from memory of the same table (PHYSICS.md 1.4 [M]).
    "shale": Lithology("shale", 0.63, 1960.0, 2720.0, _SC80),
    "sandstone": Lithology("sandstone", 0.49, 3703.0, 2650.0, _SC80),
    "chalk": Lithology("chalk", 0.70, 1408.0, 2710.0, _SC80),
    "shaly_sandstone": Lithology("shaly_sandstone", 0.56, 2564.0, 2680.0, _SC80),
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


def _relative_pores(x: np.ndarray) -> np.ndarray:
    """E(x) = (1 - e^-x) / x = -expm1(-x) / x, with E(0) = 1 (its limit)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = -np.expm1(-x) / x
    return np.where(x == 0.0, 1.0, ratio)


def mean_porosity(top: Any, thickness: Any, lith: str | Lithology) -> np.ndarray:
    """Mean porosity of a layer of *thickness* (m, >= 0) whose top lies at burial *top* (m).

    phi(top) E(h / lambda), E(x) = -expm1(-x) / x: exact to round-off for any
    thickness, and the porosity at *top* for a layer of no thickness (its limit).
    """
    lith = lithology(lith)
    z1 = np.asarray(top, dtype=np.float64)
    h = np.asarray(thickness, dtype=np.float64)
    return porosity(z1, lith) * _relative_pores(h / lith.decay_length)


def layer_grains(top: Any, thickness: Any, lith: str | Lithology) -> np.ndarray:
    """Grain thickness (m) of a layer of *thickness* (m) whose top lies at burial *top* (m).

    s = h (1 - phi(top) E(h / lambda)), the closed-form integral of 1 - phi over the
    layer (Athy 1930 law) as a thickness times a factor in [1 - phi(top), 1]: exact to
    round-off, >= 0 for h >= 0 and 0 exactly for h = 0.
    """
    h = np.asarray(thickness, dtype=np.float64)
    return h * (1.0 - mean_porosity(top, h, lith))


def grain_thickness(top: Any, base: Any, lith: str | Lithology) -> np.ndarray:
    """Solid (grain) thickness of a layer between burial depths *top* and *base* (m).

    s = (base - top) - phi_0 lambda (exp(-top/lambda) - exp(-base/lambda)), the
    closed-form integral of (1 - phi) over the layer (Athy 1930 law), evaluated as
    :func:`layer_grains` of the thickness base - top.
    """
    z1 = np.asarray(top, dtype=np.float64)
    return layer_grains(z1, np.asarray(base, dtype=np.float64) - z1, lith)


def _checked_burial(top: Any, grains: Any) -> tuple[np.ndarray, np.ndarray]:
    z1 = np.asarray(top, dtype=np.float64)
    s = np.asarray(grains, dtype=np.float64)
    for name, values in (("burial depths", z1), ("grain thicknesses", s)):
        if values.size and not float(np.min(values)) >= 0.0:  # also refuses NaN
            raise InputError(
                f"compaction: {name} must be finite numbers >= 0 m, got a minimum of "
                f"{float(np.min(values))!r} m"
            )
    z1, s = np.broadcast_arrays(z1, s)
    return z1, s


def compacted_thickness(top: Any, grains: Any, lith: str | Lithology) -> np.ndarray:
    """Thickness (m) of a layer with grain thickness *grains* (m) whose top lies at *top* (m).

    Solves layer_grains(top, h) = grains for h by Newton's method on whole arrays:
    s(h) is increasing and convex, so the iteration started from the fully porous
    thickness grains / (1 - phi(top)) (the upper end of the bracket
    [grains, grains / (1 - phi(top))]) decreases monotonically onto the root; each
    iterate is clipped to the bracket. The result is >= grains >= 0, and 0 exactly
    for grains = 0.

    Raises
    ------
    InputError
        Negative (or NaN) depths or grain thicknesses.
    ConvergenceError
        If Newton's method does not converge (not expected).
    """
    lith = lithology(lith)
    z1, s = _checked_burial(top, grains)
    if lith.surface_porosity == 0.0:
        return s.astype(np.float64, copy=True)
    lam = lith.decay_length
    phi_top = porosity(z1, lith)
    low = s
    high = np.asarray(s / (1.0 - phi_top))
    h = np.array(high, dtype=np.float64)  # an array also for scalar input (out= below)
    em = np.empty_like(h)
    step = np.empty_like(h)
    slope = np.empty_like(h)
    for _ in range(_NEWTON_STEPS):
        # g(h) = h - s - phi_top lam (1 - e^(-h/lam)), g'(h) = 1 - phi_top e^(-h/lam):
        # one expm1 per step; g is evaluated to a relative error of h eps
        np.multiply(h, -1.0 / lam, out=em)
        np.expm1(em, out=em)
        np.subtract(h, s, out=step)
        step += phi_top * lam * em
        np.multiply(phi_top, em, out=slope)
        np.subtract(1.0 - phi_top, slope, out=slope)
        step /= slope
        h -= step
        np.clip(h, low, high, out=h)
        if float(np.max(np.abs(step), initial=0.0)) < _NEWTON_TOLERANCE:
            # quadratic convergence: the error left is ~ phi/(2 lam (1 - phi)) step^2,
            # below 1e-15 m
            return h
    raise ConvergenceError(  # pragma: no cover - the iteration is monotone and quadratic
        "compaction: Newton iteration for the layer thickness did not converge"
    )


def compacted_base(top: Any, grains: Any, lith: str | Lithology) -> np.ndarray:
    """Base depth (m) of a layer with grain thickness *grains* whose top lies at *top*.

    top + :func:`compacted_thickness`: never above *top*, and equal to it for no grains.

    Raises
    ------
    InputError
        Negative depths or grain thicknesses.
    """
    z1 = np.asarray(top, dtype=np.float64)
    return z1 + compacted_thickness(z1, grains, lith)


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

    rho = rho_w phi_bar + rho_grain (1 - phi_bar), phi_bar the layer's
    :func:`mean_porosity`; where the layer has no thickness, the density at depth
    *top* (the limit).
    """
    lith = lithology(lith)
    z1 = np.asarray(top, dtype=np.float64)
    h = np.clip(np.asarray(base, dtype=np.float64) - z1, 0.0, None)
    return _saturated_density(mean_porosity(z1, h, lith), lith, water_density)


def _saturated_density(phi: np.ndarray, lith: Lithology, water_density: float) -> np.ndarray:
    return water_density * phi + lith.grain_density * (1.0 - phi)


def saturated_column(
    grains: Sequence[np.ndarray],
    lithologies: Sequence[Lithology],
    water_density: float,
    burial: Sequence[np.ndarray | float] | None = None,
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
    burial : sequence of numpy.ndarray or float, optional
        Deepest burial (m) the top of each layer has had, same order: compaction is
        irreversible, so a layer brought up by erosion above it keeps the porosity of
        that burial (its thickness is compacted from the deeper of its present top and
        this depth). None: every layer at its present burial.

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
    deepest: Sequence[np.ndarray | float] = [0.0] * len(grains) if burial is None else burial
    for s, lith, past in zip(grains, lithologies, deepest, strict=True):
        compacted_at = np.maximum(top, past)
        h = compacted_thickness(compacted_at, s, lith)
        thickness.append(h)
        # saturated pores: the mean bulk density times the thickness (a weighted mean of
        # rho_w and rho_grain, so a vanishing layer keeps a physical density)
        phi = mean_porosity(compacted_at, h, lith)
        mass.append(h * _saturated_density(phi, lith, water_density))
        top = top + h
    return thickness, mass, top
