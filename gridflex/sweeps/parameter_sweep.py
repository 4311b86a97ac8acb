"""Parameter sweeps with dask: one flexure solve per combination of values.

Each combination of the swept values is one task running the spectral solve of
:func:`gridflex.solve`; tasks run on this machine's threads by default, or on an
existing :mod:`dask.distributed` cluster given its scheduler address. The
result is one :class:`xarray.Dataset` with a dimension per swept parameter.
"""

from __future__ import annotations

import dataclasses
import itertools
import logging
import math
import re
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from gridflex.engine import EDGES, check_edge_load, deflection_attrs
from gridflex.errors import InputError
from gridflex.grid import check_grid
from gridflex.io.provenance import provenance_attrs
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, SpectralProblem
from gridflex.validation import check_choice, check_number

__all__ = [
    "FORCE_PARAMETERS",
    "LOCAL_SCHEDULERS",
    "MEMBER_OVERHEAD",
    "PLATE_PARAMETERS",
    "check_scheduler",
    "run_tasks",
    "sweep",
]

log = logging.getLogger(__name__)

PLATE_PARAMETERS = (
    "te",
    "youngs_modulus",
    "poisson_ratio",
    "mantle_density",
    "infill_density",
    "gravity",
)
"""Swept names that are :class:`~gridflex.Plate` fields."""

FORCE_PARAMETERS = ("inplane_force", "inplane_force_x", "inplane_force_y")
"""Swept in-plane forces (N m⁻¹, tension positive); ``inplane_force`` sets both axes."""

LOCAL_SCHEDULERS = ("threads", "processes", "synchronous")
"""Local dask schedulers accepted by ``sweep(scheduler=...)``."""

_UNITS = {
    "te": "m",
    "youngs_modulus": "Pa",
    "poisson_ratio": "1",
    "mantle_density": "kg m-3",
    "infill_density": "kg m-3",
    "gravity": "m s-2",
    "inplane_force": "N m-1",
    "inplane_force_x": "N m-1",
    "inplane_force_y": "N m-1",
}

LoadLike = xr.DataArray | Callable[..., xr.DataArray]


def _check_values(name: str, values: Any) -> np.ndarray:
    """The swept values of *name* as a 1-D float array: finite numbers, none repeated."""
    items = np.atleast_1d(np.asarray(values, dtype=object))
    if items.ndim != 1 or items.size == 0:
        raise InputError(
            f"sweep values of {name!r} must be a non-empty list of finite numbers, got {values!r}"
        )
    array = np.array([check_number(f"sweep value of {name!r}", v) for v in items])
    if np.unique(array).size != array.size:
        raise InputError(f"sweep values of {name!r} repeat a value: {array.tolist()!r}")
    return array


def _split(
    combo: Mapping[str, float],
) -> tuple[dict[str, float], dict[str, float], dict[str, float]]:
    plate_kw = {k: v for k, v in combo.items() if k in PLATE_PARAMETERS}
    force_kw = {  # forces of every solve, replaced below by swept ones
        "inplane_force_x": combo.get("base_force_x", 0.0),
        "inplane_force_y": combo.get("base_force_y", 0.0),
    }
    if "inplane_force" in combo:
        force_kw = {
            "inplane_force_x": combo["inplane_force"],
            "inplane_force_y": combo["inplane_force"],
        }
    force_kw.update({k: v for k, v in combo.items() if k in ("inplane_force_x", "inplane_force_y")})
    skip = (*PLATE_PARAMETERS, *FORCE_PARAMETERS, "base_force_x", "base_force_y")
    load_kw = {k: v for k, v in combo.items() if k not in skip}
    return plate_kw, force_kw, load_kw


def _plate_for(plate: Plate, plate_kw: Mapping[str, float]) -> Plate:
    """*plate* with the swept fields replaced (validated again by Plate)."""
    return dataclasses.replace(plate, **plate_kw)


def _solve_one(
    load: LoadLike, plate: Plate, combo: dict[str, float], edges: str, pad_factor: float
) -> tuple[np.ndarray, float]:
    """One task: the deflection (m) and force-balance residual of one combination.

    The same spectral solve as :func:`gridflex.solve` for a constant te, without its
    warnings (they are given once, on the caller's side, by :func:`sweep`: warning
    filters are process-global and not safe to change from worker threads).
    """
    plate_kw, force_kw, load_kw = _split(combo)
    grid = load(**load_kw) if callable(load) and not isinstance(load, xr.DataArray) else load
    trial = _plate_for(plate, plate_kw)
    problem = SpectralProblem.build(
        check_grid(grid),
        float(trial.rigidity),
        trial.restoring_stiffness,
        force_kw["inplane_force_x"],
        force_kw["inplane_force_y"],
        periodic=(edges == "periodic"),
        pad_factor=pad_factor,
    )
    return problem.deflection(np.asarray(grid.values, dtype=np.float64))


_ADDRESS = re.compile(
    r"(?:(?:tcp|tls|inproc|ucx|ws|wss)://[^\s/]+|[A-Za-z0-9_.\-]+:\d{1,5}|\[[0-9A-Fa-f:]+\]:\d{1,5})/?"
)
"""A dask scheduler address: ``protocol://host[:port]`` or ``host:port``."""

MEMBER_OVERHEAD = 4096
"""Bytes per sweep member (a dask task, its parameters and its result record), besides
its deflection grid: the memory estimate counts both before any member is built."""
_FEWER_MEMBERS = "sweep fewer values (the number of members is the product of the list lengths)"


def check_scheduler(name: str, scheduler: Any) -> Any:
    """*scheduler* if it is None, a local scheduler name, an address or a Client.

    The form is checked before any work (an address is only tried when the sweep runs).

    Raises
    ------
    InputError
        Naming *name* (``"scheduler"``, ``"--scheduler"`` or a scenario key) and the value.
    """
    if scheduler is None or (isinstance(scheduler, str) and scheduler in LOCAL_SCHEDULERS):
        return scheduler
    if isinstance(scheduler, str) and _ADDRESS.fullmatch(scheduler):
        return scheduler
    if type(scheduler).__name__ == "Client" and hasattr(scheduler, "compute"):
        return scheduler  # a connected distributed.Client
    raise InputError(
        f"{name} must be one of {', '.join(map(repr, LOCAL_SCHEDULERS))}, a dask scheduler "
        f"address such as 'tcp://host:8786' or a distributed.Client; got {scheduler!r}"
    )


def _client_for(scheduler: Any) -> Any:
    """A dask.distributed Client for an address or Client; None for a local scheduler."""
    check_scheduler("scheduler", scheduler)
    if scheduler is None or scheduler in LOCAL_SCHEDULERS:
        return None
    try:
        import distributed
    except ImportError as exc:  # pragma: no cover - optional dependency
        raise InputError(
            f"scheduler {scheduler!r} needs dask.distributed; install gridflex[sweep]"
        ) from exc
    if isinstance(scheduler, distributed.Client):
        return scheduler
    if isinstance(scheduler, str):
        try:
            return distributed.Client(scheduler, timeout="5s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(
                f"scheduler: cannot reach a dask scheduler at {scheduler!r} ({exc})"
            ) from exc
    raise InputError(
        f"scheduler must be None, one of {', '.join(map(repr, LOCAL_SCHEDULERS))}, a "
        f"scheduler address such as 'tcp://host:8786' or a distributed.Client; got {scheduler!r}"
    )


def run_tasks(tasks: list[Any], scheduler: Any, progress: Progress | None) -> list[Any]:
    """Compute dask *tasks* on *scheduler* (see :func:`sweep`), reporting each one done
    through *progress*; the results in the order of *tasks*. Tasks with the same key
    (pure calls with equal arguments) are computed and counted once."""
    import dask
    from dask.callbacks import Callback

    unique = list({task.key: task for task in tasks}.values())
    if len(unique) < len(tasks):
        found = dict(
            zip((t.key for t in unique), run_tasks(unique, scheduler, progress), strict=True)
        )
        return [found[task.key] for task in tasks]
    total = len(tasks)
    client = _client_for(scheduler)
    if client is not None:
        import distributed

        futures = client.compute(tasks)
        for done, _ in enumerate(distributed.as_completed(futures, loop=client.loop), start=1):
            if progress is not None:
                progress(done, total)
        results = client.gather(futures)
        if client is not scheduler:
            client.close()
        return list(results)

    keys = {task.key for task in tasks}

    class _Count(Callback):
        done = 0

        def _posttask(  # noqa: ARG002
            self, key: Any, result: Any, dsk: Any, state: Any, worker_id: Any
        ) -> None:
            if key in keys:
                _Count.done += 1
                if progress is not None:
                    progress(_Count.done, total)

    with _Count():
        return list(dask.compute(*tasks, scheduler=scheduler or "threads"))


def _check_parameters(
    load: Any, plate: Any, parameters: Any
) -> tuple[list[str], dict[str, np.ndarray]]:
    """The swept names, in order, and their checked values."""
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if not isinstance(parameters, Mapping) or not parameters:
        raise InputError(
            f"parameters must be a non-empty mapping of name to values, got {parameters!r}"
        )
    load_is_grid = isinstance(load, xr.DataArray)
    if not load_is_grid and not callable(load):
        raise InputError(f"load must be a DataArray or a callable, got {type(load).__name__}")
    known = PLATE_PARAMETERS + FORCE_PARAMETERS
    for name in parameters:
        if load_is_grid and name not in known:
            raise InputError(
                f"cannot sweep {name!r}: allowed are {', '.join(known)} "
                "(other names need a load function)"
            )
    if "inplane_force" in parameters and (
        "inplane_force_x" in parameters or "inplane_force_y" in parameters
    ):
        raise InputError(
            "sweep either 'inplane_force' or 'inplane_force_x'/'inplane_force_y', not both"
        )
    names = list(parameters)
    if plate.is_variable and "te" not in names:
        raise InputError("sweeps need a constant te: the plate has a te grid and te is not swept")
    return names, {name: _check_values(name, parameters[name]) for name in names}


def _sweep_attrs(
    plate: Plate, names: list[str], edges: str, pad_factor: float, forces: tuple[float, float]
) -> dict[str, Any]:
    """Global attributes: the provenance stamp, the sweep, and the base plate's unswept values."""
    derived = ("rigidity", "flexural_parameter") if set(names) & set(PLATE_PARAMETERS) else ()
    plate_parameters = {
        k: v for k, v in plate.describe().items() if k not in names and k not in derived
    }
    attrs: dict[str, Any] = {
        "swept_parameters": " ".join(names),
        "edges": edges,
        "pad_factor": float(pad_factor),
    }
    if not set(names) & set(FORCE_PARAMETERS):
        attrs.update({"inplane_force_x": forces[0], "inplane_force_y": forces[1]})
    return provenance_attrs(
        plate_parameters, attrs, title="thin elastic plate flexure, parameter sweep"
    )


def sweep(
    load: LoadLike,
    plate: Plate,
    parameters: Mapping[str, Sequence[float]],
    *,
    scheduler: Any = None,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    inplane_force_x: float = 0.0,
    inplane_force_y: float = 0.0,
    progress: Progress | None = None,
) -> xr.Dataset:
    """Solve the flexure for every combination of swept parameter values.

    Parameters
    ----------
    load : xarray.DataArray or callable
        The load q (Pa, positive down) on dims ``("y", "x")``, or a function that
        returns it when called with the swept parameters that are not plate
        fields or forces as keyword arguments (e.g. ``load_density``); for a
        cluster it must be picklable.
    plate : Plate
        The base plate; swept plate fields replace its values.
    parameters : mapping of str to sequence of float
        Swept values per name, in SI units: plate fields
        (:data:`PLATE_PARAMETERS`), in-plane forces (:data:`FORCE_PARAMETERS`,
        N m⁻¹, tension positive) or keywords of a *load* function. The mapping's
        order is the order of the output dimensions.
    scheduler : None, str or distributed.Client, optional
        None or ``"threads"``: this machine's threads; ``"processes"`` or
        ``"synchronous"``: the other local dask schedulers; an address such as
        ``"tcp://10.0.0.5:8786"``: an existing dask.distributed scheduler; or a
        connected ``distributed.Client``.
    edges, pad_factor
        As in :func:`gridflex.solve`.
    inplane_force_x, inplane_force_y : float, default 0
        In-plane forces (N m⁻¹, tension positive) of every solve, unless swept.
    progress : callable, optional
        Called as ``progress(done, total)`` as solves finish.

    Returns
    -------
    xarray.Dataset
        ``deflection`` (m, positive down) with dims ``(*parameters, "y", "x")``
        and ``force_balance_residual`` with dims ``(*parameters)``; one coordinate
        per swept parameter; attributes record the base plate and the sweep.

    Raises
    ------
    InputError
        Unknown parameter names, bad values, an invalid plate for some
        combination, an unreachable scheduler, or a result too large for memory.
    """
    import dask

    names, values = _check_parameters(load, plate, parameters)
    check_scheduler("scheduler", scheduler)
    shape = tuple(values[name].size for name in names)
    members = math.prod(shape)  # a Python int: counted before any member is built
    cells = load.size if isinstance(load, xr.DataArray) else 0  # a function's: below
    check_memory(
        members * (MEMBER_OVERHEAD + 2 * 8 * cells),
        f"sweep of {members} members ({' x '.join(map(str, shape))})",
        advice=_FEWER_MEMBERS,
    )
    combos = [
        dict(zip(names, map(float, c), strict=True)) for c in itertools.product(*values.values())
    ]
    for combo in combos:  # fail early, on the client, for an invalid plate
        _plate_for(plate, _split(combo)[0])
    edges = check_choice("edges", edges, EDGES)
    template = load if isinstance(load, xr.DataArray) else load(**_split(combos[0])[2])
    spec = check_grid(template)
    if edges == "infinite":
        grid_values = np.asarray(template.values, dtype=np.float64)
        check_edge_load(grid_values, float(np.abs(grid_values).sum()))
    check_memory(
        members * (MEMBER_OVERHEAD + 2 * 8 * spec.ny * spec.nx),
        f"sweep of {members} members ({' x '.join(map(str, shape))}) on grids of "
        f"{spec.ny} x {spec.nx}",
        advice=_FEWER_MEMBERS,
    )
    shared = dask.delayed(load, pure=True) if isinstance(load, xr.DataArray) else load
    one = dask.delayed(_solve_one, pure=True)
    forces = (float(inplane_force_x), float(inplane_force_y))
    base = {"base_force_x": forces[0], "base_force_y": forces[1]}
    tasks = [one(shared, plate, {**base, **combo}, edges, pad_factor) for combo in combos]
    log.info("sweep: %d solves of %s over %s", len(tasks), spec.shape, names)
    results = run_tasks(tasks, scheduler, progress)

    deflection = np.stack([r[0] for r in results]).reshape(shape + spec.shape)
    balance = np.array([r[1] for r in results]).reshape(shape)
    coords: dict[str, Any] = {
        name: (name, values[name], {"units": _UNITS.get(name, ""), "long_name": f"swept {name}"})
        for name in names
    }
    coords.update({"y": template["y"].variable, "x": template["x"].variable})
    return xr.Dataset(
        {
            "deflection": ((*names, "y", "x"), deflection, deflection_attrs()),
            "force_balance_residual": (tuple(names), balance, {"units": "1"}),
        },
        coords=coords,
        attrs=_sweep_attrs(plate, names, edges, pad_factor, forces),
    )
