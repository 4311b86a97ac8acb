"""The elastic plate: parameters, flexural rigidity and length scales."""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import DEFAULT_GRAVITY, MAX_ELASTIC_THICKNESS, SEA_WATER_DENSITY
from gridflex.errors import InputError
from gridflex.validation import check_density, check_number

__all__ = ["PLATE_PARAMETERS", "Plate", "rigidity_from_te", "te_from_rigidity"]

TeLike = float | xr.DataArray


def rigidity_from_te(te: Any, youngs_modulus: float, poisson_ratio: float) -> Any:
    """Flexural rigidity of a thin elastic plate.

    .. math:: D = \\frac{E\\,T_e^3}{12\\,(1-\\nu^2)}

    Parameters
    ----------
    te : float or array_like
        Elastic thickness (m).
    youngs_modulus : float
        Young's modulus E (Pa).
    poisson_ratio : float
        Poisson's ratio nu (dimensionless).

    Returns
    -------
    float or array_like
        Rigidity D (N m), same type as *te*.
    """
    return youngs_modulus * te**3 / (12.0 * (1.0 - poisson_ratio**2))


def te_from_rigidity(rigidity: Any, youngs_modulus: float, poisson_ratio: float) -> Any:
    """Elastic thickness (m) of a plate of rigidity *rigidity* (N m); inverse of
    :func:`rigidity_from_te`."""
    return (12.0 * (1.0 - poisson_ratio**2) * rigidity / youngs_modulus) ** (1.0 / 3.0)


@dataclass(frozen=True, eq=False)
class Plate:
    """A thin elastic plate floating on a fluid mantle.

    Parameters
    ----------
    te : float or xarray.DataArray
        Effective elastic thickness Te (m). A float gives a plate of constant
        rigidity; ``0`` gives local (Airy) isostasy. A DataArray on the load grid
        (dims ``("y", "x")``) gives a spatially varying rigidity; cells with ``0``
        are broken (no bending moment crosses them).
    youngs_modulus : float, default 1.0e11
        Young's modulus E (Pa).
    poisson_ratio : float, default 0.25
        Poisson's ratio nu, in (0, 0.5).
    mantle_density : float, default 3300.0
        Density of the fluid substratum rho_m (kg m^-3).
    infill_density : float, default 1030.0
        Density rho_f of the material that fills the deflection (kg m^-3): sea water
        by default; 0 for air, the load density for a load buried in its own moat.
    gravity : float, default 9.81
        Gravitational acceleration g (m s^-2).
    crust_thickness : float, default 6000.0
        Thickness of the crust above the crust-mantle boundary (m), used for the
        gravity of the deflected boundary; 6 km is a typical oceanic crust (from
        memory), use ~35 km on continents.
    crust_density : float, default 2800.0
        Density of the crust (kg m^-3), used for gravity.

    Raises
    ------
    InputError
        If any value is out of range; the message names the parameter and value.

    Notes
    -----
    The restoring pressure of a deflection w is (rho_m - rho_f) g w, so the plate
    equation solved is D ∇⁴w + (rho_m - rho_f) g w = q (w and q positive downward).

    Examples
    --------
    >>> plate = Plate(te=25e3, youngs_modulus=70e9, infill_density=1000.0)
    >>> round(plate.rigidity / 1e21, 3)
    97.222
    >>> round(plate.flexural_parameter / 1e3, 2)
    64.43
    """

    te: TeLike
    youngs_modulus: float = 1.0e11
    poisson_ratio: float = 0.25
    mantle_density: float = 3300.0
    infill_density: float = SEA_WATER_DENSITY
    gravity: float = DEFAULT_GRAVITY
    crust_thickness: float = 6000.0
    crust_density: float = 2800.0

    def __post_init__(self) -> None:
        set_ = object.__setattr__
        for name, unit in (
            ("crust_thickness", "m"),
            ("youngs_modulus", "Pa"),
            ("gravity", "m/s^2"),
        ):
            value = getattr(self, name)
            set_(self, name, check_number(name, value, unit=unit, minimum=0.0, strict=True))
        set_(self, "crust_density", check_density("crust_density", self.crust_density))
        # not zero: the length scales divide by (rho_m - rho_infill) g, which must be > 0
        mantle = check_density("mantle_density", self.mantle_density, allow_zero=False)
        set_(self, "mantle_density", mantle)
        nu = check_number("poisson_ratio", self.poisson_ratio)
        if not 0.0 < nu < 0.5:
            raise InputError(f"poisson_ratio must lie in (0, 0.5), got {self.poisson_ratio!r}")
        set_(self, "poisson_ratio", nu)
        rho_f = check_density("infill_density", self.infill_density)
        if rho_f >= self.mantle_density:
            raise InputError(
                f"infill_density ({rho_f!r}) must be less than mantle_density "
                f"({self.mantle_density!r}); otherwise nothing restores the plate"
            )
        set_(self, "infill_density", float(rho_f))
        set_(self, "te", self._checked_te(self.te))
        largest = float(np.max(self.te.values)) if isinstance(self.te, xr.DataArray) else self.te
        if not np.isfinite(rigidity_from_te(largest, self.youngs_modulus, nu)):
            raise InputError(
                f"youngs_modulus ({self.youngs_modulus!r} Pa) with te {largest!r} m gives a "
                "rigidity beyond the floating-point range; check the units"
            )

    @staticmethod
    def _checked_te(te: Any) -> TeLike:
        if isinstance(te, xr.DataArray):
            if not np.issubdtype(te.dtype, np.number) or np.iscomplexobj(te.values):
                raise InputError(f"te grid must hold real numbers, got dtype {te.dtype}")
            values = np.asarray(te.values, dtype=np.float64)
            if values.ndim != 2 or te.dims != ("y", "x"):
                raise InputError(f"te grid must have dims ('y', 'x'), got {te.dims!r}")
            if not np.all(np.isfinite(values)):
                raise InputError("te grid contains NaN or infinite values")
            if values.min() < 0.0:
                raise InputError(f"te grid must be >= 0 m everywhere, minimum is {values.min()!r}")
            if values.max() > MAX_ELASTIC_THICKNESS:
                raise InputError(
                    f"te grid must be <= {MAX_ELASTIC_THICKNESS:g} m everywhere, maximum is "
                    f"{values.max()!r}; check the units"
                )
            return te.astype(np.float64)
        return check_number(
            "te", te, unit="m, or a DataArray of te", minimum=0.0, maximum=MAX_ELASTIC_THICKNESS
        )

    @property
    def is_variable(self) -> bool:
        """True when te is a grid (spatially varying rigidity)."""
        return isinstance(self.te, xr.DataArray)

    @property
    def density_contrast(self) -> float:
        """rho_m - rho_infill (kg m^-3), the density that restores a deflection."""
        return self.mantle_density - self.infill_density

    @property
    def restoring_stiffness(self) -> float:
        """(rho_m - rho_infill) g (Pa m^-1), restoring pressure per metre of deflection."""
        return self.density_contrast * self.gravity

    @property
    def rigidity(self) -> TeLike:
        """Flexural rigidity D = E Te^3 / (12 (1 - nu^2)) (N m); a grid if te is one."""
        return rigidity_from_te(self.te, self.youngs_modulus, self.poisson_ratio)

    def rigidity_grid(self, shape: tuple[int, int]) -> np.ndarray:
        """D (N m) as a float64 array of *shape*: the te grid's, or the constant
        repeated (a te grid must have *shape*; its grid is checked by the caller)."""
        rigidity = self.rigidity
        if isinstance(rigidity, xr.DataArray):
            return np.asarray(rigidity.values, dtype=np.float64)
        return np.full(shape, float(rigidity))

    @property
    def flexural_parameter(self) -> TeLike:
        """alpha = (4 D / ((rho_m - rho_infill) g))^(1/4) (m), for line loads."""
        return (4.0 * self.rigidity / self.restoring_stiffness) ** 0.25

    @property
    def relative_stiffness_radius(self) -> TeLike:
        """l = (D / ((rho_m - rho_infill) g))^(1/4) = alpha / sqrt(2) (m), for point loads."""
        return (self.rigidity / self.restoring_stiffness) ** 0.25

    @property
    def max_flexural_parameter(self) -> float:
        """Largest alpha over the plate (m); alpha itself for a constant te."""
        alpha = self.flexural_parameter
        return float(alpha.max()) if isinstance(alpha, xr.DataArray) else float(alpha)

    def with_te(self, te: TeLike) -> Plate:
        """A copy of this plate with another elastic thickness."""
        return Plate(
            te,
            youngs_modulus=self.youngs_modulus,
            poisson_ratio=self.poisson_ratio,
            mantle_density=self.mantle_density,
            infill_density=self.infill_density,
            gravity=self.gravity,
            crust_thickness=self.crust_thickness,
            crust_density=self.crust_density,
        )

    @classmethod
    def from_rigidity(cls, rigidity: float, **kwargs: Any) -> Plate:
        """A plate given by its flexural rigidity D (N m) instead of te.

        Other keyword arguments are those of :class:`Plate`. The te stored is the
        one that gives *rigidity* with the plate's Young's modulus and Poisson's ratio.
        """
        d = check_number("rigidity", rigidity, unit="N m", minimum=0.0)
        e = kwargs.get("youngs_modulus", 1.0e11)
        nu = kwargs.get("poisson_ratio", 0.25)
        cls(0.0, **kwargs)  # validates e and nu before they are used
        return cls(te_from_rigidity(d, e, nu), **kwargs)

    def describe(self) -> dict[str, Any]:
        """Parameters as a flat dict of numbers and strings (for output attributes)."""
        te: Any = "grid" if self.is_variable else self.te
        out: dict[str, Any] = {
            "te": te,
            "youngs_modulus": self.youngs_modulus,
            "poisson_ratio": self.poisson_ratio,
            "mantle_density": self.mantle_density,
            "infill_density": self.infill_density,
            "gravity": self.gravity,
            "crust_thickness": self.crust_thickness,
            "crust_density": self.crust_density,
        }
        if not self.is_variable:
            out["rigidity"] = float(self.rigidity)
            out["flexural_parameter"] = float(self.flexural_parameter)
        else:
            te_grid = self.te
            assert isinstance(te_grid, xr.DataArray)
            out["te_min"] = float(te_grid.min())
            out["te_max"] = float(te_grid.max())
        return out


PLATE_PARAMETERS: tuple[str, ...] = tuple(f.name for f in fields(Plate) if f.name != "te")
"""The plate's scalar parameters besides te (moduli, densities, gravity, crust), in the
order of :class:`Plate`'s fields: what a saved state keeps and what a scenario's ``[plate]``
table may set beside te."""
