"""The bed's response to an ice-thickness history (ice, ocean and floatation).

The load is that of :class:`~gridflex.glacial.floatation.IceLoad` (PHYSICS.md section
7.1): sigma − sigma_ref with sigma = g max(rho_i H, rho_w max(z_sl − b, 0)), relative to a
reference state (bed ``bed``, ice ``reference_ice_thickness``, sea level
``reference_sea_level``) in which the deflection is zero. The bed moves with the plate,
b = bed − w, so floatation and the ocean over depressed bedrock are evaluated again at
every step from the current deflection (an explicit lag of one step). Every cell with its
bed below sea level and no grounded ice counts as ocean; closed basins are not told apart
from the sea. :func:`ice_response` runs the history through one
:class:`~gridflex.glacial.coupling.IceStepper`, so a coupled run gives the same numbers.
"""

from __future__ import annotations

import logging
import math
from typing import Any

import numpy as np
import xarray as xr

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import deflection_attrs
from gridflex.errors import ConvergenceError, InputError
from gridflex.glacial.coupling import BED_ATTRS, IceStepper, check_ice_plate
from gridflex.glacial.elastic import (
    EARTH_POISSON_RATIO,
    EARTH_YOUNGS_MODULUS,
    elastic_deflection_attrs,
)
from gridflex.glacial.floatation import ICE_DENSITY, bed_stress, grounded_mask
from gridflex.glacial.response import (
    INITIAL_STATES,
    check_history_grid,
    check_times,
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
from gridflex.validation import check_choice, check_flag, check_number

__all__ = [
    "MAX_STEPS",
    "PRESENT_DAY_MAX_ITERATIONS",
    "PRESENT_DAY_TOLERANCE",
    "bed_stress",
    "check_max_step",
    "check_output_times",
    "grounded_mask",
    "ice_response",
    "sea_level_at",
]

log = logging.getLogger(__name__)

ArrayLike = Any

PRESENT_DAY_TOLERANCE = 1e-9
"""Largest miss (m) of the final bed against the given present-day bed."""

PRESENT_DAY_MAX_ITERATIONS = 40
"""Most runs of the history when the reference bed is solved for."""

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
    output_times: ArrayLike | None = None,
    present_day: bool = False,
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
    output_times : array_like, optional
        Times (years) at which to record the result, within the history (refused
        otherwise); by default every time of the history. A time between two times of
        the history ends a step there (the ice in between as *interpolation* says), and
        only the recorded times cost an uplift-rate transform and memory.
    present_day : bool, default False
        *bed* is the bed at the last time (the observed present-day bed), not the
        reference bed: the reference bed is solved for by running the history again with
        the reference bed corrected by what the final bed misses, until it misses by at
        most :data:`PRESENT_DAY_TOLERANCE` (one correction suffices where no ocean or
        floating ice depends on the bed; each further run shrinks the miss by about
        rho_w / rho_m). The result adds ``reference_bed``.
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
    check_ice_plate(plate)
    initial = check_choice("initial", initial, INITIAL_STATES)
    step_limit = check_max_step("max_step", max_step, times)
    levels = _sea_level_series(sea_level, times)
    ref_level = check_number("reference_sea_level", reference_sea_level, unit="m")
    reference = _reference_field(reference_ice_thickness, first, "reference_ice_thickness")
    wanted = times if output_times is None else check_output_times(output_times, times)
    present_day = check_flag("present_day", present_day)
    (ny, nx) = first.shape
    check_memory(
        ((5 if elastic is True else 4) * 8.0 + 1.0) * wanted.size * ny * nx,
        f"deflection, uplift rate, bed and load for {wanted.size} times of {ny} x {nx}",
    )

    def build(reference_bed: xr.DataArray) -> IceStepper:
        return IceStepper(
            reference_bed,
            plate,
            model,
            mantle_viscosity,
            relaxation_time,
            ice_thickness=thickness[0],
            sea_level=float(levels[0]),
            reference_ice_thickness=reference,
            reference_sea_level=ref_level,
            ice_density=ice_density,
            water_density=water_density,
            initial=initial,
            interpolation=interpolation,
            edges=edges,
            pad_factor=pad_factor,
            width_factor=width_factor,
            elastic=elastic,
            elastic_youngs_modulus=elastic_youngs_modulus,
            elastic_poisson_ratio=elastic_poisson_ratio,
        )

    stepper = build(bed)
    if edges == "infinite":
        warn_edge_load(_largest_change(stepper, thickness, levels))
    out = _run_history(stepper, times, thickness, levels, wanted, step_limit, progress)
    attrs = stepper.describe()
    if present_day:
        # the given bed is the bed at the last time: correct the reference bed by what
        # the run's final bed misses (a fixed point; without ocean one correction is exact)
        given = np.asarray(bed.values, dtype=np.float64)
        for iteration in range(1, PRESENT_DAY_MAX_ITERATIONS + 1):
            miss = given - stepper.bed_elevation.values
            largest = float(np.abs(miss).max())
            log.info("present-day bed: run %d misses by %.3g m", iteration, largest)
            if largest <= PRESENT_DAY_TOLERANCE:
                break
            stepper = build(bed.copy(data=stepper.rule.bed + miss))
            out = _run_history(stepper, times, thickness, levels, wanted, step_limit, progress)
        else:
            raise ConvergenceError(
                f"present_day: the reference bed did not settle in {PRESENT_DAY_MAX_ITERATIONS} "
                f"runs (the final bed still misses the given bed by {largest:.3g} m)"
            )
        attrs.update(
            {
                "present_day": "the given bed is the bed at the last time",
                "present_day_runs": iteration,
                "present_day_misfit": largest,
            }
        )
    attrs.update(
        {
            "initial_state": initial,
            "max_step": step_limit if step_limit is not None else "none",
        }
    )
    out_ds = _ice_dataset(first, wanted, stepper, out, plate, attrs)
    if present_day:
        out_ds["reference_bed"] = (
            ("y", "x"),
            stepper.rule.bed.copy(),
            _ICE_VARIABLES["reference_bed"],
        )
    return out_ds


def check_output_times(
    output_times: ArrayLike, times: np.ndarray, name: str = "output_times"
) -> np.ndarray:
    """*output_times* (years) checked against the history's *times*: increasing and
    within the history.

    Raises
    ------
    InputError
        Naming *name*, the first time outside the history and the history's span.
    """
    wanted = check_times(np.atleast_1d(np.asarray(output_times)), name)
    outside = (wanted < times[0] - SERIES_END_TOLERANCE) | (
        wanted > times[-1] + SERIES_END_TOLERANCE
    )
    if np.any(outside):
        raise InputError(
            f"{name}: {wanted[outside][0]:g} years lies outside the history "
            f"({times[0]:g} to {times[-1]:g} years); output times must lie within it"
        )
    return np.clip(wanted, times[0], times[-1])


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


def _largest_change(stepper: IceStepper, thickness: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """Largest change of the ice load in each cell, plus the sea-level change over what
    is ocean (Pa): what reaches the grid edge."""
    rule = stepper.rule
    change = float(np.abs(levels - stepper.reference_sea_level).max())
    ocean = rule.bed < levels.max()
    ice_change = np.abs(thickness - rule.reference_ice).max(axis=0)
    return rule.gravity * (rule.ice_density * ice_change + rule.water_density * change * ocean)


def _schedule(times: np.ndarray, wanted: np.ndarray, step_limit: float | None) -> np.ndarray:
    """Step ends (years): the history's times and the output times, each gap split into
    equal steps of at most *step_limit*."""
    ends = np.union1d(times, wanted)
    pieces = [ends[:1]]
    for a, b in zip(ends[:-1], ends[1:]):
        parts = 1 if step_limit is None else max(1, math.ceil((b - a) / step_limit - 1e-9))
        inner = a + (b - a) * np.arange(1, parts) / parts
        pieces.append(np.append(inner, b))
    return np.concatenate(pieces)


def _run_history(
    stepper: IceStepper,
    times: np.ndarray,
    thickness: np.ndarray,
    levels: np.ndarray,
    wanted: np.ndarray,
    step_limit: float | None,
    progress: Progress | None,
) -> dict[str, np.ndarray]:
    """The time loop: deflection, uplift rate, load, grounded mask and sea level at
    every wanted time."""
    nt, (ny, nx) = wanted.size, thickness.shape[1:]
    out: dict[str, np.ndarray] = {
        name: np.empty((nt, ny, nx)) for name in ("deflection", "uplift_rate", "load")
    }
    out["grounded"] = np.empty((nt, ny, nx), dtype=np.int8)
    out["sea_level"] = np.empty(nt)
    if stepper.elastic:
        out["elastic_deflection"] = np.empty((nt, ny, nx))
    recorded = 0

    def record(at: float) -> None:
        nonlocal recorded
        while recorded < nt and wanted[recorded] <= at:
            out["deflection"][recorded] = stepper.deflection.values
            out["load"][recorded] = stepper.load
            out["uplift_rate"][recorded] = stepper.uplift_rate().values
            out["grounded"][recorded] = stepper.grounded
            out["sea_level"][recorded] = float(np.mean(stepper.sea_level))
            if stepper.elastic:
                out["elastic_deflection"][recorded] = stepper.elastic_deflection.values
            recorded += 1

    ends = _schedule(times, wanted, step_limit)
    linear = stepper.stepper.interpolation == "linear"
    record(ends[0])
    for step, (start, end) in enumerate(zip(ends[:-1], ends[1:]), start=1):
        n = int(np.searchsorted(times, end))  # the history interval (n - 1, n)
        if end == times[n]:
            ice, level = thickness[n], levels[n]
        else:
            f = (end - times[n - 1]) / (times[n] - times[n - 1])
            ice = thickness[n - 1] + f * (thickness[n] - thickness[n - 1])
            level = levels[n - 1] + f * (levels[n] - levels[n - 1])
        # the history's ice and sea level were checked once (_check_ice, _sea_level_series)
        if linear:
            # ice and sea level at the end of the step, on the bed of its start
            stepper._advance(end - start, ice, float(level))
        else:
            # the earlier ice and sea level held, on the bed of the step's start
            stepper._advance(end - start, thickness[n - 1], float(levels[n - 1]))
            if end == times[n]:
                stepper.set_ice(thickness[n], float(levels[n]))
        record(end)
        if progress is not None:
            progress(step, ends.size - 1)
    return out


_ICE_VARIABLES = {
    "bed_elevation": BED_ATTRS,
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
    "reference_bed": {
        "units": "m",
        "long_name": "bed elevation of the reference state (zero deflection), solved so "
        "that the bed at the last time is the given bed",
    },
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
    stepper: IceStepper,
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
        "bed_elevation": (dims, stepper.rule.bed[None] - out["deflection"], meta["bed_elevation"]),
        "load": (dims, out["load"], meta["load"]),
        "grounded": (dims, out["grounded"], meta["grounded"]),
        "sea_level": ("time", out["sea_level"], meta["sea_level"]),
        "reference_load": (("y", "x"), stepper.rule.reference_stress, meta["reference_load"]),
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
