"""Coupling to an ice-sheet model: the bed under ice and ocean, one time step at a time.

:class:`IceStepper` takes the ice thickness (and sea level) an ice-sheet model hands over
at each step and returns the new bed elevation. It holds the floatation and ocean-load
rules of :class:`~gridflex.glacial.floatation.IceLoad` and the plate of a
:class:`~gridflex.glacial.response.ResponseStepper`; :func:`gridflex.ice_response` runs a
whole history through it, so both give the same numbers.

Each step (PHYSICS.md section 7.1; w positive down, b = bed − w):

1. the load of the ice and sea level given for the step on the bed of the step's start
   (an explicit lag of one step) drives the plate over the step;
2. the load is evaluated again on the new bed, and becomes the load acting now (for the
   uplift rate and as the start of a linearly varying load in the next step).
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import deflection_attrs
from gridflex.errors import ConvergenceError, InputError
from gridflex.glacial.elastic import (
    EARTH_POISSON_RATIO,
    EARTH_YOUNGS_MODULUS,
    elastic_deflection_attrs,
)
from gridflex.glacial.floatation import ICE_DENSITY, IceLoad
from gridflex.glacial.response import INITIAL_STATES, ResponseStepper
from gridflex.glacial.state import read_state, write_state
from gridflex.grid import check_grid, check_same_grid
from gridflex.plate import Plate
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR
from gridflex.solvers.viscous import DEFAULT_WIDTH_FACTOR
from gridflex.validation import check_choice, check_density, check_number

__all__ = ["BED_ATTRS", "IceStepper", "check_ice_plate"]

log = logging.getLogger(__name__)

_EQUILIBRIUM_TOL = 1e-6  # m, change of the deflection between fixed-point iterations
_EQUILIBRIUM_MAX_ITER = 200

BED_ATTRS = {"units": "m", "long_name": "bed elevation (positive up)"}
"""Attributes of a bed-elevation grid."""

_ICE_STATE = ("deflection", "bed", "reference_ice_thickness", "ice_thickness", "sea_level")
_ICE_SETTINGS = ("reference_sea_level", "ice_density", "water_density")


def check_ice_plate(plate: Any) -> Plate:
    """A Plate with no infill: the ocean over depressed bedrock is added explicitly.

    Raises
    ------
    InputError
        Not a :class:`Plate`, or one with a non-zero ``infill_density``.
    """
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if plate.infill_density != 0.0:
        raise InputError(
            f"the ice load adds the ocean water over depressed bedrock itself; give a plate "
            f"with infill_density=0.0 (got {plate.infill_density!r})"
        )
    return plate


class IceStepper:
    """The bed under a changing ice sheet and sea level, advanced one step at a time.

    Parameters
    ----------
    bed : xarray.DataArray
        Bed elevation of the reference state (m, positive up), dims ``("y", "x")`` in
        metres: the deflection is zero with this bed, *reference_ice_thickness* and
        *reference_sea_level*.
    plate : Plate
        A constant te or a te grid on *bed*'s grid, with ``infill_density=0`` (the
        ocean over depressed bedrock is part of the load).
    model : {"half-space", "relaxing"}, default "half-space"
        Mantle model, as :class:`gridflex.ResponseStepper`.
    mantle_viscosity : float, default 1e21
        Half-space viscosity (Pa s).
    relaxation_time : float, default 3000.0
        Relaxation time of the relaxing model (years).
    ice_thickness : float or xarray.DataArray, optional
        Ice (m, >= 0) acting at the start; the reference ice if omitted.
    sea_level : float or xarray.DataArray, optional
        Sea level (m) at the start; the reference sea level if omitted.
    reference_ice_thickness : float or xarray.DataArray, default 0
        Ice of the reference state (m).
    reference_sea_level : float, default 0
        Sea level of the reference state (m).
    ice_density, water_density : float
        kg m^-3, default 910 and 1030.
    initial : {"rest", "equilibrium"}, default "rest"
        Start with the reference bed, or in equilibrium with the starting ice and sea
        level (a fixed-point iteration, since the ocean load depends on the bed).
    interpolation : {"linear", "previous"}, default "linear"
        Meaning of the ice passed to :meth:`advance`: the ice at the end of the step,
        reached linearly from the ice acting now, or the ice held during the step.
    edges, pad_factor, width_factor
        Padding; see :class:`gridflex.ResponseStepper`.
    elastic, elastic_youngs_modulus, elastic_poisson_ratio
        The instantaneous elastic half-space response of the Earth to the load, part of
        the deflection (so the bed and floatation move with it); see
        :class:`gridflex.ResponseStepper`. Its part of the deflection is
        :attr:`elastic_deflection`; at a start at rest both are zero (the load's change
        from the reference acts from the first step on).

    Raises
    ------
    InputError
        Invalid bed, plate, ice or parameter.
    ConvergenceError
        The initial equilibrium iteration does not settle.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from gridflex.synthetic import disc_height, empty_grid
    >>> grid = empty_grid(32, 32, 50e3)
    >>> stepper = IceStepper(grid + 100.0, Plate(te=50e3, infill_density=0.0))
    >>> bed = stepper.advance(100.0, disc_height(grid, 400e3, 2000.0))
    >>> stepper.time, bed.name
    (100.0, 'bed_elevation')
    """

    def __init__(
        self,
        bed: xr.DataArray,
        plate: Plate,
        model: str = "half-space",
        mantle_viscosity: float = 1e21,
        relaxation_time: float = 3000.0,
        *,
        ice_thickness: float | xr.DataArray | np.ndarray | None = None,
        sea_level: float | xr.DataArray | np.ndarray | None = None,
        reference_ice_thickness: float | xr.DataArray | np.ndarray = 0.0,
        reference_sea_level: float = 0.0,
        ice_density: float = ICE_DENSITY,
        water_density: float = SEA_WATER_DENSITY,
        initial: str = "rest",
        interpolation: str = "linear",
        edges: str = "infinite",
        pad_factor: float = DEFAULT_PAD_FACTOR,
        width_factor: float = DEFAULT_WIDTH_FACTOR,
        elastic: bool = False,
        elastic_youngs_modulus: float = EARTH_YOUNGS_MODULUS,
        elastic_poisson_ratio: float = EARTH_POISSON_RATIO,
    ) -> None:
        check_ice_plate(plate)
        check_grid(bed, "bed")
        self._grid = bed
        bed_values = np.asarray(bed.values, dtype=np.float64)
        if not np.all(np.isfinite(bed_values)):
            raise InputError("bed contains NaN or infinite values")
        initial = check_choice("initial", initial, INITIAL_STATES)
        self.reference_sea_level = check_number(
            "reference_sea_level", reference_sea_level, unit="m"
        )
        self.rule = IceLoad(
            bed_values,
            check_density("ice_density", ice_density),
            check_density("water_density", water_density),
            plate.gravity,
            self._ice(reference_ice_thickness, "reference_ice_thickness"),
            self.reference_sea_level,
        )
        self._thickness = (
            self.rule.reference_ice
            if ice_thickness is None
            else self._ice(ice_thickness, "ice_thickness")
        )
        self._level = (
            self.reference_sea_level if sea_level is None else self._sea(sea_level, "sea_level")
        )
        self._w = np.zeros(bed_values.shape)
        self._elastic_w = self._w  # the elastic part of _w
        self._load = self.rule.change(self._thickness, self._level, self._w)
        self._spare: np.ndarray | None = None  # see _spare_load
        self.stepper = ResponseStepper(
            bed,
            plate,
            model,
            mantle_viscosity,
            relaxation_time,
            load=self._load,
            initial="rest",
            interpolation=interpolation,
            edges=edges,
            pad_factor=pad_factor,
            width_factor=width_factor,
            elastic=elastic,
            elastic_youngs_modulus=elastic_youngs_modulus,
            elastic_poisson_ratio=elastic_poisson_ratio,
        )
        """The plate's :class:`~gridflex.ResponseStepper` (its load is the ice's)."""
        if initial == "equilibrium":
            self._settle()
        self.stepper.initial = initial
        self.stepper._settings["initial"] = initial

    # -- inputs ---------------------------------------------------------------------
    def _ice(self, value: Any, label: str) -> np.ndarray:
        if isinstance(value, xr.DataArray):
            check_same_grid(value, self._grid, label)
            out = np.ascontiguousarray(value.values, dtype=np.float64)  # read by row blocks
        elif np.ndim(value) == 0:
            out = np.full(tuple(self._grid.shape), check_number(label, value, unit="m"))
        else:
            out = np.ascontiguousarray(value, dtype=np.float64)
            if out.shape != self._grid.shape:
                raise InputError(f"{label} has shape {out.shape}, the grid is {self._grid.shape}")
        if not np.all(np.isfinite(out)) or out.min() < 0:
            raise InputError(
                f"{label} must be finite and >= 0 m everywhere (minimum {np.nanmin(out)!r} m); "
                "fill ice-free cells with 0"
            )
        return out

    def _sea(self, value: Any, label: str) -> float | np.ndarray:
        if np.ndim(value) == 0 and not isinstance(value, xr.DataArray):
            return check_number(label, value, unit="m")
        if isinstance(value, xr.DataArray):
            check_same_grid(value, self._grid, label)
        out = np.asarray(value, dtype=np.float64)
        if out.shape != self._grid.shape:
            raise InputError(f"{label} has shape {out.shape}, the grid is {self._grid.shape}")
        if not np.all(np.isfinite(out)):
            raise InputError(f"{label} contains NaN or infinite values")
        return out

    def _wrap(self, values: np.ndarray, name: str, attrs: dict[str, Any]) -> xr.DataArray:
        return self.stepper._wrap(values, name, attrs)  # the same grid

    # -- stepping -------------------------------------------------------------------
    def advance(
        self,
        dt_years: float,
        ice_thickness: float | xr.DataArray | np.ndarray,
        sea_level: float | xr.DataArray | np.ndarray = 0.0,
    ) -> xr.DataArray:
        """Advance the bed by *dt_years* under *ice_thickness* and *sea_level*.

        Parameters
        ----------
        dt_years : float
            Step length (years, > 0).
        ice_thickness : float or array_like or xarray.DataArray
            Ice (m, >= 0) on the grid: with ``interpolation="linear"`` the ice at the
            end of the step, with ``"previous"`` the ice held during the step. It is
            the ice acting afterwards.
        sea_level : float or array_like, default 0
            Sea level (m) of the same moment (end of the step, or held).

        Returns
        -------
        xarray.DataArray
            Bed elevation (m, positive up) at the new time: the reference bed minus the
            deflection.
        """
        self._advance(
            dt_years, self._ice(ice_thickness, "ice_thickness"), self._sea(sea_level, "sea_level")
        )
        return self.bed_elevation

    def _advance(self, dt_years: float, ice: np.ndarray, level: float | np.ndarray) -> None:
        """:meth:`advance` with *ice* and *level* already checked (as
        :func:`gridflex.ice_response` checks its whole history once), returning nothing."""
        # the load on the bed of the step's start drives the step (explicit lag) ...
        drive = self.rule.change(ice, level, self._w, out=self._spare_load())
        self.stepper._advance(dt_years, drive)  # made of checked inputs: finite
        self._w = self.stepper.deflection.values
        self._keep_elastic()
        self._thickness, self._level = ice, level
        # ... and, on the new bed, becomes the load acting now
        self._reload()

    def set_ice(
        self,
        ice_thickness: float | xr.DataArray | np.ndarray,
        sea_level: float | xr.DataArray | np.ndarray = 0.0,
    ) -> None:
        """Change the ice and sea level acting now without moving the bed (a sudden
        change)."""
        self._thickness = self._ice(ice_thickness, "ice_thickness")
        self._level = self._sea(sea_level, "sea_level")
        self._reload()

    def _reload(self) -> None:
        """Make the load of the ice and sea level now on the bed now the acting load
        (no transform when it has not changed, as on land above the sea)."""
        load = self.rule.change(self._thickness, self._level, self._w, out=self._spare_load())
        if not np.array_equal(load, self._load):
            self.stepper._set_load(load)
        self._load, self._spare = load, self._load

    def _spare_load(self) -> np.ndarray:
        """An array for the next load to be written into: not the load acting now (it
        is compared with it) and kept by no one else (the plate copies what it is given)."""
        spare = self._spare
        if spare is None or spare is self._load:
            spare = self._spare = np.empty(self._w.shape)
        return spare

    def _keep_elastic(self) -> None:
        """Keep the elastic part of the deflection just computed (the load acting now
        changes when it is evaluated again on the new bed; the deflection does not)."""
        if self.stepper.elastic:
            self._elastic_w = self.stepper.elastic_deflection.values

    def _settle(self) -> None:
        """Fixed point w = equilibrium(load(w)); the ocean term makes the load depend
        on w. Each iteration shrinks the error by about rho_w / rho_m (< 1/3 for water
        over mantle), so a few tens of iterations reach the tolerance."""
        w = np.zeros(self._w.shape)
        change = np.inf
        for iteration in range(1, _EQUILIBRIUM_MAX_ITER + 1):
            self.stepper.set_load(self.rule.change(self._thickness, self._level, w))
            new = self.stepper.equilibrium().values
            change = float(np.abs(new - w).max())
            w = new
            if change <= _EQUILIBRIUM_TOL:
                self._load = self.rule.change(self._thickness, self._level, w)
                self.stepper.set_load(self._load)
                self._w = self.stepper.settle().values
                self._keep_elastic()
                log.info("initial equilibrium after %d iterations", iteration)
                return
        raise ConvergenceError(
            f"the initial equilibrium with the ocean load did not settle in "
            f"{_EQUILIBRIUM_MAX_ITER} iterations (last change {change:.3g} m)"
        )

    # -- what is now ----------------------------------------------------------------
    @property
    def time(self) -> float:
        """Time elapsed since the start (years)."""
        return self.stepper.time

    @property
    def deflection(self) -> xr.DataArray:
        """Deflection w (m, positive down) now."""
        return self._wrap(self._w.copy(), "deflection", deflection_attrs())

    @property
    def elastic(self) -> bool:
        """Whether the deflection includes the elastic Earth's response."""
        return self.stepper.elastic

    @property
    def elastic_deflection(self) -> xr.DataArray:
        """The elastic half-space's part of :attr:`deflection` (m, positive down); zeros
        without ``elastic=True``."""
        return self._wrap(self._elastic_w.copy(), "elastic_deflection", elastic_deflection_attrs())

    @property
    def bed_elevation(self) -> xr.DataArray:
        """Bed elevation (m, positive up) now: the reference bed minus the deflection."""
        return self._wrap(self.rule.bed - self._w, "bed_elevation", dict(BED_ATTRS))

    @property
    def load(self) -> np.ndarray:
        """The load acting now (Pa, sigma − sigma_ref, positive down)."""
        return self._load.copy()

    @property
    def grounded(self) -> np.ndarray:
        """Where the ice now rests on the bed now (bool)."""
        return self.rule.grounded(self._thickness, self._level, self._w)

    @property
    def ice_thickness(self) -> np.ndarray:
        """The ice acting now (m)."""
        return self._thickness.copy()

    @property
    def sea_level(self) -> float | np.ndarray:
        """The sea level acting now (m)."""
        return self._level

    def uplift_rate(self) -> xr.DataArray:
        """Uplift rate −dw/dt (m/yr, positive up) now, under the load acting now."""
        return self.stepper.uplift_rate()

    def describe(self) -> dict[str, Any]:
        """Model settings as a flat dict (for output attributes)."""
        out = self.stepper.describe()
        out.update(
            {
                "ice_density": self.rule.ice_density,
                "water_density": self.rule.water_density,
                "reference_sea_level": self.reference_sea_level,
                "reference_state": (
                    "deflection is zero for the given bed with the reference ice and sea level"
                ),
            }
        )
        return out

    # -- saving and restoring -------------------------------------------------------
    def save(self, path: str | Path, overwrite: bool = False) -> Path:
        """Write the stepper to a NetCDF state file (format:
        :mod:`gridflex.glacial.state`), atomically; :meth:`restore` continues the run
        bit for bit.

        Parameters
        ----------
        path : str or pathlib.Path
            The state file (``.nc``).
        overwrite : bool, default False
            Replace an existing file.
        """
        attrs, variables = self.stepper.state()
        shape = self._grid.shape
        arrays = {
            "deflection": self._w,
            "bed": self.rule.bed,
            "reference_ice_thickness": self.rule.reference_ice,
            "ice_thickness": self._thickness,
            "sea_level": np.broadcast_to(np.asarray(self._level, dtype=np.float64), shape),
        }
        if self.elastic:
            arrays["elastic_deflection"] = self._elastic_w
        for name, values in arrays.items():
            variables[name] = (("y", "x"), np.array(values, dtype=np.float64))
        attrs.update(
            {
                "reference_sea_level": self.reference_sea_level,
                "ice_density": self.rule.ice_density,
                "water_density": self.rule.water_density,
                "sea_level_uniform": int(np.ndim(self._level) == 0),
            }
        )
        return write_state(path, "IceStepper", attrs, variables, self._grid, overwrite)

    @classmethod
    def restore(cls, path: str | Path) -> IceStepper:
        """An ice stepper saved by :meth:`save`, ready to continue where it stopped.

        Raises
        ------
        InputError
            The file is missing or not an ``IceStepper`` state; the message names it.
        """
        path = Path(path)
        ds = read_state(path, "IceStepper")
        missing = [n for n in (*_ICE_STATE, *_ICE_SETTINGS) if n not in {*ds.variables, *ds.attrs}]
        if missing:
            raise InputError(f"{path}: the ice stepper state lacks {missing}")
        stepper = ResponseStepper.from_state(ds, path)
        bed = stepper.deflection.copy(data=np.asarray(ds["bed"].values, dtype=np.float64))
        level = np.asarray(ds["sea_level"].values, dtype=np.float64)
        out = cls.__new__(cls)
        out._grid = bed
        out.reference_sea_level = float(ds.attrs["reference_sea_level"])
        out.rule = IceLoad(
            bed.values,
            float(ds.attrs["ice_density"]),
            float(ds.attrs["water_density"]),
            stepper.plate.gravity,
            np.asarray(ds["reference_ice_thickness"].values, dtype=np.float64),
            out.reference_sea_level,
        )
        out._thickness = np.asarray(ds["ice_thickness"].values, dtype=np.float64)
        out._level = float(level.flat[0]) if ds.attrs.get("sea_level_uniform") else level
        out.stepper = stepper
        out._w = np.asarray(ds["deflection"].values, dtype=np.float64)
        out._elastic_w = np.zeros(out._w.shape)
        if stepper.elastic:
            if "elastic_deflection" not in ds.variables:
                raise InputError(
                    f"{path}: the ice stepper state has elastic = 1 but lacks 'elastic_deflection'"
                )
            out._elastic_w = np.asarray(ds["elastic_deflection"].values, dtype=np.float64)
        out._load = out.rule.change(out._thickness, out._level, out._w)
        out._spare = None
        return out
