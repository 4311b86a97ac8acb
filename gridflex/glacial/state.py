"""Saving a time stepper to NetCDF and restoring it, so that a run continues bit for bit.

File format (version 2), written atomically through :func:`gridflex.io.netcdf.write_netcdf`:

* global attribute ``gridflex_state``: the class saved (``"ResponseStepper"`` or
  ``"IceStepper"``), ``gridflex_state_version`` = 2;
* every setting of the stepper as a global attribute named like its argument (``model``,
  ``mantle_viscosity`` in Pa s, ``relaxation_time`` in years, ``initial``,
  ``interpolation``, ``edges``, ``pad_factor``, ``width_factor``, ``elastic`` (0 or 1),
  ``elastic_youngs_modulus`` in Pa, ``elastic_poisson_ratio``) and ``time`` (years since
  the start);
* the plate as attributes ``plate_<field>`` (:class:`gridflex.Plate`'s fields, SI units);
  ``plate_te`` is a number of metres, or ``"grid"`` with the te grid in the variable
  ``plate_te`` on ``(y, x)``;
* the grid's ``y`` and ``x`` coordinates (m);
* the state of the time-stepping engine: ``engine`` names it (``"SpectralRelaxation"``
  or ``"VariableRelaxation"``); its arrays are variables ``engine_<name>`` (complex
  spectra split into ``engine_<name>_real`` and ``engine_<name>_imag``), its counters
  attributes ``engine_<name>``;
* the far field of the half-space (:class:`~gridflex.solvers.far_field.FarField`, present
  with padding) adds ``engine_far_state`` (its radial modes, m, on
  ``(engine_far_moment, engine_far_node)``) and ``engine_far_moments`` (the six moments
  of the load acting now, on ``(engine_far_moment,)``: net force, N; first moments along
  y and x, N m; the second moment's trace and its two quadrupole parts, N m², see
  :meth:`~gridflex.solvers.far_field.FarField.sums`; version 1 had only the first three);
* with ``elastic`` = 1 (the elastic Earth), ``elastic_now`` and ``elastic_before`` (m, on
  ``(y, x)``: the elastic displacement under the load acting now and at the start of the
  last step) and the attribute ``elastic_dt`` (that step, s);
* an ``IceStepper`` adds ``deflection`` (m, on ``(y, x)``: the deflection of the last step,
  on whose bed the next load is evaluated), with ``elastic`` = 1 ``elastic_deflection``
  (its elastic part), and ``bed``, ``reference_ice_thickness``, ``ice_thickness`` and
  ``sea_level`` (m, on ``(y, x)``: the reference bed, the reference ice and the ice and
  sea level acting now) and the attributes ``reference_sea_level`` (m),
  ``ice_density`` and ``water_density`` (kg m^-3).

Everything is float64, so a restored stepper holds exactly the numbers that were saved.
"""

from __future__ import annotations

from dataclasses import fields
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from gridflex.errors import InputError
from gridflex.io.netcdf import read_result, write_netcdf
from gridflex.plate import PLATE_PARAMETERS, Plate
from gridflex.solvers.far_field import FarField
from gridflex.solvers.variable_relaxation import VariableRelaxation
from gridflex.solvers.viscous import SpectralRelaxation

__all__ = [
    "ENGINE_FIELDS",
    "STATE_VERSION",
    "check_engine_fields",
    "engine_state",
    "plate_from_state",
    "plate_state",
    "read_state",
    "restore_engine",
    "write_state",
]

STATE_VERSION = 2
"""Version of the state file format written by :func:`write_state`."""

ENGINE_FIELDS: dict[type, tuple[frozenset[str], frozenset[str]]] = {
    SpectralRelaxation: (
        frozenset({"state", "load_spectrum", "far"}),
        frozenset(
            {"spec", "shape", "model", "interpolation", "transfer", "rates"}
            | {"_factors", "_scratch", "_rate_factors", "_spare", "_made", "_rows"}
        ),
    ),
    VariableRelaxation: (
        frozenset(
            {"load", "state", "solves", "iterations", "_equilibria", "_velocity"}
            | {"_step_solvers", "far", "_histories"}
        ),
        frozenset(
            {"spec", "model", "interpolation", "viscosity", "relaxation_time"}
            | {"equilibrium_solver", "max_substep", "tolerance", "_settings", "_inverse_viscous"}
            | {"_far_grid", "_far_basis", "_stiffness", "_far_cache"}
        ),
    ),
    FarField: (
        frozenset({"state", "moments"}),
        frozenset(
            {"nodes", "rates", "transfer", "hankel0", "hankel1", "hankel_trace", "hankel2"}
            | {"rows", "cols", "kernels"}
            | {"window", "offsets", "radial_step", "cell_area"}
        ),
    ),
}
"""Per engine class (and the far field an engine holds as ``far``): the fields that are
state (saved) and the ones rebuilt from the settings or caches (not saved). Every field
of the class must be in one of the two (a test checks it), so a field added later cannot
be forgotten silently."""


def plate_state(plate: Plate) -> tuple[dict[str, Any], dict[str, Any]]:
    """Attributes and variables (``plate_te`` for a te grid) of *plate*."""
    attrs: dict[str, Any] = {
        f"plate_{name}": float(getattr(plate, name)) for name in PLATE_PARAMETERS
    }
    variables: dict[str, Any] = {}
    if isinstance(plate.te, xr.DataArray):
        attrs["plate_te"] = "grid"
        variables["plate_te"] = (("y", "x"), np.asarray(plate.te.values, dtype=np.float64))
    else:
        attrs["plate_te"] = float(plate.te)
    return attrs, variables


def plate_from_state(ds: xr.Dataset, grid: xr.DataArray) -> Plate:
    """The :class:`Plate` saved by :func:`plate_state` (a te grid on *grid*'s grid)."""
    te: float | xr.DataArray
    if ds.attrs["plate_te"] == "grid":
        te = grid.copy(data=np.asarray(ds["plate_te"].values, dtype=np.float64))
    else:
        te = float(ds.attrs["plate_te"])
    return Plate(te, **{name: float(ds.attrs[f"plate_{name}"]) for name in PLATE_PARAMETERS})


def engine_state(engine: Any) -> tuple[dict[str, Any], dict[str, Any]]:
    """Attributes and variables holding the state of a time-stepping *engine*."""
    attrs: dict[str, Any] = {"engine": type(engine).__name__}
    variables: dict[str, Any] = {}

    def array(name: str, values: np.ndarray, dims: tuple[str, ...] | None = None) -> None:
        values = np.asarray(values)
        dims = dims or tuple(f"engine_{name}_{axis}" for axis in ("rows", "columns"))
        if np.iscomplexobj(values):
            variables[f"engine_{name}_real"] = (dims, np.ascontiguousarray(values.real))
            variables[f"engine_{name}_imag"] = (dims, np.ascontiguousarray(values.imag))
        else:
            variables[f"engine_{name}"] = (dims, np.asarray(values, dtype=np.float64))

    if isinstance(engine, SpectralRelaxation):
        array("state", engine.state, ("engine_ky", "engine_kx"))
        array("load_spectrum", engine.load_spectrum, ("engine_ky", "engine_kx"))
    elif isinstance(engine, VariableRelaxation):
        state_dims = ("y", "x") if engine.state.shape == engine.spec.shape else None
        array("state", engine.state, state_dims)
        array("load", engine.load, ("y", "x"))
        attrs["engine_solves"] = int(engine.solves)
        attrs["engine_iterations"] = int(engine.iterations)
        if engine._velocity is not None:
            array("velocity", engine._velocity)
        if engine._equilibria:
            loads = np.stack([load for load, _ in engine._equilibria])
            solutions = np.stack([w for _, w in engine._equilibria])
            variables["engine_equilibrium_loads"] = (("engine_equilibria", "y", "x"), loads)
            variables["engine_equilibrium_deflections"] = (
                ("engine_equilibria", "engine_solve_rows", "engine_solve_columns"),
                solutions,
            )
        steps = np.array(list(engine._step_solvers), dtype=np.float64)
        variables["engine_step_lengths"] = (("engine_step_lengths",), steps)
        kept = engine.kept_solutions()
        if kept:  # the solutions (and products) that start the next solves
            owners = np.array([key for key, h in kept for _ in h.solutions], dtype=np.float64)
            dims = ("engine_kept", "engine_solve_rows", "engine_solve_columns")
            variables["engine_kept_owner"] = (("engine_kept",), owners)
            for name in ("solutions", "products"):
                stacked = np.stack([a for _, h in kept for a in getattr(h, name)])
                variables[f"engine_kept_{name}"] = (dims, stacked)
    else:  # pragma: no cover - a new engine must be added here and to ENGINE_FIELDS
        raise TypeError(f"cannot save the state of a {type(engine).__name__}")
    if engine.far is not None:
        array("far_state", engine.far.state, ("engine_far_moment", "engine_far_node"))
        array("far_moments", engine.far.moments, ("engine_far_moment",))
    return attrs, variables


def _array(ds: xr.Dataset, name: str) -> np.ndarray:
    if f"engine_{name}_real" in ds.variables:
        out = np.empty(ds[f"engine_{name}_real"].shape, dtype=np.complex128)
        out.real = ds[f"engine_{name}_real"].values
        out.imag = ds[f"engine_{name}_imag"].values
        return out
    return np.array(ds[f"engine_{name}"].values, dtype=np.float64)


def restore_engine(engine: Any, ds: xr.Dataset, path: Path) -> None:
    """Put the state saved in *ds* into a freshly built *engine* of the same settings."""
    saved = ds.attrs.get("engine")
    if saved != type(engine).__name__:
        raise InputError(
            f"{path}: the state is of a {saved} engine but these settings build a "
            f"{type(engine).__name__}; the file does not match its own settings"
        )
    if isinstance(engine, SpectralRelaxation):
        for name in ("state", "load_spectrum"):
            value = _array(ds, name)
            current = getattr(engine, name)
            if value.shape != current.shape:
                raise InputError(
                    f"{path}: engine_{name} has shape {value.shape}, the settings give "
                    f"{current.shape}"
                )
            setattr(engine, name, np.ascontiguousarray(value))
        _restore_far(engine.far, ds, path)
        return
    assert isinstance(engine, VariableRelaxation)
    _restore_far(engine.far, ds, path)
    for h in ds["engine_step_lengths"].values:
        engine._step_solver(float(h))  # the same set-ups in the same order
    engine.state = _array(ds, "state")
    engine.load = _array(ds, "load")
    engine.solves = int(ds.attrs["engine_solves"])
    engine.iterations = int(ds.attrs["engine_iterations"])
    engine._velocity = _array(ds, "velocity") if "engine_velocity" in ds.variables else None
    engine._equilibria = []
    if "engine_equilibrium_loads" in ds.variables:
        loads = np.asarray(ds["engine_equilibrium_loads"].values, dtype=np.float64)
        solutions = np.asarray(ds["engine_equilibrium_deflections"].values, dtype=np.float64)
        engine._equilibria = [(loads[i].copy(), solutions[i].copy()) for i in range(len(loads))]
    if "engine_kept_owner" in ds.variables:
        owners = np.asarray(ds["engine_kept_owner"].values, dtype=np.float64)
        kept = [np.asarray(ds[f"engine_kept_{n}"].values) for n in ("solutions", "products")]
        for key in dict.fromkeys(owners.tolist()):  # in saved order
            mine = owners == key
            engine.keep_solutions(key, kept[0][mine], kept[1][mine])


def _restore_far(far: FarField | None, ds: xr.Dataset, path: Path) -> None:
    """Put the saved radial modes and moments into the engine's far field, if it has one."""
    saved = "engine_far_state" in ds.variables
    if far is None and not saved:
        return
    if far is None or not saved:
        raise InputError(
            f"{path}: the state {'has' if saved else 'lacks'} the half-space's far field "
            f"(engine_far_state) but these settings {'do not ' if far is None else ''}use one; "
            "the file does not match its own settings"
        )
    state, moments = _array(ds, "far_state"), _array(ds, "far_moments")
    if state.shape != far.state.shape or moments.shape != far.moments.shape:
        raise InputError(
            f"{path}: engine_far_state has shape {state.shape}, the settings give {far.state.shape}"
        )
    far.state, far.moments = state, moments


def check_engine_fields(engine_class: type) -> set[str]:
    """Fields of *engine_class* that :data:`ENGINE_FIELDS` does not classify."""
    state, derived = ENGINE_FIELDS[engine_class]
    return {f.name for f in fields(engine_class)} - state - derived


def write_state(
    path: str | Path,
    kind: str,
    attrs: dict[str, Any],
    variables: dict[str, Any],
    grid: xr.DataArray,
    overwrite: bool,
) -> Path:
    """Write a stepper's state file (see the module docstring) atomically."""
    coords = {"y": grid["y"].variable, "x": grid["x"].variable}
    ds = xr.Dataset(variables, coords=coords)
    ds.attrs = {"gridflex_state": kind, "gridflex_state_version": STATE_VERSION, **attrs}
    return write_netcdf(ds, path, overwrite)


def read_state(path: str | Path, kind: str) -> xr.Dataset:
    """Read a state file of a *kind* stepper.

    Raises
    ------
    InputError
        The file is missing, not NetCDF, not a gridflex stepper state, of another
        stepper or another format version; the message names the file.
    """
    ds = read_result(path)
    found = ds.attrs.get("gridflex_state")
    if found is None:
        raise InputError(
            f"{path}: not a gridflex stepper state (no 'gridflex_state' attribute); "
            f"give a file written by {kind}.save"
        )
    if found != kind:
        raise InputError(f"{path}: holds the state of a {found}, not of a {kind}")
    version = ds.attrs.get("gridflex_state_version")
    if version != STATE_VERSION:
        raise InputError(
            f"{path}: state format version {version!r}; this gridflex reads version {STATE_VERSION}"
        )
    return ds
