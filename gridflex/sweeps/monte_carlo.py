"""Ensembles on dask: flexure under uncertain parameters, summarised as maps.

:func:`ensemble` draws the elastic thickness (a number, or a factor on a te grid),
densities and the load's scale from stated distributions, solves every member and
returns the members' mean, standard deviation and quantiles of the deflection (and of
the moat fill and the gravity anomalies when asked), and the probability that the
deflection exceeds given depths.

Design (what is computed where):

* **Samples.** All parameter values are drawn up front, in the caller, from
  ``numpy.random.Generator(PCG64(seed))``, one parameter after another in the fixed
  order of :data:`ENSEMBLE_PARAMETERS`, by the inverse of each distribution's
  cumulative distribution (``ppf``) at uniform numbers: Latin hypercube sampling
  by default (one uniform number in each of *members* equal-probability strata, the
  strata shuffled; McKay, Beckman & Conover 1979, *Technometrics* 21, 239-245, from
  memory), plain random sampling on request. A member is then a deterministic
  function of its parameters, and the members are cut into chunks whose size
  depends only on the number of members and the grid, so the same seed gives the
  same numbers on any scheduler and any number of workers.
* **Reuse.** The response is linear in the load: a member's deflection is its load
  scale times the unit-scale response of its plate, and members whose plate repeats
  (a list of samples, or only the load scale drawn) share one solve within a chunk.
  For a constant te the load's spectrum is computed once, on the FFT grid padded for
  the stiffest member (more padding than :func:`gridflex.solve` gives the others is
  only more accurate); each member then costs one transfer function, one product
  and one inverse FFT (the inverse along x only of the rows kept).
* **Statistics.** Each chunk returns its count, mean and sum of squared deviations
  (Welford's update, member by member) and its counts of exceedance; the caller
  merges the chunks in order with the pairwise update of Chan, Golub & LeVeque
  (1983, *The American Statistician* 37, 242-247, from memory). The mean, standard
  deviation and exceedance maps therefore need a few grids per chunk (at most 16
  chunks), never members x grid.
  Quantiles need every member of a cell: the chunks also return their members in
  float32 (relative rounding 6e-8), and the quantiles are computed block of cells by
  block of cells (members x block cells at a time, sorted) with numpy's default (linear,
  Hyndman & Fan type 7) rule. That store (members x grid x 4 bytes per quantity) is
  estimated with :func:`gridflex.memory.check_memory` before any work and refused
  with advice when it cannot fit; ``quantiles=()`` skips it (then only the streaming
  statistics are kept).
"""

from __future__ import annotations

import dataclasses
import logging
import math
import os
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import scipy.fft
import xarray as xr

from gridflex.engine import EDGES, SPECTRAL_EDGES, check_edge_load, result_dataset
from gridflex.errors import InputError
from gridflex.gravity.anomalies import model_gravity
from gridflex.grid import GridSpec, check_grid, wavenumbers_squared
from gridflex.infill import Infill, solve_with_infill
from gridflex.io.provenance import provenance_attrs
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.finite_difference import (
    DEFAULT_MAX_ITERATIONS,
    DEFAULT_TOLERANCE,
    finite_difference_deflection,
)
from gridflex.solvers.row_blocks import for_row_blocks
from gridflex.solvers.spectral import (
    DEFAULT_PAD_FACTOR,
    SpectralProblem,
    decay_length,
)
from gridflex.sweeps.parameter_sweep import check_scheduler, run_tasks
from gridflex.validation import check_choice, check_integer, check_number

__all__ = [
    "DEFAULT_QUANTILES",
    "DISTRIBUTIONS",
    "ENSEMBLE_PARAMETERS",
    "PARAMETER_UNITS",
    "SAMPLINGS",
    "distribution",
    "draw_samples",
    "ensemble",
]

log = logging.getLogger(__name__)

PLATE_FIELDS = ("te", "youngs_modulus", "mantle_density", "infill_density", "crust_density")
"""Drawn names that are :class:`~gridflex.Plate` fields (te: a factor on a te grid)."""

INFILL_FIELDS = ("water_density", "sediment_density")
"""Drawn names that are :class:`~gridflex.Infill` fields (need ``infill=``)."""

ENSEMBLE_PARAMETERS = (*PLATE_FIELDS, *INFILL_FIELDS, "load_scale")
"""Names ``spread`` may hold, in the order they are drawn."""

PARAMETER_UNITS = {
    "te": "m",
    "youngs_modulus": "Pa",
    "mantle_density": "kg m-3",
    "infill_density": "kg m-3",
    "crust_density": "kg m-3",
    "water_density": "kg m-3",
    "sediment_density": "kg m-3",
    "load_scale": "1",
}
"""Units of the drawn values (te is a dimensionless factor on a te grid)."""

SAMPLINGS = ("latin_hypercube", "random")
"""Accepted values of ``ensemble(sampling=...)``."""

DEFAULT_QUANTILES = (0.05, 0.5, 0.95)
"""Quantiles (probabilities) of every quantity, by default."""

_CHUNKS = 16
"""Members are cut into at most this many chunks (tasks), whatever the workers."""

_CHUNK_BYTES = 64 * 2**20
"""Bytes of the members gathered at a time for the quantiles."""

_UNITS = {
    "deflection": "m",
    "moat_fill": "m",
    "free_air_anomaly": "mGal",
    "bouguer_anomaly": "mGal",
}
_ADVICE = (
    "use fewer members, a coarser grid, or quantiles=() (the mean, standard deviation "
    "and exceedance maps are then computed chunk by chunk without keeping the members)"
)


DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "std"),
    "truncated_normal": ("mean", "std", "low", "high"),
    "uniform": ("low", "high"),
    "triangular": ("low", "mode", "high"),
    "lognormal": ("median", "sigma"),
}
"""Distributions by name (scenario files) and their arguments: all in the parameter's
unit, except ``sigma`` of ``lognormal`` (the standard deviation of its logarithm)."""


def distribution(name: Any, where: str = "distribution", **arguments: float) -> Any:
    """A frozen ``scipy.stats`` distribution from a name and plain arguments.

    Parameters
    ----------
    name : str
        One of :data:`DISTRIBUTIONS`.
    where : str
        What to name in messages (e.g. a scenario key).
    **arguments : float
        The arguments :data:`DISTRIBUTIONS` lists for *name* (SI units).

    Raises
    ------
    InputError
        Unknown name, missing or unknown arguments, or values that give no distribution.

    Examples
    --------
    >>> float(distribution("normal", mean=30e3, std=5e3).std())
    5000.0
    """
    import scipy.stats

    name = check_choice(f"{where} distribution", name, tuple(DISTRIBUTIONS))
    wanted = DISTRIBUTIONS[name]
    if set(arguments) != set(wanted):
        raise InputError(
            f"{where}: a {name} distribution takes {', '.join(wanted)}; got "
            f"{', '.join(sorted(arguments)) or 'nothing'}"
        )
    a = {k: check_number(f"{where} {k}", v) for k, v in arguments.items()}
    positive = {"std", "sigma", "median"} & set(a)
    for key in sorted(positive):
        if not a[key] > 0:
            raise InputError(f"{where} {key} must be > 0, got {arguments[key]!r}")
    if "low" in a and "high" in a and not a["low"] < a["high"]:
        raise InputError(f"{where}: low must be below high, got {a['low']!r} and {a['high']!r}")
    if name == "normal":
        return scipy.stats.norm(a["mean"], a["std"])
    if name == "truncated_normal":
        low, high = (a["low"] - a["mean"]) / a["std"], (a["high"] - a["mean"]) / a["std"]
        return scipy.stats.truncnorm(low, high, loc=a["mean"], scale=a["std"])
    if name == "uniform":
        return scipy.stats.uniform(a["low"], a["high"] - a["low"])
    if name == "triangular":
        if not a["low"] <= a["mode"] <= a["high"]:
            raise InputError(f"{where}: mode must lie between low and high, got {a['mode']!r}")
        width = a["high"] - a["low"]
        return scipy.stats.triang((a["mode"] - a["low"]) / width, loc=a["low"], scale=width)
    return scipy.stats.lognorm(a["sigma"], scale=a["median"])


def _uniforms(rng: np.random.Generator, members: int, sampling: str) -> np.ndarray:
    """*members* numbers in (0, 1): one per stratum, strata shuffled (Latin hypercube),
    or independent."""
    if sampling == "random":
        u = rng.random(members)
    else:
        u = (rng.permutation(members) + rng.random(members)) / members
    return np.clip(u, np.finfo(float).tiny, 1.0 - np.finfo(float).eps)


def _check_distribution(name: str, given: Any) -> Any:
    """A frozen scipy.stats distribution, or the samples of a list as a float array."""
    where = f"spread[{name!r}]"
    if hasattr(given, "ppf") and hasattr(given, "dist") and callable(given.ppf):
        try:
            probe = np.asarray(given.ppf(np.array([0.25, 0.5, 0.75])), dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InputError(f"{where}: the distribution {given!r} cannot be evaluated") from exc
        if probe.shape != (3,) or not np.all(np.isfinite(probe)):
            raise InputError(
                f"{where}: {_describe(given)} is not a univariate distribution with finite "
                "quantiles (check its parameters)"
            )
        return given
    if isinstance(given, (str, bytes, Mapping)) or not isinstance(given, (Sequence, np.ndarray)):
        raise InputError(
            f"{where} must be a frozen scipy.stats distribution (e.g. scipy.stats.norm(30e3, "
            f"5e3)) or a non-empty list of sample values, got {given!r}"
        )
    items = list(np.asarray(given, dtype=object).ravel())
    if not items:
        raise InputError(f"{where}: the list of samples is empty")
    return np.sort(np.array([check_number(f"{where} sample", v) for v in items]))


def _describe(distribution: Any) -> str:
    """A frozen distribution or a list of samples, in words (for attributes)."""
    if isinstance(distribution, np.ndarray):
        return f"{distribution.size} samples, drawn with equal probability"
    args = ", ".join(
        [f"{a:g}" if isinstance(a, float) else repr(a) for a in distribution.args]
        + [f"{k}={v!r}" for k, v in distribution.kwds.items()]
    )
    return f"scipy.stats.{distribution.dist.name}({args})"


def _checked_spread(spread: Any) -> dict[str, Any]:
    """Name to checked distribution (or sorted samples), in the order given."""
    if not isinstance(spread, Mapping) or not spread:
        raise InputError(
            f"spread must be a non-empty mapping of parameter name to a distribution, "
            f"got {spread!r}"
        )
    for name in spread:
        if name not in ENSEMBLE_PARAMETERS:
            raise InputError(
                f"spread: unknown parameter {name!r}; allowed are {', '.join(ENSEMBLE_PARAMETERS)}"
            )
    return {name: _check_distribution(name, spread[name]) for name in spread}


def draw_samples(
    spread: Mapping[str, Any], members: int, seed: int, sampling: str = "latin_hypercube"
) -> dict[str, np.ndarray]:
    """The values of every drawn parameter for every member.

    Parameters
    ----------
    spread : mapping of str to distribution or list
        As in :func:`ensemble`.
    members : int
        Number of members (>= 2).
    seed : int
        Seed of ``numpy.random.default_rng``.
    sampling : {"latin_hypercube", "random"}
        Stratified or plain sampling (module docstring).

    Returns
    -------
    dict of str to numpy.ndarray
        Name to *members* float64 values, in the order of :data:`ENSEMBLE_PARAMETERS`.

    Raises
    ------
    InputError
        An unknown name or a value that is neither a distribution nor a list of numbers
        (the message names the key).

    Examples
    --------
    >>> import scipy.stats
    >>> te = draw_samples({"te": scipy.stats.norm(30e3, 5e3)}, 4, seed=1)["te"]
    >>> te.shape
    (4,)
    """
    distributions = _checked_spread(spread)
    members = check_integer("members", members, minimum=2)
    seed = check_integer("seed", seed, minimum=0)
    sampling = check_choice("sampling", sampling, SAMPLINGS)
    rng = np.random.default_rng(seed)
    out: dict[str, np.ndarray] = {}
    for name in ENSEMBLE_PARAMETERS:
        if name not in distributions:
            continue
        u = _uniforms(rng, members, sampling)
        given = distributions[name]
        if isinstance(given, np.ndarray):  # equal probability for each listed sample
            values = given[np.minimum((u * given.size).astype(np.int64), given.size - 1)]
        else:
            values = np.asarray(given.ppf(u), dtype=np.float64)
        if values.shape != (members,) or not np.all(np.isfinite(values)):
            raise InputError(f"spread[{name!r}]: the distribution gave values that are not finite")
        out[name] = values
    return out


@dataclasses.dataclass(frozen=True)
class _Job:
    """What every chunk of members shares (picklable: it travels to dask workers)."""

    path: str
    """"spectral", "finite-difference" or "infill"."""
    load: xr.DataArray | xr.Dataset
    plate: Plate
    infill: Infill | None
    initial_surface: xr.DataArray | float | None
    gravity: dict[str, Any] | None
    quantities: tuple[str, ...]
    thresholds: np.ndarray
    keep_members: bool
    edges: str
    pad_factor: float
    tolerance: float
    max_iterations: int
    method: str
    problem: SpectralProblem | None = None
    spectrum: np.ndarray | None = None
    biharmonic: np.ndarray | None = None
    """k^4 = (kx^2 + ky^2)^2 (rad^4 m^-4) on the half spectrum of *problem*."""

    @property
    def q(self) -> xr.DataArray:
        return self.load["load"] if isinstance(self.load, xr.Dataset) else self.load


def _member_plate(job: _Job, params: Mapping[str, float]) -> Plate:
    """The plate of one member: drawn fields replace the base plate's (validated)."""
    fields: dict[str, Any] = {k: v for k, v in params.items() if k in PLATE_FIELDS}
    if "te" in fields and job.plate.is_variable:
        assert isinstance(job.plate.te, xr.DataArray)
        fields["te"] = job.plate.te * fields["te"]
    return dataclasses.replace(job.plate, **fields)


def _member_infill(job: _Job, params: Mapping[str, float]) -> Infill | None:
    fields: dict[str, Any] = {k: v for k, v in params.items() if k in INFILL_FIELDS}
    if job.infill is None or not fields:
        return job.infill
    return dataclasses.replace(job.infill, **fields)


def _unit_deflection(job: _Job, plate: Plate, work: dict[str, np.ndarray]) -> np.ndarray:
    """Deflection (m) of *plate* under the unscaled load, plain solve."""
    values = np.asarray(job.q.values, dtype=np.float64)
    spec = check_grid(job.q)
    if job.path == "spectral":
        assert job.problem is not None and job.spectrum is not None
        assert job.biharmonic is not None
        # W = Q / (D k^4 + (rho_m - rho_f) g), the symbol of transfer_function without
        # in-plane forces, fused into two passes over buffers kept for the whole chunk
        # (fresh memory costs about as much as the arithmetic here)
        if "symbol" not in work:
            work["symbol"] = np.empty(job.biharmonic.shape)
            work["product"] = np.empty(job.spectrum.shape, dtype=np.complex128)
        symbol, product = work["symbol"], work["product"]
        np.multiply(job.biharmonic, float(plate.rigidity), out=symbol)
        symbol += plate.restoring_stiffness
        pairs = job.spectrum.view(np.float64).reshape(*job.spectrum.shape, 2)
        np.divide(pairs, symbol[..., None], out=product.view(np.float64).reshape(pairs.shape))
        columns = scipy.fft.ifft(product, axis=0, workers=-1, overwrite_x=True)
        rows = scipy.fft.irfft(columns[: spec.ny], n=job.problem.shape[1], axis=1, workers=-1)
        return np.ascontiguousarray(rows[:, : spec.nx])
    w, _ = finite_difference_deflection(
        values,
        spec,
        plate.rigidity_grid(spec.shape),
        plate.restoring_stiffness,
        plate.poisson_ratio,
        job.edges,
        pad_factor=job.pad_factor,
        tolerance=job.tolerance,
        max_iterations=job.max_iterations,
    )
    return w


def _scaled_load(job: _Job, scale: float) -> xr.DataArray | xr.Dataset:
    if scale == 1.0:
        return job.load
    if isinstance(job.load, xr.Dataset):
        out = job.load.copy()
        out["load"] = job.load["load"] * scale
        return out
    return job.load * scale


def _gravity_options(job: _Job, scale: float) -> dict[str, Any]:
    """model_gravity's options for a member: the load density scaled with the load."""
    assert job.gravity is not None
    options = dict(job.gravity)
    if scale != 1.0:
        density = options.get("load_density")
        if density is None and isinstance(job.load, xr.Dataset):
            density = job.load.attrs.get("load_density")
        if density is not None:
            options["load_density"] = float(density) * scale
    return options


def _member(
    job: _Job,
    params: Mapping[str, float],
    cache: dict[tuple[float, ...], Any],
    work: dict[str, np.ndarray],
) -> np.ndarray:
    """The quantities (len(job.quantities), ny, nx) of one member."""
    scale = float(params.get("load_scale", 1.0))
    plate = _member_plate(job, params)
    fields: dict[str, np.ndarray] = {}
    if job.path == "infill":
        key = tuple(params.values())
        if key not in cache:
            cache.clear()  # members rarely repeat all values: keep one
            cache[key] = solve_with_infill(
                _scaled_load(job, scale),
                plate,
                job.initial_surface,
                _member_infill(job, params),
                method=job.method,
                edges=job.edges,
                pad_factor=job.pad_factor,
            )
        result = cache[key]
        fields["deflection"] = np.asarray(result["deflection"].values)
        fields["moat_fill"] = np.asarray(result["moat_fill"].values)
    else:
        key = tuple(v for k, v in params.items() if k != "load_scale")
        if key not in cache:
            cache[key] = _unit_deflection(job, plate, work)
        fields["deflection"] = scale * cache[key]
        result = None
    if job.gravity is not None:
        if result is None:
            load = _scaled_load(job, scale)
            q = load["load"] if isinstance(load, xr.Dataset) else load
            result = result_dataset(q, fields["deflection"], plate, {})
            if isinstance(load, xr.Dataset):
                for name in ("reference_surface", "load_height", "initial_surface"):
                    if name in load:
                        result[name] = load[name]
                if "load_density" in load.attrs:
                    result.attrs["load_density"] = load.attrs["load_density"]
        anomalies = model_gravity(result, **_gravity_options(job, scale))
        fields["free_air_anomaly"] = np.asarray(anomalies["free_air_anomaly"].values)
        fields["bouguer_anomaly"] = np.asarray(anomalies["bouguer_anomaly"].values)
    return np.stack([fields[name] for name in job.quantities])


@dataclasses.dataclass
class _Moments:
    """Count, mean and sum of squared deviations of a set of members (per cell)."""

    count: int
    mean: np.ndarray
    m2: np.ndarray
    exceed: np.ndarray
    """Members deeper than each threshold, (thresholds, ny, nx), int64."""

    def add(self, values: np.ndarray, thresholds: np.ndarray) -> None:
        """Add one member (Welford 1962, *Technometrics* 4, 419-420, from memory)."""
        self.count += 1
        delta = values - self.mean
        self.mean += delta / self.count
        delta *= values - self.mean
        self.m2 += delta
        for i, threshold in enumerate(thresholds):
            self.exceed[i] += values[0] > threshold

    def merge(self, other: _Moments) -> _Moments:
        """Both sets together (Chan, Golub & LeVeque 1983)."""
        n = self.count + other.count
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.count / n)
        m2 = self.m2 + other.m2 + delta**2 * (self.count * other.count / n)
        return _Moments(n, mean, m2, self.exceed + other.exceed)


def _chunk(job: _Job, samples: dict[str, np.ndarray]) -> tuple[_Moments, np.ndarray | None]:
    """One task: the moments of a chunk of members (Welford's update, member by member:
    a few grids whatever the chunk's size), and its members in float32 when the quantiles
    need them."""
    count = len(next(iter(samples.values())))
    cache: dict[tuple[float, ...], Any] = {}
    work: dict[str, np.ndarray] = {}
    moments: _Moments | None = None
    members: np.ndarray | None = None
    for i in range(count):
        values = _member(job, {k: float(v[i]) for k, v in samples.items()}, cache, work)
        if moments is None:
            shape = (job.thresholds.size, *values.shape[1:])
            moments = _Moments(
                0, np.zeros_like(values), np.zeros_like(values), np.zeros(shape, np.int64)
            )
            if job.keep_members:
                members = np.empty((count, *values.shape), dtype=np.float32)
        moments.add(values, job.thresholds)
        if members is not None:
            members[i] = values
    assert moments is not None
    kept = None
    if members is not None:  # (quantity, cell, member): a cell's members side by side
        kept = np.ascontiguousarray(members.reshape(count, members.shape[1], -1).transpose(1, 2, 0))
    return moments, kept


def _chunk_size(members: int) -> int:
    """Members per task: from the number of members only (never the workers)."""
    return max(1, math.ceil(members / _CHUNKS))


def _check_thresholds(thresholds: Any) -> np.ndarray:
    if thresholds is None:
        return np.zeros(0)
    items = np.atleast_1d(np.asarray(thresholds, dtype=object))
    values = np.array(
        [check_number("thresholds", t, unit="m, deflection positive down") for t in items]
    )
    if values.ndim != 1 or np.unique(values).size != values.size:
        raise InputError(f"thresholds must be a list of distinct depths (m), got {thresholds!r}")
    return values


def _check_quantiles(quantiles: Any) -> np.ndarray:
    items = np.atleast_1d(np.asarray(quantiles, dtype=object))
    values = np.array(
        [check_number("quantiles", q, minimum=0.0, maximum=1.0) for q in items], dtype=np.float64
    )
    if np.unique(values).size != values.size:
        raise InputError(f"quantiles repeat a value: {list(quantiles)!r}")
    return values


def _path(plate: Plate, infill: Infill | None, method: str, edges: str) -> str:
    if infill is not None:
        return "infill"
    if plate.is_variable or method == "finite-difference" or edges not in SPECTRAL_EDGES:
        return "finite-difference"
    return "spectral"


def _spectral_setup(job: _Job, plates: list[Plate]) -> _Job:
    """*job* with the FFT problem padded for the stiffest member, the load's spectrum and
    k^4 on it."""
    spec = check_grid(job.q)
    decays = [decay_length(float(p.rigidity), p.restoring_stiffness) for p in plates]
    stiffest = plates[int(np.argmax(decays))]
    problem = SpectralProblem.build(
        spec,
        float(stiffest.rigidity),
        stiffest.restoring_stiffness,
        periodic=(job.edges == "periodic"),
        pad_factor=job.pad_factor,
    )
    spectrum = problem.load_spectrum(np.asarray(job.q.values, dtype=np.float64))
    spectrum.flags.writeable = False
    ky2, kx2 = wavenumbers_squared(problem.shape, spec.dy, spec.dx)
    biharmonic = np.square(ky2 + kx2)
    biharmonic.flags.writeable = False
    return dataclasses.replace(job, problem=problem, spectrum=spectrum, biharmonic=biharmonic)


def _member_plates(job: _Job, samples: dict[str, np.ndarray], members: int) -> list[Plate]:
    """The distinct plates of the members, checked in the caller (the message names the
    first member that gives no valid plate); only their number for a te grid."""
    plates: dict[tuple[float, ...], Plate] = {}
    for i in range(members):
        params = {k: float(v[i]) for k, v in samples.items()}
        key = tuple(params.values())
        if key in plates:
            continue
        try:
            plates[key] = _member_plate(job, params)
            _member_infill(job, params)
            if job.plate.is_variable:  # te grids are rebuilt in the tasks: keep none here
                plates[key] = job.plate
        except InputError as exc:
            drawn = ", ".join(f"{k}={v:.6g}" for k, v in params.items())
            raise InputError(
                f"spread: member {i} ({drawn}) is not a valid plate: {exc}; choose "
                "distributions that stay in the physical range (e.g. scipy.stats.truncnorm)"
            ) from exc
    return list(plates.values())


def ensemble(
    load: xr.DataArray | xr.Dataset,
    plate: Plate,
    spread: Mapping[str, Any],
    *,
    members: int = 400,
    seed: int = 0,
    thresholds: Sequence[float] | None = None,
    scheduler: Any = None,
    quantiles: Sequence[float] = DEFAULT_QUANTILES,
    sampling: str = "latin_hypercube",
    infill: Infill | None = None,
    initial_surface: xr.DataArray | float | None = None,
    gravity: Mapping[str, Any] | None = None,
    method: str = "auto",
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    progress: Progress | None = None,
) -> xr.Dataset:
    """Flexure of an ensemble of plates and loads drawn from distributions.

    Parameters
    ----------
    load : xarray.DataArray or xarray.Dataset
        The load q (Pa, positive down) on dims ``("y", "x")``, or a load Dataset
        (:func:`gridflex.load_from_elevation`; needed with *infill* unless
        *initial_surface* is given, and it supplies the geometry for *gravity*).
    plate : Plate
        The base plate: values not drawn are its own. A te grid takes the
        finite-difference solve, and ``spread["te"]`` is then a factor on the grid.
    spread : mapping of str to distribution or list of numbers
        Parameter name (:data:`ENSEMBLE_PARAMETERS`: ``te`` in m, or a factor on a te
        grid; ``youngs_modulus`` in Pa; ``mantle_density``, ``infill_density``,
        ``crust_density`` and, with *infill*, ``water_density`` and
        ``sediment_density`` in kg m⁻³; ``load_scale``, a factor on q) to a frozen
        ``scipy.stats`` distribution, or to a list of samples drawn with equal
        probability. SI units.
    members : int, default 400
        Number of members (>= 2).
    seed : int, default 0
        Seed of the one ``numpy.random.Generator`` all values are drawn from, up
        front: the same seed gives the same numbers on any scheduler and number of
        workers.
    thresholds : sequence of float, optional
        Depths (m, deflection positive down) for the exceedance maps.
    scheduler : None, str or distributed.Client, optional
        As in :func:`gridflex.sweep`: local threads by default, ``"processes"``,
        ``"synchronous"``, a scheduler address (e.g. a ``LocalCluster``'s
        ``scheduler_address``) or a connected ``distributed.Client``.
    quantiles : sequence of float, default (0.05, 0.5, 0.95)
        Probabilities of the quantile maps; ``()`` keeps no members (streaming only).
    sampling : {"latin_hypercube", "random"}, default "latin_hypercube"
        Stratified (Latin hypercube) or plain random draws.
    infill : Infill, optional
        Solve every member with :func:`gridflex.solve_with_infill` and summarise its
        ``moat_fill`` too.
    initial_surface : xarray.DataArray or float, optional
        For *infill*, as in :func:`gridflex.solve_with_infill`.
    gravity : mapping, optional
        Keyword arguments of :func:`gridflex.model_gravity`: when given (``{}`` for
        the defaults), the free-air and Bouguer anomalies of every member are
        summarised too. A drawn ``load_scale`` scales the load density with q.
    method, edges, pad_factor, tolerance, max_iterations
        As in :func:`gridflex.solve`.
    progress : callable, optional
        Called as ``progress(done, total)`` as chunks of members finish.

    Returns
    -------
    xarray.Dataset
        ``mean`` and ``std`` (sample standard deviation, ddof = 1) with dims
        ``("quantity", "y", "x")``, ``quantiles`` with dims ``("quantity",
        "quantile", "y", "x")``, where ``quantity`` lists ``deflection`` (m,
        positive down), ``moat_fill`` (m, with *infill*), ``free_air_anomaly`` and
        ``bouguer_anomaly`` (mGal, with *gravity*) and the coordinate
        ``quantity_units`` gives each one's unit; ``exceedance_probability`` with
        dims ``("threshold", "y", "x")``: the share of members with deflection
        w > threshold (w positive down, so the moat is deeper than the threshold);
        ``sample_<name>`` (dim ``member``) the drawn values.

    Raises
    ------
    InputError
        Unknown names, bad distributions or values (naming the key), a member that
        is not a valid plate, an unreachable scheduler, or more memory than there is.
    ConvergenceError
        A member's finite-difference or infill solve did not converge.

    Examples
    --------
    >>> import numpy as np, scipy.stats, xarray as xr
    >>> x = np.arange(32) * 4e3
    >>> q = xr.DataArray(np.zeros((32, 32)), dims=("y", "x"), coords={"y": x, "x": x})
    >>> q[16, 16] = 1e9
    >>> out = ensemble(q, Plate(te=10e3), {"te": scipy.stats.uniform(5e3, 10e3)},
    ...                members=8, thresholds=[1.0], scheduler="synchronous")
    >>> out["mean"].sel(quantity="deflection").dims
    ('y', 'x')
    """
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    if infill is not None and not isinstance(infill, Infill):
        raise InputError(f"infill must be a gridflex.Infill, got {type(infill).__name__}")
    q_grid = load["load"] if isinstance(load, xr.Dataset) and "load" in load else load
    if not isinstance(q_grid, xr.DataArray):
        raise InputError(f"load must be a DataArray or a load Dataset, got {type(load).__name__}")
    spec = check_grid(q_grid, "load")
    check_scheduler("scheduler", scheduler)
    names = set(_checked_spread(spread))
    members = check_integer("members", members, minimum=2)
    if infill is None and names & set(INFILL_FIELDS):
        raise InputError(f"spread: {', '.join(sorted(names & set(INFILL_FIELDS)))} needs infill=")
    if infill is not None and "infill_density" in names:
        raise InputError(
            "spread: 'infill_density' is not used with infill= (the fill is decided per "
            "cell); draw 'water_density' or 'sediment_density'"
        )
    edges = check_choice("edges", edges, EDGES)
    method = check_choice("method", method, ("auto", "spectral", "finite-difference"))
    path = _path(plate, infill, method, edges)
    if method == "spectral" and path != "spectral" and infill is None:
        raise InputError(
            "method='spectral' needs a constant te and edges 'infinite' or 'periodic'; "
            f"got {'a te grid' if plate.is_variable else 'a constant te'} and edges={edges!r}"
        )
    quantities = ["deflection"]
    if infill is not None:
        quantities.append("moat_fill")
    if gravity is not None:
        if not isinstance(gravity, Mapping):
            raise InputError(f"gravity must be a mapping of model_gravity options, got {gravity!r}")
        quantities += ["free_air_anomaly", "bouguer_anomaly"]
    probabilities = _check_quantiles(quantiles)
    job = _Job(
        path,
        load,
        plate,
        infill,
        initial_surface,
        None if gravity is None else dict(gravity),
        tuple(quantities),
        _check_thresholds(thresholds),
        probabilities.size > 0,
        edges,
        check_number("pad_factor", pad_factor, minimum=0.0),
        check_number("tolerance", tolerance, minimum=0.0, strict=True),
        check_integer("max_iterations", max_iterations, minimum=1),
        method,
    )
    cells = spec.ny * spec.nx  # Python ints: an absurd ensemble is refused, not overflowed
    size = _chunk_size(members)
    chunks = math.ceil(members / size)
    # the chunks' results (moments, exceedance counts, float32 members for the quantiles)
    # and, per running task, a few grids and its members twice (gathered, transposed)
    kept = 4 * members * len(quantities) * cells if job.keep_members else 0
    streamed = 8 * chunks * (2 * len(quantities) + job.thresholds.size) * cells
    tasks = min(chunks, os.cpu_count() or 1)
    running = tasks * (8 * 6 * len(quantities) * cells + (2 * kept) // chunks)
    check_memory(
        kept + streamed + running + 1024 * members,
        f"ensemble of {members} members of {len(quantities)} quantities on a "
        f"{spec.ny} x {spec.nx} grid",
        advice=_ADVICE,
    )
    samples = draw_samples(spread, members, seed, sampling)
    plates = _member_plates(job, samples, members)
    values = np.asarray(q_grid.values, dtype=np.float64)
    if edges == "infinite" and path != "infill":
        check_edge_load(values, float(np.abs(values).sum()))
    if path == "spectral":
        job = _spectral_setup(job, plates)
    results = _compute(job, samples, members, size, scheduler, progress)
    return _dataset(job, q_grid, spec, samples, spread, results, probabilities, seed, sampling)


def _compute(
    job: _Job,
    samples: dict[str, np.ndarray],
    members: int,
    size: int,
    scheduler: Any,
    progress: Progress | None,
) -> list[tuple[_Moments, np.ndarray | None]]:
    import dask

    shared = dask.delayed(job, pure=True)
    one = dask.delayed(_chunk, pure=True)
    tasks = [
        one(shared, {k: v[start : start + size] for k, v in samples.items()})
        for start in range(0, members, size)
    ]
    log.info("ensemble: %d members in %d tasks (%s path)", members, len(tasks), job.path)
    return run_tasks(tasks, scheduler, progress)


def _quantile_maps(
    kept: list[np.ndarray], probabilities: np.ndarray, shape: tuple[int, int, int]
) -> np.ndarray:
    """Quantiles (quantity, quantile, ny, nx) from the chunks' members (each chunk's
    array is (quantity, cell, member)), block of cells by block of cells: a block's
    members are gathered contiguously, sorted, and interpolated linearly between order
    statistics (numpy's default rule: position p (members - 1)). Only members x block
    cells are copied at a time, in each of the row-block threads."""
    quantities, ny, nx = shape
    members = sum(k.shape[2] for k in kept)
    position = probabilities * (members - 1)
    low = np.floor(position).astype(np.int64)
    high = np.minimum(low + 1, members - 1)
    weight = position - low
    out = np.empty((quantities, probabilities.size, ny * nx))
    cells = max(1, _CHUNK_BYTES // (4 * members * 4))
    for f in range(quantities):

        def block(c0: int, c1: int, _thread: int, f: int = f) -> None:
            values = np.concatenate([k[f, c0:c1] for k in kept], axis=1)
            values.sort(axis=1)
            out[f, :, c0:c1] = (values[:, low] * (1.0 - weight) + values[:, high] * weight).T

        for_row_blocks(ny * nx, cells, block)
    return out.reshape(quantities, probabilities.size, ny, nx)


def _dataset(
    job: _Job,
    q_grid: xr.DataArray,
    spec: GridSpec,
    samples: dict[str, np.ndarray],
    spread: Mapping[str, Any],
    results: list[tuple[_Moments, np.ndarray | None]],
    probabilities: np.ndarray,
    seed: int,
    sampling: str,
) -> xr.Dataset:
    """Merge the chunks in order and wrap the maps."""
    moments = results[0][0]
    for other, _ in results[1:]:
        moments = moments.merge(other)
    members = moments.count
    std = np.sqrt(moments.m2 / (members - 1))
    quantities = list(job.quantities)
    units = [_UNITS[name] for name in quantities]
    coords: dict[str, Any] = {
        "y": q_grid["y"].variable,
        "x": q_grid["x"].variable,
        "quantity": ("quantity", quantities),
        "quantity_units": ("quantity", units),
        "threshold": (
            "threshold",
            job.thresholds,
            {"units": "m", "long_name": "deflection threshold (positive down)"},
        ),
        "member": ("member", np.arange(members)),
    }
    data: dict[str, Any] = {
        "mean": (("quantity", "y", "x"), moments.mean, {"long_name": "ensemble mean"}),
        "std": (
            ("quantity", "y", "x"),
            std,
            {"long_name": "ensemble standard deviation (ddof = 1)"},
        ),
        "exceedance_probability": (
            ("threshold", "y", "x"),
            moments.exceed / members,
            {
                "units": "1",
                "long_name": "probability that the deflection exceeds the threshold",
                "definition": "share of members with w > threshold, w positive down "
                "(the moat is deeper than the threshold)",
            },
        ),
    }
    if probabilities.size:
        kept = [k for _, k in results if k is not None]
        coords["quantile"] = ("quantile", probabilities, {"units": "1"})
        data["quantiles"] = (
            ("quantity", "quantile", "y", "x"),
            _quantile_maps(kept, probabilities, (len(quantities), spec.ny, spec.nx)),
            {"long_name": "ensemble quantiles (linear interpolation, Hyndman & Fan type 7)"},
        )
    for name, values in samples.items():
        unit = "1" if name == "te" and job.plate.is_variable else PARAMETER_UNITS[name]
        data[f"sample_{name}"] = (
            ("member",),
            values,
            {
                "units": unit,
                "long_name": f"drawn {name}",
                "distribution": _describe_given(spread[name]),
            },
        )
    plate_parameters = {k: v for k, v in job.plate.describe().items() if k not in samples}
    attrs = {
        "ensemble_members": members,
        "ensemble_seed": seed,
        "ensemble_sampling": sampling,
        "ensemble_parameters": " ".join(samples),
        "ensemble_solver": job.path,
        "edges": job.edges,
        "pad_factor": job.pad_factor,
    }
    if job.plate.is_variable and "te" in samples:
        attrs["ensemble_te"] = "factor on the te grid"
    return xr.Dataset(
        data,
        coords=coords,
        attrs=provenance_attrs(
            plate_parameters, attrs, title="thin elastic plate flexure, ensemble"
        ),
    )


def _describe_given(given: Any) -> str:
    if hasattr(given, "ppf") and hasattr(given, "dist"):
        return _describe(given)
    return _describe(np.asarray(given, dtype=np.float64))
