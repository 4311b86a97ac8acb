"""Ice and ocean loads on the bed, and the bed's response to an ice-thickness history.

The vertical stress on the bed (PHYSICS.md section 7.1) is

    sigma = g max(rho_i H, rho_w max(z_sl − b, 0))

so grounded ice (rho_i H ≥ rho_w (z_sl − b)) presses with its weight, floating ice
presses exactly like the water it displaces, open ocean with its water column and
ice-free land not at all. The plate is driven by sigma − sigma_ref, the change
from a reference state (bed ``bed``, ice ``reference_ice_thickness``, sea level
``reference_sea_level``) in which the deflection is zero. The bed moves with the
plate, b = bed − w, so floatation and the ocean over depressed bedrock are evaluated
again at every time from the current deflection (an explicit lag of one step).
Every cell with its bed below sea level and no grounded ice counts as ocean; closed
basins are not told apart from the sea.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import DEFAULT_GRAVITY, SEA_WATER_DENSITY
from gridflex.engine import deflection_attrs
from gridflex.errors import ConvergenceError, InputError
from gridflex.glacial.elastic import (
    EARTH_POISSON_RATIO,
    EARTH_YOUNGS_MODULUS,
    elastic_deflection_attrs,
)
from gridflex.glacial.response import (
    INITIAL_STATES,
    ResponseStepper,
    check_history_grid,
    uplift_rate_attrs,
    warn_edge_load,
)
from gridflex.grid import check_grid, check_same_grid
from gridflex.io.provenance import provenance_attrs
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR
from gridflex.solvers.viscous import DEFAULT_WIDTH_FACTOR
from gridflex.validation import check_choice, check_density, check_number

__all__ = [
    "MAX_STEPS",
    "bed_stress",
    "check_max_step",
    "grounded_mask",
    "ice_response",
    "sea_level_at",
]

log = logging.getLogger(__name__)

ICE_DENSITY = 910.0
"""Default density of glacier ice (kg/m^3; common practice)."""

_EQUILIBRIUM_TOL = 1e-6  # m, change of the deflection between fixed-point iterations
_EQUILIBRIUM_MAX_ITER = 200

ArrayLike = Any

MAX_STEPS = 100_000
"""Most time steps a history may be split into by ``max_step``: each costs one FFT pair
of the padded grid, so more would run for hours without telling why."""


def check_max_step(name: str, max_step: Any, times: Any) -> float | None:
    """*max_step* (years) checked against the history's *times*: > 0 and splitting the
    intervals into at most :data:`MAX_STEPS` steps in all. None means no limit.

    Raises
    ------
    InputError
        Naming *name* (e.g. ``"[solver] max_step"``), the value, the number of steps it
        would take and the smallest value allowed.
    """
    if max_step is None:
        return None
    step = check_number(name, max_step, unit="years", minimum=0.0, strict=True)
    gaps = np.diff(np.asarray(times, dtype=np.float64))
    with np.errstate(over="ignore"):  # a tiny step counts as infinitely many
        steps = float(np.sum(np.maximum(1.0, np.ceil(gaps[gaps > 0] / step - 1e-9))))
    if steps > MAX_STEPS:
        span = float(np.sum(gaps))
        raise InputError(
            f"{name} = {step:g} years splits the history of {span:g} years into {steps:.3g} "
            f"steps (at most {MAX_STEPS}); use a max_step of at least "
            f"{span / (MAX_STEPS - gaps.size):.3g} years"
        )
    return step


def bed_stress(
    ice_thickness: ArrayLike,
    bed: ArrayLike,
    sea_level: ArrayLike = 0.0,
    *,
    ice_density: float = ICE_DENSITY,
    water_density: float = SEA_WATER_DENSITY,
    gravity: float = DEFAULT_GRAVITY,
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
    ocean = water_density * np.maximum(sea_level - bed, 0.0)
    return gravity * np.maximum(ice_density * ice_thickness, ocean)


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


SERIES_END_TOLERANCE = 1e-6
"""Years by which a time may lie beyond the ends of a sea-level series (round-off of
times converted from days)."""


def sea_level_at(series: xr.DataArray, times: ArrayLike, where: str = "sea_level") -> np.ndarray:
    """Sea level (m) of *series* at *times* (years), linear in time between its times.

    The rule of every sea-level series: linear interpolation between the series' own
    times; a time before its first or after its last time is refused, never extrapolated
    or held constant (an invented sea level would be a silently wrong number).

    Parameters
    ----------
    series : xarray.DataArray
        Sea level (m) on dim ``"time"`` with a ``time`` coordinate in years,
        strictly increasing.
    times : array_like
        Times (years) wanted.
    where : str, default "sea_level"
        What the series is (file and variable), for messages.

    Returns
    -------
    numpy.ndarray
        float64, one sea level per time.

    Raises
    ------
    InputError
        Not a series along time, times not increasing, NaN values, or *times* beyond
        the series' span.

    Examples
    --------
    >>> s = xr.DataArray([-120.0, 0.0], dims="time", coords={"time": [-20000.0, 0.0]})
    >>> sea_level_at(s, [-20000.0, -5000.0, 0.0])
    array([-120.,  -30.,    0.])
    """
    if (
        not isinstance(series, xr.DataArray)
        or series.dims != ("time",)
        or "time" not in (series.coords)
    ):
        raise InputError(f"{where}: a sea-level series must be 1-D along 'time' with its times")
    at = np.asarray(times, dtype=np.float64)
    given = np.asarray(series["time"].values, dtype=np.float64)
    values = np.asarray(series.values, dtype=np.float64)
    if not np.all(np.isfinite(given)) or np.any(np.diff(given) <= 0):
        raise InputError(f"{where}: the times of the sea-level series must increase")
    missing = int((~np.isfinite(values)).sum())
    if missing:
        raise InputError(f"{where}: {missing} missing (NaN or fill) value(s) in the series")
    outside = (at < given[0] - SERIES_END_TOLERANCE) | (at > given[-1] + SERIES_END_TOLERANCE)
    if np.any(outside):
        raise InputError(
            f"{where}: the series covers {given[0]:g} to {given[-1]:g} years but sea level "
            f"is needed from {at.min():g} to {at.max():g} years ({int(outside.sum())} "
            "time(s) outside); extend the series, it is not extrapolated"
        )
    if given.size == 1:
        return np.full(at.shape, values[0])
    return np.interp(at, given, values)


def _sea_level_series(sea_level: Any, times: np.ndarray) -> np.ndarray:
    if isinstance(sea_level, xr.DataArray) and sea_level.ndim == 1 and "time" in sea_level.coords:
        return sea_level_at(sea_level, times)
    if isinstance(sea_level, xr.DataArray) and sea_level.ndim == 1:
        if sea_level.dims != ("time",) or sea_level.size != times.size:
            raise InputError(
                f"sea_level as a series must have dim 'time' with {times.size} values "
                f"like ice_thickness, got dims {sea_level.dims!r} and {sea_level.size} values"
            )
        values = np.asarray(sea_level.values, dtype=np.float64)
    else:
        values = np.asarray(sea_level, dtype=np.float64)
        if values.ndim == 0:
            values = np.full(times.size, float(values))
        elif values.shape != times.shape:
            raise InputError(
                f"sea_level must be a number or a series of {times.size} values (one per "
                f"time), got shape {values.shape}"
            )
    if not np.all(np.isfinite(values)):
        raise InputError("sea_level contains NaN or infinite values")
    return values


def _reference_field(value: Any, like: xr.DataArray, label: str) -> np.ndarray:
    if isinstance(value, xr.DataArray):
        check_same_grid(value, like, label)
        out = np.asarray(value.values, dtype=np.float64)
    else:
        out = np.full(like.shape, float(value))
    if not np.all(np.isfinite(out)) or out.min() < 0:
        raise InputError(f"{label} must be finite and >= 0 m")
    return out


def ice_response(
    ice_thickness: xr.DataArray,
    bed: xr.DataArray,
    plate: Plate,
    sea_level: float | xr.DataArray = 0.0,
    model: str = "half-space",
    mantle_viscosity: float = 1e21,
    relaxation_time: float = 3000.0,
    *,
    reference_ice_thickness: float | xr.DataArray = 0.0,
    reference_sea_level: float = 0.0,
    ice_density: float = ICE_DENSITY,
    water_density: float = SEA_WATER_DENSITY,
    initial: str = "rest",
    interpolation: str = "linear",
    max_step: float | None = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    width_factor: float = DEFAULT_WIDTH_FACTOR,
    elastic: bool = False,
    elastic_youngs_modulus: float = EARTH_YOUNGS_MODULUS,
    elastic_poisson_ratio: float = EARTH_POISSON_RATIO,
    progress: Progress | None = None,
) -> xr.Dataset:
    """Bed deflection through time under an ice-thickness history with floatation.

    Parameters
    ----------
    ice_thickness : xarray.DataArray
        H (m, >= 0), dims ``("time", "y", "x")``, time in years, increasing.
    bed : xarray.DataArray
        Bed elevation in the reference state (m, positive up), dims ``("y", "x")`` on
        the same grid.
    plate : Plate
        A constant te or a te grid on the ice grid (see :class:`gridflex.ResponseStepper`),
        and ``infill_density=0``: the ocean water over depressed bedrock is added here
        explicitly.
    sea_level : float or xarray.DataArray, default 0
        Sea-level elevation (m): one number, one value per time, or a series with its
        own ``time`` coordinate, interpolated linearly onto the ice times
        (:func:`sea_level_at`: never extrapolated beyond its span).
    model, mantle_viscosity, relaxation_time
        As :func:`gridflex.viscous_response`.
    reference_ice_thickness : float or xarray.DataArray, default 0
        Ice of the reference state (m), in which the deflection is zero.
    reference_sea_level : float, default 0
        Sea level of the reference state (m).
    ice_density, water_density : float
        kg m^-3, default 910 and 1030.
    initial : {"rest", "equilibrium"}, default "rest"
        At the first time the bed is at its reference position, or in equilibrium
        with the first ice and sea level (found by fixed-point iteration, since the
        ocean load depends on the deflection).
    interpolation : {"linear", "previous"}, default "linear"
        Ice and sea level between the given times: linear, or held at the earlier
        value. The load of a step uses the bed at its start (an explicit lag).
    max_step : float, optional
        Longest step (years): longer intervals of the history are split into equal
        sub-steps, so that floatation and the ocean load follow the moving bed more
        closely. Without an ocean the result does not depend on it (the steps are exact).
    edges, pad_factor, width_factor
        Padding; see :class:`gridflex.ResponseStepper`.
    elastic, elastic_youngs_modulus, elastic_poisson_ratio
        The instantaneous elastic half-space response of the Earth to the load change,
        added to the deflection (so the bed and the floatation move with it too); see
        :class:`gridflex.ResponseStepper`.
    progress : callable, optional
        Called as ``progress(done, total)`` after each time step.

    Returns
    -------
    xarray.Dataset
        ``deflection`` (m, positive down), ``uplift_rate`` (m/yr, positive up),
        ``bed_elevation`` (m), ``load`` (the stress change sigma − sigma_ref, Pa) and
        ``grounded`` (1 where ice rests on the bed), all (time, y, x), and the
        ``sea_level`` series; with ``elastic=True`` also ``elastic_deflection`` (m, the
        elastic part of ``deflection``).

    Raises
    ------
    InputError
        Invalid inputs, or a plate with a non-zero infill density.
    ConvergenceError
        The initial equilibrium iteration does not settle.
    """
    times, first, thickness = _check_ice(ice_thickness, bed)
    _check_plate(plate)
    initial = check_choice("initial", initial, INITIAL_STATES)
    step_limit = check_max_step("max_step", max_step, times)
    levels = _sea_level_series(sea_level, times)
    ref_level = check_number("reference_sea_level", reference_sea_level, unit="m")
    column = _IceColumn(
        np.asarray(bed.values, dtype=np.float64),
        thickness,
        levels,
        check_density("ice_density", ice_density),
        check_density("water_density", water_density),
        plate.gravity,
        _reference_field(reference_ice_thickness, first, "reference_ice_thickness"),
        ref_level,
    )
    nt, (ny, nx) = times.size, first.shape
    check_memory(
        ((5 if elastic is True else 4) * 8.0 + 1.0) * nt * ny * nx,
        f"deflection, uplift rate, bed and load for {nt} times of {ny} x {nx}",
    )
    zero = np.zeros((ny, nx))
    if edges == "infinite":
        warn_edge_load(column.largest_change())
    stepper = ResponseStepper(
        first,
        plate,
        model,
        mantle_viscosity,
        relaxation_time,
        load=column.load_at(0, zero),
        initial="rest",
        interpolation=interpolation,
        edges=edges,
        pad_factor=pad_factor,
        width_factor=width_factor,
        elastic=elastic,
        elastic_youngs_modulus=elastic_youngs_modulus,
        elastic_poisson_ratio=elastic_poisson_ratio,
    )
    w = zero
    if initial == "equilibrium":
        w = _initial_equilibrium(stepper, lambda w_: column.load_at(0, w_))
    out = _run_history(stepper, column, times, w, step_limit, progress)
    attrs = stepper.describe()
    attrs.update(
        {
            "ice_density": column.ice_density,
            "water_density": column.water_density,
            "reference_sea_level": ref_level,
            "reference_state": (
                "deflection is zero for the given bed with the reference ice and sea level"
            ),
            "initial_state": initial,
            "max_step": step_limit if step_limit is not None else "none",
        }
    )
    return _ice_dataset(first, times, column, out, plate, attrs)


def _check_ice(ice_thickness: Any, bed: Any) -> tuple[np.ndarray, xr.DataArray, np.ndarray]:
    """Times (years), the first grid and the thickness values (m) of the ice history."""
    times, first = check_history_grid(ice_thickness, "ice_thickness")
    check_grid(bed, "bed")
    check_same_grid(bed, first, "bed")
    thickness = np.asarray(ice_thickness.values, dtype=np.float64)
    if not np.all(np.isfinite(thickness)) or thickness.min() < 0:
        raise InputError(
            "ice_thickness must be finite and >= 0 m everywhere; where a file marks "
            "ice-free cells as missing, fill them with 0 first (e.g. .fillna(0))"
        )
    return times, first, thickness


def _check_plate(plate: Any) -> None:
    """A Plate with no infill: the ocean over depressed bedrock is added explicitly."""
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if plate.infill_density != 0.0:
        raise InputError(
            f"ice_response adds the ocean water over depressed bedrock itself; give a plate "
            f"with infill_density=0.0 (got {plate.infill_density!r})"
        )


@dataclass
class _IceColumn:
    """Ice and ocean on the bed through time: the load of any deflection (numpy, SI)."""

    bed: np.ndarray
    thickness: np.ndarray
    levels: np.ndarray
    ice_density: float
    water_density: float
    gravity: float
    reference_ice: np.ndarray
    reference_level: float
    reference_stress: np.ndarray = field(init=False)
    """sigma_ref (Pa) of the reference state, in which the deflection is zero."""

    def __post_init__(self) -> None:
        self.reference_stress = self.stress(self.reference_ice, self.reference_level, 0.0)

    def stress(self, ice: np.ndarray, level: float, w: np.ndarray | float) -> np.ndarray:
        """sigma (Pa) of *ice* (m) and sea *level* (m) on the bed moved down by *w* (m)."""
        return bed_stress(
            ice,
            self.bed - w,
            level,
            ice_density=self.ice_density,
            water_density=self.water_density,
            gravity=self.gravity,
        )

    def change(self, ice: np.ndarray, level: float, w: np.ndarray) -> np.ndarray:
        """sigma - sigma_ref (Pa), the load that drives the plate."""
        return self.stress(ice, level, w) - self.reference_stress

    def load_at(self, n: int, w: np.ndarray) -> np.ndarray:
        """The load (Pa) at the *n*-th time on the bed moved down by *w*."""
        return self.change(self.thickness[n], self.levels[n], w)

    def grounded(self, n: int, w: np.ndarray) -> np.ndarray:
        """Where the ice of the *n*-th time rests on the bed moved down by *w*."""
        return grounded_mask(
            self.thickness[n],
            self.bed - w,
            self.levels[n],
            ice_density=self.ice_density,
            water_density=self.water_density,
        )

    def largest_change(self) -> np.ndarray:
        """Largest change of the ice load in each cell, plus the sea-level change over
        what is ocean (Pa): what reaches the grid edge."""
        change = float(np.abs(self.levels - self.reference_level).max())
        ocean = self.bed < self.levels.max()
        ice_change = np.abs(self.thickness - self.reference_ice).max(axis=0)
        return self.gravity * (self.ice_density * ice_change + self.water_density * change * ocean)


def _advance_interval(
    stepper: ResponseStepper,
    column: _IceColumn,
    n: int,
    dt: float,
    parts: int,
    w: np.ndarray,
) -> np.ndarray:
    """Advance from the (*n*-1)-th to the *n*-th time in *parts* equal sub-steps."""
    for part in range(1, parts + 1):
        if stepper.interpolation == "linear":
            # ice and sea level at the end of the sub-step, on the bed of its start
            f = part / parts
            ice = column.thickness[n - 1] + f * (column.thickness[n] - column.thickness[n - 1])
            level = column.levels[n - 1] + f * (column.levels[n] - column.levels[n - 1])
            w = stepper.advance(dt / parts, column.change(ice, level, w)).values
            if part < parts:
                stepper.set_load(column.change(ice, level, w))
        else:
            # the earlier ice and sea level held, on the bed of the sub-step's start
            held = column.change(column.thickness[n - 1], column.levels[n - 1], w)
            w = stepper.advance(dt / parts, held).values
    return w


def _run_history(
    stepper: ResponseStepper,
    column: _IceColumn,
    times: np.ndarray,
    w: np.ndarray,
    step_limit: float | None,
    progress: Progress | None,
) -> dict[str, np.ndarray]:
    """The time loop: deflection, uplift rate, load and grounded mask at every time."""
    nt, (ny, nx) = times.size, w.shape
    out = {name: np.empty((nt, ny, nx)) for name in ("deflection", "uplift_rate", "load")}
    out["grounded"] = np.empty((nt, ny, nx), dtype=np.int8)
    if stepper.elastic:
        out["elastic_deflection"] = np.empty((nt, ny, nx))

    def record(n: int, w_now: np.ndarray) -> None:
        q_now = column.load_at(n, w_now)
        if stepper.elastic:  # the part in w_now, before the load is re-evaluated
            out["elastic_deflection"][n] = stepper.elastic_deflection.values
        out["deflection"][n] = w_now
        out["load"][n] = q_now
        out["uplift_rate"][n] = stepper.uplift_rate(q_now).values
        out["grounded"][n] = column.grounded(n, w_now)

    record(0, w)
    for n in range(1, nt):
        dt = times[n] - times[n - 1]
        parts = 1 if step_limit is None else max(1, math.ceil(dt / step_limit - 1e-9))
        w = _advance_interval(stepper, column, n, dt, parts, w)
        record(n, w)
        if progress is not None:
            progress(n, nt - 1)
    return out


_ICE_VARIABLES = {
    "bed_elevation": {"units": "m", "long_name": "bed elevation (positive up)"},
    "load": {
        "units": "Pa",
        "long_name": "change of the vertical stress of ice and ocean on the bed",
    },
    "grounded": {
        "long_name": "grounded ice",
        "flag_values": np.array([0, 1], dtype=np.int8),
        "flag_meanings": "not_grounded grounded",
    },
    "sea_level": {"units": "m", "long_name": "sea-level elevation"},
    "reference_load": {
        "units": "Pa",
        "long_name": "vertical stress of ice and ocean on the bed in the "
        "reference state (zero deflection)",
    },
}
"""Attributes of the variables of an :func:`ice_response` result besides the deflection
and the uplift rate."""


def _ice_dataset(
    first: xr.DataArray,
    times: np.ndarray,
    column: _IceColumn,
    out: dict[str, np.ndarray],
    plate: Plate,
    attrs: dict[str, Any],
) -> xr.Dataset:
    """Wrap the recorded history in a Dataset with provenance attributes."""
    coords = {
        "time": ("time", times, {"units": "years", "long_name": "time"}),
        "y": first["y"].variable,
        "x": first["x"].variable,
    }
    dims = ("time", "y", "x")
    meta = _ICE_VARIABLES
    data_vars = {
        "deflection": (dims, out["deflection"], deflection_attrs()),
        "uplift_rate": (dims, out["uplift_rate"], uplift_rate_attrs()),
        "bed_elevation": (dims, column.bed[None] - out["deflection"], meta["bed_elevation"]),
        "load": (dims, out["load"], meta["load"]),
        "grounded": (dims, out["grounded"], meta["grounded"]),
        "sea_level": ("time", column.levels, meta["sea_level"]),
        "reference_load": (("y", "x"), column.reference_stress, meta["reference_load"]),
    }
    if "elastic_deflection" in out:
        data_vars["elastic_deflection"] = (
            dims,
            out["elastic_deflection"],
            elastic_deflection_attrs(),
        )
    ds_attrs = provenance_attrs(
        plate.describe(), attrs, "bed deflection under an ice-thickness history"
    )
    return xr.Dataset(data_vars, coords=coords, attrs=ds_attrs)


def _initial_equilibrium(stepper: ResponseStepper, load_of: Any) -> np.ndarray:
    """Fixed point w = equilibrium(load(w)); the ocean term makes the load depend on w.

    Each iteration shrinks the error by about rho_w / rho_m (< 1/3 for water over
    mantle), so a few tens of iterations reach the tolerance.
    """
    w = np.zeros(stepper.deflection.shape)
    for iteration in range(1, _EQUILIBRIUM_MAX_ITER + 1):
        stepper.set_load(load_of(w))
        new = stepper.equilibrium().values
        change = float(np.abs(new - w).max())
        w = new
        if change <= _EQUILIBRIUM_TOL:
            stepper.set_load(load_of(w))
            log.info("initial equilibrium after %d iterations", iteration)
            return stepper.settle().values
    raise ConvergenceError(
        f"the initial equilibrium with the ocean load did not settle in "
        f"{_EQUILIBRIUM_MAX_ITER} iterations (last change {change:.3g} m)"
    )
