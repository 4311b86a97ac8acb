"""Self-consistent infill: water below sea level, air above, sediment where asked.

Each column (PHYSICS.md section 5.1) starts from the initial surface z0 (the top
of the solid, load included) with water up to sea level above it. The plate
moves down by w; the deflected top z0 - w is then covered by

* sediment, where the rule allows it: ``"full"`` fills the new space up to the
  initial surface, ``"to_level"`` up to a given level (only the new space, unless
  ``fill_existing``, which fills all space below the level); an uplifted
  forebulge loses no sediment;
* water up to sea level (a forebulge that rises displaces water, one that
  emerges stops there); air above.

The load relative to the initial state is

.. math:: L(w) = q + g\\,[\\rho_s h_s + \\rho_w (h_w - h_{w0})]

and the plate equation is  B(w) + rho_m g w = L(w), B the bending (and in-plane
force) operator. L is piecewise linear and monotone with slope between 0 and
rho_f,max g, so the solution is unique. It is found with the shifted fixed point
(PHYSICS.md eq. 5.3)

.. math:: (B + (\\rho_m - c) g)\\, w_{n+1} = L(w_n) - c g w_n,

contracting with factor <= max(c, rho_f - c) / (rho_m - c); the default shift is
c = rho_f,max / 2 (optimal for that bound), and Anderson acceleration (Walker &
Ni 2011, *SIAM J. Numer. Anal.* 49, 1715-1735, from memory) speeds it up.

The inner solve is any object with the :class:`InnerSolver` interface: the FFT
solver for a constant te (:func:`spectral_inner`), or the finite-difference
solver for a te grid (:func:`finite_difference_inner`: margins, breaks, te = 0
cells, and the edges "clamped" and "free"). The working domain is the padded FFT
grid, or the finite-difference solve grid (the grid at its start, followed by a
periodic margin); the column model is applied in the padding too (surface, level
and mask continued from the nearest edge, no load), so force balance holds on
the whole domain.

The finite-difference operator is set up once per call and each fixed-point step
is solved by conjugate gradients started from the current (mixed) iterate,
only as accurately as the outer iteration needs at that point: to an rms error
of a tenth of the last fixed-point update (the first steps are loose, the last
ones tight), so that the whole infill costs a few plain solves.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any, Protocol

import numpy as np
import xarray as xr

from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import (
    EDGES,
    METHODS,
    SPECTRAL_EDGES,
    check_edge_load,
    check_inplane_force,
    result_dataset,
)
from gridflex.errors import ConvergenceError, InputError
from gridflex.grid import GridSpec, check_grid, check_same_grid, grid_values
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.solvers.finite_difference import (
    DEFAULT_MAX_ITERATIONS,
    FiniteDifferenceSolver,
    solve_shape,
)
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, SpectralProblem
from gridflex.validation import check_choice, check_density, check_integer, check_number

__all__ = [
    "ACCELERATIONS",
    "SEDIMENT_MODES",
    "Infill",
    "InnerSolver",
    "InnerSolverCache",
    "finite_difference_inner",
    "solve_with_infill",
    "spectral_inner",
]

log = logging.getLogger(__name__)

SEDIMENT_MODES = ("none", "full", "to_level")
"""Accepted values of ``Infill.sediment``."""

ACCELERATIONS = ("anderson", "none")
"""Accepted values of ``solve_with_infill(acceleration=...)``."""

_ANDERSON_DEPTH = 5

Level = float | xr.DataArray


@dataclass(frozen=True)
class Infill:
    """What fills the flexural depression.

    Parameters
    ----------
    sea_level : float, default 0.0
        Sea-level elevation (m, positive up), same datum as the surface grids.
    water_density : float, default 1030.0
        Sea water (kg m^-3).
    sediment : {"none", "full", "to_level"}, default "none"
        ``"none"``: water below sea level, air above. ``"full"``: sediment fills
        all new space created by the deflection (the surface returns to the
        initial surface where the plate went down). ``"to_level"``: sediment fills
        the new space up to *sediment_level*, water/air above it.
    sediment_density : float, default 2400.0
        Bulk density of the fill sediment (kg m^-3).
    sediment_level : float or xarray.DataArray, optional
        Elevation (m) up to which sediment fills; required for ``"to_level"``.
    fill_existing : bool, default False
        With ``"to_level"``: also fill the space that already lay below the level
        before loading (the sediment is then a load even without flexure).
    sediment_mask : xarray.DataArray of bool, optional
        Where sediment may collect (True); everywhere when omitted.
    load_buried : bool, default False
        The initial surface is the surface *observed after* flexure (PHYSICS.md 1.3,
        final-topography mode): where the load stands (``load_height > 0`` of the
        load Dataset) its top stays where it is observed and its base sinks with the
        plate, so the depression under it is load material (``load_root``, density
        ``load_density`` of the load Dataset).

    Raises
    ------
    InputError
        Unknown mode, bad densities, missing level.
    """

    sea_level: float = 0.0
    water_density: float = SEA_WATER_DENSITY
    sediment: str = "none"
    sediment_density: float = 2400.0
    sediment_level: Level | None = None
    fill_existing: bool = False
    sediment_mask: xr.DataArray | None = None
    load_buried: bool = False

    def __post_init__(self) -> None:
        check_choice("infill sediment", self.sediment, SEDIMENT_MODES)
        set_ = object.__setattr__
        set_(self, "sea_level", check_number("infill sea_level", self.sea_level, unit="m"))
        for name in ("water_density", "sediment_density"):
            set_(self, name, check_density(f"infill {name}", getattr(self, name)))
        if self.sediment == "to_level" and self.sediment_level is None:
            raise InputError("infill sediment='to_level' needs sediment_level (m, positive up)")
        if self.fill_existing and self.sediment != "to_level":
            raise InputError("infill fill_existing=True only applies to sediment='to_level'")

    def max_density(self, load_density: float = 0.0) -> float:
        """Largest density that can occupy new space (kg m^-3); *load_density* counts
        when the load is buried."""
        densest = self.water_density
        if self.sediment != "none":
            densest = max(densest, self.sediment_density)
        if self.load_buried:
            densest = max(densest, load_density)
        return densest

    def describe(self) -> dict[str, Any]:
        """Parameters as output attributes (prefixed ``infill_`` by the caller)."""
        out: dict[str, Any] = {
            "sea_level": self.sea_level,
            "water_density": self.water_density,
            "sediment": self.sediment,
        }
        if self.sediment != "none":
            out["sediment_density"] = self.sediment_density
            out["fill_existing"] = int(self.fill_existing)
            out["sediment_mask"] = "grid" if self.sediment_mask is not None else "everywhere"
        level = self.sediment_level
        if self.sediment == "to_level" and level is not None:
            out["sediment_level"] = "grid" if isinstance(level, xr.DataArray) else float(level)
        out["load_buried"] = int(self.load_buried)
        return out


class InnerSolver(Protocol):
    """A linear plate solve (B + k0) w = rhs on a working domain.

    Attributes
    ----------
    shape : tuple of int
        Shape of the working domain (the padded FFT grid, or the finite-difference
        solve grid).
    window : tuple of slice
        Where the output grid lies inside the working domain.
    stiffness : float
        k0 (Pa m^-1), the constant Winkler coefficient of the operator.
    area : numpy.ndarray or None
        Nodal area weights of the force balance on the working domain (None: all 1).
    iterative : bool
        True when :meth:`solve` is iterative: it then takes a start and an accuracy.
    last_error : float
        Bound on the rms error (m) of the w the last :meth:`solve` returned, as reached
        (not as asked for); 0 for a direct solve.
    last_product : numpy.ndarray or None
        The operator applied to the w the last :meth:`solve` returned, in the solver's
        own units, when it has it (an iterative solver that checked its residual);
        a combination of these is the *start_product* of the same combination of w.
    """

    @property
    def shape(self) -> tuple[int, int]: ...

    @property
    def window(self) -> tuple[slice, slice]: ...

    @property
    def stiffness(self) -> float: ...

    @property
    def area(self) -> np.ndarray | None: ...

    @property
    def iterative(self) -> bool: ...

    @property
    def last_error(self) -> float: ...

    @property
    def last_product(self) -> np.ndarray | None: ...

    def solve(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        accuracy: float | None = None,
        start_product: np.ndarray | None = None,
    ) -> np.ndarray:
        """w (m, positive down) on the working domain for *rhs* (Pa) on it.

        An iterative solver starts from *start* (m, a nearby solution; *start_product*
        is the operator applied to it, when known, see :attr:`last_product`) and stops
        once the rms error of w is below *accuracy* (m); a direct one ignores all three."""
        ...

    def describe(self) -> dict[str, Any]:
        """What the solver did, as output attributes."""
        ...


@dataclass(frozen=True)
class _SpectralInner:
    problem: SpectralProblem
    shape: tuple[int, int]
    window: tuple[slice, slice]
    stiffness: float
    area: np.ndarray | None = None
    iterative: bool = False
    last_error: float = 0.0
    last_product: np.ndarray | None = None

    def solve(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        accuracy: float | None = None,
        start_product: np.ndarray | None = None,
    ) -> np.ndarray:
        # the per-solve balance is not used (the outer loop checks its own), so a dummy
        # magnitude saves a pass over the grid
        w, _ = self.problem.deflection(rhs, 1.0)
        return w

    def describe(self) -> dict[str, Any]:
        return {"inner_solver": "spectral"}


def spectral_inner(
    spec: GridSpec,
    rigidity: float,
    stiffness: float,
    min_stiffness: float,
    *,
    force_x: float = 0.0,
    force_y: float = 0.0,
    periodic: bool = False,
    pad_factor: float = DEFAULT_PAD_FACTOR,
) -> InnerSolver:
    """FFT inner solver for a constant rigidity.

    Parameters
    ----------
    spec : GridSpec
        The output grid.
    rigidity : float
        D (N m).
    stiffness : float
        k0 = (rho_m - c) g of the inner operator (Pa m^-1).
    min_stiffness : float
        (rho_m - rho_f,max) g, the weakest restoring force the fill can leave; it
        sets the padding (longest decay length) and the buckling check.
    force_x, force_y : float
        In-plane forces (N m^-1, tension positive).
    periodic : bool
        Doubly periodic domain (no padding).
    pad_factor : float
        Padding per side in decay lengths.
    """
    outer = SpectralProblem.build(
        spec, rigidity, min_stiffness, force_x, force_y, periodic=periodic, pad_factor=pad_factor
    )
    shape = outer.shape
    work = GridSpec(ny=shape[0], nx=shape[1], dy=spec.dy, dx=spec.dx)
    problem = SpectralProblem.build(work, rigidity, stiffness, force_x, force_y, periodic=True)
    oy = (shape[0] - spec.ny) // 2
    ox = (shape[1] - spec.nx) // 2
    window = (slice(oy, oy + spec.ny), slice(ox, ox + spec.nx))
    return _SpectralInner(problem, shape, window, stiffness)


_LOOSEST_INNER = 0.1
"""Loosest tolerance of an inexact inner finite-difference solve (the first steps: 1e-2
took 10-15 % more iterations in all, 0.3 no fewer; tests/benchmarks/infill.py, measured
with the earlier relative-residual rule)."""

_TIGHTEST_INNER = 1e-12
"""Tightest tolerance asked of an inner finite-difference solve."""


@dataclass(eq=False)
class _FiniteDifferenceInner:
    """The finite-difference solver as an :class:`InnerSolver`, counting its work."""

    solver: FiniteDifferenceSolver
    floor: float
    area_min: float
    reused: bool = False
    iterative: bool = True
    iterations: int = 0
    solves: int = 0
    last_error: float = math.inf
    last_product: np.ndarray | None = None
    last: dict[str, Any] = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, int]:
        return self.solver.shape

    @property
    def window(self) -> tuple[slice, slice]:
        return self.solver.window

    @property
    def stiffness(self) -> float:
        return float(self.solver.operator.stiffness)

    @property
    def area(self) -> np.ndarray:
        return self.solver.operator.area

    def _scale(self, rhs: np.ndarray) -> float:
        """rms(b) / (k0 a_min) (m) for b = *rhs* (area-weighted): the factor between
        the relative energy-norm error of the solver and the rms error of w (m), see
        :meth:`tolerance`; 0 for a zero *rhs*."""
        rms = math.sqrt(_dot(rhs.ravel(), rhs.ravel()) / rhs.size)
        return rms / (self.stiffness * self.area_min)

    def tolerance(self, rhs: np.ndarray, accuracy: float | None) -> float:
        """Solver tolerance (relative energy-norm error of w, the finite-difference
        stopping rule) that bounds the rms error of w by *accuracy* (m): with
        K >= k0 a_min (a the nodal area weights), ||e||_2² <= ||e||_K² / (k0 a_min) and
        ||w||_K² = w·b <= ||b||² / (k0 a_min), so rms(e) <= tol rms(b) / (k0 a_min);
        between :attr:`floor` and :data:`_LOOSEST_INNER`."""
        if accuracy is None:
            return self.solver.tolerance
        scale = self._scale(rhs)
        wanted = accuracy / scale if scale > 0 else _LOOSEST_INNER
        return float(min(max(wanted, self.floor), _LOOSEST_INNER))

    def solve(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        accuracy: float | None = None,
        start_product: np.ndarray | None = None,
    ) -> np.ndarray:
        weighted = self.area * rhs
        tolerance = self.tolerance(weighted, accuracy)
        w, info = self.solver.solve_full(
            rhs, start, tolerance=tolerance, start_product=start_product
        )
        self.last_product = info.pop("product", None)
        self.iterations += int(info["iterations"])
        self.solves += 1
        self.last = info
        # the bound of :meth:`tolerance` with the relative error the solve reached
        self.last_error = float(info["accuracy"]) * self._scale(weighted)
        return w

    def describe(self) -> dict[str, Any]:
        info = self.last
        out: dict[str, Any] = {
            "inner_solver": "finite-difference",
            "inner_iterations": self.iterations,
            "inner_solves": self.solves,
            "residual": float(info.get("residual", math.nan)),
            "inner_tolerance": float(info.get("tolerance", math.nan)),
            "setup_seconds": 0.0 if self.reused else self.solver.setup_seconds,
            "setup_reused": int(self.reused),
            "preconditioner": str(info.get("preconditioner", "")),
            "blend_levels": np.asarray(info.get("blend_levels", []), dtype=np.float64),
            "band_nodes": int(info.get("band_nodes", 0)),
            "band_width": self.solver.band_width,
            "locally_compensated_load": float(info.get("locally_compensated_load", 0.0)),
        }
        # the error estimate of the CG stopping rule, when the solver gives one: numbers
        # only (output attributes), a mapping flattened to accuracy_<key>
        accuracy = info.get("accuracy")
        items = accuracy.items() if isinstance(accuracy, dict) else [("", accuracy)]
        for key, value in items:
            if isinstance(value, int | float | np.number) and not isinstance(value, bool):
                out["accuracy" + (f"_{key}" if key else "")] = float(value)
        return out


def finite_difference_inner(
    spec: GridSpec,
    rigidity: np.ndarray,
    stiffness: float,
    min_stiffness: float,
    poisson_ratio: float,
    *,
    edges: str = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    cache: InnerSolverCache | None = None,
) -> InnerSolver:
    """Finite-difference inner solver for a rigidity grid (set up once).

    Parameters
    ----------
    spec : GridSpec
        The output grid.
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal D (N m), >= 0; 0 marks broken cells.
    stiffness : float
        k0 = (rho_m - c) g of the inner operator (Pa m^-1).
    min_stiffness : float
        (rho_m - rho_f,max) g; its flexural parameter sizes the margin of
        ``edges="infinite"``.
    poisson_ratio : float
        nu.
    edges : {"infinite", "periodic", "clamped", "free"}, default "infinite"
        As in :func:`gridflex.solve`.
    pad_factor : float, default 4.5
        Margin of ``"infinite"`` in flexural parameters.
    max_iterations : int, default :data:`~gridflex.solvers.finite_difference.DEFAULT_MAX_ITERATIONS`
        Iteration limit of each inner solve.
    cache : InnerSolverCache, optional
        Takes the set-up from it when it holds one for the same arguments, and keeps
        this one in it otherwise.
    """
    rigidity = np.asarray(rigidity, dtype=np.float64)
    key = _SetupKey(
        spec,
        rigidity,
        float(stiffness),
        # min_stiffness only sizes the margin: set-ups with the same solve grid are equal
        solve_shape(spec, rigidity, min_stiffness, edges, pad_factor),
        float(poisson_ratio),
        edges,
        float(pad_factor),
        int(max_iterations),
    )
    solver = None if cache is None else cache.find(key)
    reused = solver is not None
    if solver is None:
        if cache is not None:
            cache.clear()  # never two set-ups in memory at once
        solver = FiniteDifferenceSolver.build(
            spec,
            rigidity,
            stiffness,
            poisson_ratio,
            edges,
            pad_factor=pad_factor,
            pad_stiffness=min_stiffness,
            max_iterations=max_iterations,
        )
        if cache is not None:
            cache.keep(key, solver)
    # the tightest accuracy asked for: the solver stops at its round-off limit anyway
    # (at_round_off) when this cannot be reached
    return _FiniteDifferenceInner(
        solver, _TIGHTEST_INNER, float(solver.operator.area.min()), reused
    )


@dataclass(frozen=True, eq=False)
class _SetupKey:
    """What a finite-difference inner set-up depends on."""

    spec: GridSpec
    rigidity: np.ndarray
    stiffness: float
    shape: tuple[int, int]
    poisson_ratio: float
    edges: str
    pad_factor: float
    max_iterations: int

    def covers(self, other: _SetupKey) -> bool:
        """True when the set-up of *self* serves *other*: the same in all but the solve
        grid, which holds *other*'s (at least as many rows and columns: a margin at least
        as wide, :func:`~gridflex.solvers.finite_difference.solve_shape`) with at most
        :data:`_COVER_SLACK` times its nodes (the rigidity compared value by value)."""
        scalars = ("spec", "stiffness", "poisson_ratio", "edges")
        larger = all(a >= b for a, b in zip(self.shape, other.shape, strict=True))
        nodes = self.shape[0] * self.shape[1]
        return (
            all(getattr(self, name) == getattr(other, name) for name in scalars)
            and larger
            and nodes <= _COVER_SLACK * other.shape[0] * other.shape[1]
            and self.pad_factor == other.pad_factor
            and self.max_iterations == other.max_iterations
            and np.array_equal(self.rigidity, other.rigidity)
        )


_COVER_SLACK = 1.25
"""Most nodes a kept finite-difference set-up may have, relative to the solve grid a call
asks for, and still serve it (its margin is wider: more accurate, dearer per product).
Margins are sized with the densest fill, so the stages of a basin that alternate between
a denser and a lighter lithology asked for two solve grids in turn (720 x 576 and 720 x
600 at 300^2 of 2 km cells) and rebuilt the set-up at every stage (1.2 s a stage at
1000^2)."""


@dataclass(eq=False)
class InnerSolverCache:
    """The finite-difference set-up (operator, preconditioner, band factor) of the last
    inner solve, kept for the next :func:`solve_with_infill` call with the same te grid,
    infill densities and solver options: the settling passes of a stage, and stages that
    share a te and a fill (:class:`gridflex.basin.StagedBasin`).

    It holds one set-up (memory bounded: about 20 grids of the solve grid, and the band
    factor), replaced whenever a call needs another; a constant te (the FFT) does not
    use it. The set-up is a pure function of its arguments, so a reused one for the same
    solve grid gives the same deflection as a new one, bit for bit. A kept set-up whose
    margin is somewhat wider than a call asks for serves it too (a lighter densest fill
    asks for a narrower margin, :data:`_COVER_SLACK`): the deflection then differs from a
    new set-up's by the margin's effect only: 4.9e-5 m on a peak of 120 m (4e-7) for six
    stages of the 300^2 margin of tests/benchmarks/basin_large.py with a te grid.

    Attributes
    ----------
    builds, reuses : int
        Set-ups built and taken from the cache.
    """

    builds: int = 0
    reuses: int = 0
    _key: _SetupKey | None = None
    _solver: FiniteDifferenceSolver | None = None

    def find(self, key: _SetupKey) -> FiniteDifferenceSolver | None:
        """The kept set-up for *key*, or None: the same set-up, or one whose margin is
        somewhat wider (:meth:`_SetupKey.covers`)."""
        if self._key is None or self._solver is None or not self._key.covers(key):
            return None
        self.reuses += 1
        return self._solver

    def keep(self, key: _SetupKey, solver: FiniteDifferenceSolver) -> None:
        """Keep *solver* (built for *key*) instead of the set-up held so far."""
        self._key = replace(key, rigidity=key.rigidity.copy())  # the caller may change it
        self._solver = solver
        self.builds += 1

    def clear(self) -> None:
        """Drop the kept set-up (frees its memory)."""
        self._key = self._solver = None


def _extend(values: np.ndarray, shape: tuple[int, int], window: tuple[slice, slice]) -> np.ndarray:
    """Put *values* into *window* of a periodic *shape* array, continuing its edges
    outward: the half of the padding after the last row (column) repeats it, the half
    before the first row (column), wrapping round the periodic domain, repeats that
    (the window may sit anywhere: centred in the FFT grid, at the start of the
    finite-difference solve grid)."""
    if values.shape == shape:
        return values
    pads = []
    for n, size in zip(values.shape, shape, strict=True):
        extra = size - n
        pads.append((extra // 2, extra - extra // 2))
    out = np.pad(values, pads, mode="edge")
    shift = (window[0].start - pads[0][0], window[1].start - pads[1][0])
    return np.roll(out, shift, axis=(0, 1)) if any(shift) else out


SedimentMass = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
"""``sediment_mass(fill)``: for a sediment fill thickness on the grid (m), its mass per
area (kg m^-2) and the density of the fill's top (kg m^-3, d mass / d fill); see
:func:`solve_with_infill`."""


@dataclass
class _Column:
    """The column model on the working domain (numpy arrays, SI)."""

    load: np.ndarray
    surface: np.ndarray
    infill: Infill
    gravity: float
    level: np.ndarray | None
    mask: np.ndarray | None
    footprint: np.ndarray | None = None
    load_density: float = 0.0
    # the fill's mass as a function of its thickness on the grid, which lies in *window*
    # of the working domain (the padding keeps sediment_density)
    sediment_mass: SedimentMass | None = None
    window: tuple[slice, slice] | None = None

    def __post_init__(self) -> None:
        self.water0 = np.clip(self.infill.sea_level - self.surface, 0.0, None)
        # the height of the surface above the sediment level, which new space must exceed
        # before sediment collects (zero without a level)
        self.offset = np.zeros_like(self.surface)
        if self.infill.sediment == "to_level":
            assert self.level is not None
            self.offset = np.clip(self.surface - self.level, 0.0, None)

    def state(self, w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Sediment h_s, water change h_w - h_w0 and total load L (Pa) for *w*
        (the buried root of the load, if any, is :meth:`root`)."""
        rule = self.infill.sediment
        top = self.surface - w
        if rule == "none":
            sediment = np.zeros_like(w)
        elif rule == "full":
            sediment = np.clip(w, 0.0, None)
        elif self.infill.fill_existing:
            assert self.level is not None
            sediment = np.clip(self.level - top, 0.0, None)
        else:
            sediment = np.clip(w - self.offset, 0.0, None)
        if self.mask is not None and rule != "none":
            sediment *= self.mask
        root = None
        if self.footprint is not None:  # under a buried load: its top stays, its base sinks
            root = w * self.footprint
            sediment *= 1.0 - self.footprint
            top = top + root
        water = np.clip(self.infill.sea_level - (top + sediment), 0.0, None) - self.water0
        total = self.load + self.gravity * (
            self.infill.sediment_density * sediment + self.infill.water_density * water
        )
        if self.sediment_mass is not None and rule != "none":
            assert self.window is not None
            fill = sediment[self.window]
            mass, _ = self._fill_mass(fill)
            total[self.window] += self.gravity * (mass - self.infill.sediment_density * fill)
        if root is not None:
            total += self.gravity * self.load_density * root
        return sediment, water, total

    def _fill_mass(self, fill: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``sediment_mass(fill)``, checked: two finite arrays shaped like *fill*, the
        mass >= 0 (a caller's function that breaks this is named, not traced back)."""
        assert self.sediment_mass is not None
        try:
            mass, top = (np.asarray(v, dtype=np.float64) for v in self.sediment_mass(fill))
        except (TypeError, ValueError) as error:
            raise InputError(
                f"sediment_mass must return (mass, density) arrays for a fill thickness: {error}"
            ) from error
        for name, value in (("mass", mass), ("density", top)):
            if value.shape != fill.shape:
                raise InputError(
                    f"sediment_mass returned a {name} of shape {value.shape}; the fill "
                    f"thickness it was given has shape {fill.shape}"
                )
            if not np.all(np.isfinite(value)):
                raise InputError(f"sediment_mass returned NaN or infinite {name} values")
        if mass.min(initial=0.0) < 0.0:
            raise InputError(f"sediment_mass returned a negative mass ({mass.min()!r} kg m^-2)")
        return mass, top

    def root(self, w: np.ndarray) -> np.ndarray | None:
        """Load material filling the depression under a buried load (m), or None."""
        return None if self.footprint is None else w * self.footprint

    def marginal_density(self, w: np.ndarray, sediment: np.ndarray) -> np.ndarray:
        """Density that fills the next bit of depression in each cell (dL/dw / g)."""
        top = self.surface - w + sediment
        density = np.where(top < self.infill.sea_level, self.infill.water_density, 0.0)
        density = np.where(sediment > 0.0, self.infill.sediment_density, density)
        if self.sediment_mass is not None and self.infill.sediment != "none":
            assert self.window is not None
            fill = sediment[self.window]
            _, top = self._fill_mass(fill)
            density[self.window] = np.where(fill > 0.0, top, density[self.window])
        if self.footprint is not None:
            density = np.where(self.footprint > 0, self.load_density, density)
        return density


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    # einsum: single-threaded and as fast as a threaded BLAS dot on a busy machine
    return float(np.einsum("i,i->", a, b))


class _Anderson:
    """Anderson (type II) mixing over the last *depth* steps (Walker & Ni 2011).

    Keeps the differences of successive residuals f = G(w) - w and images G(w),
    and the Gram matrix of the residual differences, updated one row per step;
    the new iterate is G(w) - dG gamma with gamma minimising |f - dF gamma|
    (solved through the small normal equations). A *companion* of each image (the
    operator applied to it) is mixed with the same coefficients, when given.
    """

    def __init__(self, depth: int) -> None:
        self.depth = depth
        self.df: list[np.ndarray] = []
        self.dg: list[np.ndarray] = []
        self.dc: list[np.ndarray | None] = []  # companion differences, aligned with dg
        self.gram = np.zeros((0, 0))
        self.last: tuple[np.ndarray, np.ndarray, np.ndarray | None] | None = None

    def clear(self) -> None:
        self.df, self.dg, self.dc, self.gram, self.last = [], [], [], np.zeros((0, 0)), None

    def step(
        self, f: np.ndarray, g: np.ndarray, companion: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray | None]:
        """The next iterate, and the mixed companion (None unless every remembered
        step had one)."""
        if self.last is not None:
            new_df = f - self.last[0]
            self.df.append(new_df)
            self.dg.append(g - self.last[1])
            before = self.last[2]
            self.dc.append(None if companion is None or before is None else companion - before)
            row = np.array([_dot(column, new_df) for column in self.df])
            m = len(self.df)
            gram = np.zeros((m, m))
            gram[: m - 1, : m - 1] = self.gram
            gram[m - 1, :] = gram[:, m - 1] = row
            if m > self.depth:
                self.df.pop(0)
                self.dg.pop(0)
                self.dc.pop(0)
                gram = gram[1:, 1:]
            self.gram = gram
        self.last = (f, g, companion)
        if not self.df:
            return g, companion
        rhs = np.array([_dot(column, f) for column in self.df])
        gamma, *_ = np.linalg.lstsq(self.gram, rhs, rcond=1e-12)
        out = _combine(g, gamma, self.dg)
        known = [column for column in self.dc if column is not None]
        mixed = None
        if companion is not None and len(known) == len(self.dc):
            mixed = _combine(companion, gamma, known)
        return out, mixed


def _combine(base: np.ndarray, gamma: np.ndarray, columns: list[np.ndarray]) -> np.ndarray:
    """base - sum_i gamma_i columns_i (a new array)."""
    out = base.copy()
    scratch = np.empty_like(base)
    for coefficient, column in zip(gamma, columns, strict=True):
        np.multiply(column, coefficient, out=scratch)
        out -= scratch
    return out


_INNER_SHARE = 0.1
"""An iterative inner solve is made accurate to this share of the last fixed-point
update (rms, m), and of the tolerance at the end."""


def _iterate(
    column: _Column,
    inner: InnerSolver,
    shift: float,
    tolerance: float,
    max_iterations: int,
    acceleration: str,
    progress: Progress | None,
) -> tuple[np.ndarray, int, float]:
    """Shifted fixed point (with optional Anderson mixing) to max|update| < tolerance.

    An iterative inner solve starts from the current iterate and is made only as
    accurate as the iteration needs: to :data:`_INNER_SHARE` of the last update (loose
    at first); it stops once an update is below the tolerance and the inner solve that
    gave it reached an rms error below the tolerance (as it reports, not as asked for:
    a loose solve that happened to land close stops the iteration too)."""
    cg = shift * column.gravity
    w = np.zeros(inner.shape)
    product = None  # the operator applied to w, when the inner solve gives it
    mixer = _Anderson(_ANDERSON_DEPTH)
    best = math.inf
    update = math.inf
    for iteration in range(1, max_iterations + 1):
        _, _, total = column.state(w)
        total -= cg * w
        accuracy = _INNER_SHARE * max(update, tolerance)
        # start from the iterate: the mixed one is Anderson's guess of the fixed point, and
        # took ~25 % fewer inner iterations than the previous image (measured, sediment fill);
        # its product with the operator is the same mix of the images' products (one
        # product with the operator less per step)
        start = w if iteration > 1 else None
        image = inner.solve(total, start=start, accuracy=accuracy, start_product=product)
        image_product = inner.last_product
        residual = image - w
        update = float(np.abs(residual).max())
        if progress is not None:
            progress(iteration, max_iterations)
        log.debug(
            "infill iteration %d: max update %.3g m, inner error %.3g m (asked %.3g)",
            iteration,
            update,
            inner.last_error,
            accuracy,
        )
        if update < tolerance and (not inner.iterative or inner.last_error <= tolerance):
            return image, iteration, update
        if acceleration == "none":
            w, product = image, image_product
            continue
        if update > 2.0 * best:  # mixing went astray: restart from the plain step
            mixer.clear()
        best = min(best, update)
        flat = None if image_product is None else image_product.ravel()
        mixed, product = mixer.step(residual.ravel(), image.ravel(), flat)
        w = mixed.reshape(inner.shape)
        product = None if product is None else product.reshape(inner.shape)
    raise ConvergenceError(
        f"infill iteration did not converge: after {max_iterations} iterations the "
        f"deflection still changed by {update:.3g} m (tolerance {tolerance:.3g} m; "
        f"shift density {shift:.6g} kg/m^3, acceleration {acceleration!r}); raise "
        "max_iterations or loosen tolerance, and keep the default shift (half the densest fill)"
    )


def solve_with_infill(
    load: xr.DataArray | xr.Dataset,
    plate: Plate,
    initial_surface: xr.DataArray | float | None = None,
    infill: Infill | None = None,
    *,
    method: str = "auto",
    edges: str = "infinite",
    inplane_force_x: float = 0.0,
    inplane_force_y: float = 0.0,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = 1e-4,
    max_iterations: int = 300,
    shift: float | None = None,
    acceleration: str = "anderson",
    inner: Callable[[float, float], InnerSolver] | None = None,
    cache: InnerSolverCache | None = None,
    sediment_mass: SedimentMass | None = None,
    progress: Progress | None = None,
) -> xr.Dataset:
    """Flexure with a spatially varying, self-consistent infill.

    Solves  B(w) + rho_m g w = q + g [rho_s h_s(w) + rho_w (h_w(w) - h_w0)]  with
    w (m) and q (Pa) positive **downward**, in-plane forces positive in **tension**
    (module docstring; PHYSICS.md section 5).

    Parameters
    ----------
    load : xarray.DataArray or xarray.Dataset
        The applied load q (Pa, positive down) relative to the initial state, or
        a Dataset from :func:`gridflex.load_from_elevation` /
        :func:`gridflex.load_from_layers` (its ``load`` and ``initial_surface``
        are used, and its load geometry is kept for :func:`gridflex.model_gravity`).
    plate : Plate
        A constant te (spectral inner solve) or a te grid on the load grid
        (finite-difference inner solve; 0 marks broken cells). ``plate.infill_density``
        is not used: the fill is decided per cell.
    initial_surface : xarray.DataArray or float, optional
        Elevation of the top of the solid before flexure, load included (m,
        positive up). Required unless *load* is a Dataset.
    infill : Infill, optional
        The fill rule; water/air by default.
    method : {"auto", "spectral", "finite-difference"}, default "auto"
        The inner solve: ``"auto"`` takes the FFT for a constant te and finite
        differences (set up once, each step started from the current iterate) for a
        te grid or the edges "clamped" and "free".
    edges : {"infinite", "periodic", "clamped", "free"}, default "infinite"
        As in :func:`gridflex.solve` (the last two by finite differences).
    inplane_force_x, inplane_force_y : float, default 0
        In-plane forces (N m^-1, tension positive); spectral inner solve only.
    pad_factor : float, default 4.5
        Padding per side in decay lengths of the weakest fill.
    tolerance : float, default 1e-4
        Stop when one more fixed-point step changes w by less than this anywhere
        on the working domain (m).
    max_iterations : int, default 300
        Then raise :class:`ConvergenceError`.
    shift : float, optional
        Shift density c (kg m^-3) of eq. 5.3; default rho_f,max / 2. Must lie in
        [0, rho_m).
    acceleration : {"anderson", "none"}, default "anderson"
        Anderson mixing of the last 5 steps, or the plain shifted iteration.
    inner : callable, optional
        ``inner(stiffness, min_stiffness) -> InnerSolver``, to replace the inner solve
        *method* picks.
    cache : InnerSolverCache, optional
        Where the finite-difference set-up is kept for the next call with the same te
        grid, densities and options (and taken from, when it holds that one); the same
        deflection as without it, minus the set-up time.
    sediment_mass : callable, optional
        ``sediment_mass(fill) -> (mass, density)``: the mass per area (kg m^-2) of a
        sediment fill of thickness *fill* (m, on the grid, >= 0) and the density of its
        top (kg m^-3, d mass / d fill), for a fill whose density is not one number (a
        compacting deposit, :mod:`gridflex.basin.staging`); ``infill.sediment_density``
        then only sets the shift and the padding (and the fill of the padding).
        ``infill_density`` holds the density of the fill's top.
    progress : callable, optional
        Called as ``progress(iteration, max_iterations)``.

    Returns
    -------
    xarray.Dataset
        ``deflection`` (m, down), ``load`` (Pa, the applied load), ``moat_fill``
        (m, thickness of sediment and water added in the depression, >= 0),
        ``fill_sediment`` (m), ``fill_water`` (m, signed: negative where a
        forebulge displaced water), ``infill_density`` (kg m^-3, what fills the
        next bit of depression in each cell: sediment, water or air),
        ``fill_load`` (Pa), ``initial_surface`` and ``surface`` (m, final solid
        surface = initial surface - deflection + fill_sediment); the load
        geometry of a Dataset *load*. Attributes: ``iterations``,
        ``fixed_point_update`` (m), ``tolerance``, ``shift_density``,
        ``acceleration``, ``force_balance_residual`` (relative, whole working
        domain), ``inner_solver``, ``infill_*`` parameters; with finite differences
        also ``inner_iterations`` (conjugate-gradient iterations of all steps),
        ``inner_solves``, ``residual`` and ``inner_tolerance`` (relative residual
        reached and asked for in the last step), ``setup_seconds``, ``preconditioner``,
        ``blend_levels``, ``band_nodes``, ``band_width`` and ``locally_compensated_load``.

    Raises
    ------
    InputError
        Bad grids or parameters; a te grid with ``method="spectral"``; in-plane
        forces with finite differences; edges the inner solve cannot represent.
    ConvergenceError
        If the tolerance is not reached in *max_iterations*, or an inner
        finite-difference solve does not converge.
    """
    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    infill = Infill() if infill is None else infill
    if not isinstance(infill, Infill):
        raise InputError(f"infill must be a gridflex.Infill, got {type(infill).__name__}")
    given = _unpack_load(load, initial_surface)
    options = _Options.checked(
        method,
        edges,
        inplane_force_x,
        inplane_force_y,
        pad_factor,
        tolerance,
        max_iterations,
        acceleration,
    )
    if plate.is_variable:
        assert isinstance(plate.te, xr.DataArray)
        check_same_grid(plate.te, given.load, "te grid")
    footprint, load_density = _buried_load(infill, given)
    rho_max = infill.max_density(load_density)
    c = _shift_density(rho_max, plate.mantle_density, shift)
    solver = _inner_solver(given.spec, plate, rho_max, c, options, inner, cache)
    values = np.asarray(given.load.values, dtype=np.float64)
    if options.edges == "infinite":
        check_edge_load(values, float(np.abs(values).sum()))
    column = _working_column(
        given, infill, plate.gravity, solver, footprint, load_density, options, sediment_mass
    )
    w, iterations, update = _iterate(
        column, solver, c, options.tolerance, options.max_iterations, options.acceleration, progress
    )
    described = solver.describe()
    inner_name = described.get("inner_solver", type(solver).__name__)
    attrs: dict[str, Any] = {
        "solver": f"{inner_name} with self-consistent infill",
        **described,
        **options.describe(solver.shape),
        "iterations": iterations,
        "fixed_point_update": update,
        "tolerance": options.tolerance,
        "shift_density": float(c),
        "acceleration": options.acceleration,
    }
    return _infill_result(given, plate, infill, column, w, solver, attrs)


@dataclass(frozen=True)
class _GivenLoad:
    """The load as given: q (Pa), the initial surface (m) and what a load Dataset adds."""

    load: xr.DataArray
    spec: GridSpec
    surface: np.ndarray
    extra: dict[str, xr.Variable]
    extra_attrs: dict[str, Any]


def _unpack_load(
    load: xr.DataArray | xr.Dataset, initial_surface: xr.DataArray | float | None
) -> _GivenLoad:
    """Split a load Dataset into q, its initial surface and the geometry kept in the result."""
    extra: dict[str, xr.Variable] = {}
    extra_attrs: dict[str, Any] = {}
    if isinstance(load, xr.Dataset):
        if "load" not in load or "initial_surface" not in load:
            raise InputError("a load Dataset must hold 'load' and 'initial_surface' variables")
        if initial_surface is None:
            initial_surface = load["initial_surface"]
        for name in ("reference_surface", "load_height"):
            if name in load:
                extra[name] = load[name].variable
        if "load_density" in load.attrs:
            extra_attrs["load_density"] = float(load.attrs["load_density"])
        load = load["load"]
    spec = check_grid(load, "load")
    if initial_surface is None:
        raise InputError("initial_surface (m, positive up, load included) is required")
    surface = grid_values(initial_surface, load, "initial_surface")
    return _GivenLoad(load, spec, surface, extra, extra_attrs)


@dataclass(frozen=True)
class _Options:
    """The checked solver options of :func:`solve_with_infill`."""

    method: str
    edges: str
    force_x: float
    force_y: float
    pad_factor: float
    tolerance: float
    max_iterations: int
    acceleration: str

    @classmethod
    def checked(
        cls,
        method: Any,
        edges: Any,
        force_x: Any,
        force_y: Any,
        pad_factor: Any,
        tolerance: Any,
        max_iterations: Any,
        acceleration: Any,
    ) -> _Options:
        """The options as given to :func:`solve_with_infill`, checked and converted."""
        return cls(
            check_choice("method", method, METHODS),
            check_choice("edges", edges, EDGES),
            check_inplane_force("inplane_force_x", force_x),
            check_inplane_force("inplane_force_y", force_y),
            check_number("pad_factor", pad_factor, minimum=0.0),
            check_number("tolerance", tolerance, unit="m", minimum=0.0, strict=True),
            check_integer("max_iterations", max_iterations, minimum=1),
            check_choice("acceleration", acceleration, ACCELERATIONS),
        )

    def describe(self, shape: tuple[int, int]) -> dict[str, Any]:
        """Output attributes of the padding and forces on a working domain of *shape*."""
        return {
            "edges": self.edges,
            "padded_shape": np.array(shape, dtype=np.int64),
            "pad_factor": self.pad_factor if self.edges == "infinite" else 0.0,
            "inplane_force_x": self.force_x,
            "inplane_force_y": self.force_y,
        }


def _buried_load(infill: Infill, given: _GivenLoad) -> tuple[np.ndarray | None, float]:
    """Footprint (1 under the load, 0 elsewhere) and density (kg/m^3) of a buried load;
    (None, 0) unless ``infill.load_buried``."""
    if not infill.load_buried:
        return None, 0.0
    if "load_height" not in given.extra or "load_density" not in given.extra_attrs:
        raise InputError(
            "infill load_buried=True needs a load Dataset with 'load_height' "
            "and a single load_density (gridflex.load_from_elevation)"
        )
    footprint = (np.asarray(given.extra["load_height"].values) > 0.0).astype(np.float64)
    return footprint, float(given.extra_attrs["load_density"])


def _shift_density(rho_max: float, rho_m: float, shift: float | None) -> float:
    """The shift density c (kg/m^3) of eq. 5.3: *shift*, or half the densest fill."""
    if rho_max >= rho_m:
        raise InputError(
            f"the densest infill ({rho_max!r} kg/m^3) must be less than mantle_density "
            f"({rho_m!r}); otherwise nothing restores the plate"
        )
    if shift is None:
        return 0.5 * rho_max
    wanted = f"shift must be a density in [0, mantle_density={rho_m!r}) kg/m^3, got {shift!r}"
    try:
        c = check_number("shift", shift, unit="kg/m^3", minimum=0.0)
    except InputError as exc:
        raise InputError(wanted) from exc
    if c >= rho_m:
        raise InputError(wanted)
    return c


def _inner_solver(
    spec: GridSpec,
    plate: Plate,
    rho_max: float,
    shift: float,
    options: _Options,
    inner: Callable[[float, float], InnerSolver] | None,
    cache: InnerSolverCache | None = None,
) -> InnerSolver:
    """The inner solver for the shift *shift* (kg/m^3): *inner*'s, or the one
    ``options.method`` picks for the plate (a finite-difference one through *cache*)."""
    stiffness = (plate.mantle_density - shift) * plate.gravity
    min_stiffness = (plate.mantle_density - rho_max) * plate.gravity
    if inner is not None:
        return inner(stiffness, min_stiffness)
    method = options.method
    if method == "auto":
        finite = plate.is_variable or options.edges not in SPECTRAL_EDGES
        method = "finite-difference" if finite else "spectral"
    if method == "finite-difference":
        if options.force_x or options.force_y:
            raise InputError(
                "in-plane forces are not available with the finite-difference infill solve "
                f"(a te grid, or method='finite-difference'); got inplane_force_x="
                f"{options.force_x!r}, inplane_force_y={options.force_y!r}"
            )
        return finite_difference_inner(
            spec,
            plate.rigidity_grid(spec.shape),
            stiffness,
            min_stiffness,
            plate.poisson_ratio,
            edges=options.edges,
            pad_factor=options.pad_factor,
            cache=cache,
        )
    if plate.is_variable:
        raise InputError(
            "method='spectral' needs a constant te; a te grid needs "
            "method='finite-difference' or 'auto'"
        )
    if options.edges not in SPECTRAL_EDGES:
        raise InputError(
            f"edges={options.edges!r} needs method='finite-difference'; the spectral solver "
            f"takes {', '.join(map(repr, SPECTRAL_EDGES))}"
        )
    return spectral_inner(
        spec,
        float(plate.rigidity),
        stiffness,
        min_stiffness,
        force_x=options.force_x,
        force_y=options.force_y,
        periodic=(options.edges == "periodic"),
        pad_factor=options.pad_factor,
    )


def _working_column(
    given: _GivenLoad,
    infill: Infill,
    gravity: float,
    solver: InnerSolver,
    footprint: np.ndarray | None,
    load_density: float,
    options: _Options,
    sediment_mass: SedimentMass | None = None,
) -> _Column:
    """The column model on the solver's working domain (the grid values continued from
    its edges into the padding, where there is no load)."""
    shape, window = solver.shape, solver.window
    load = given.load
    level = mask = None
    if infill.sediment == "to_level":
        assert infill.sediment_level is not None
        level = _extend(grid_values(infill.sediment_level, load, "sediment_level"), shape, window)
    if infill.sediment_mask is not None and infill.sediment != "none":
        check_same_grid(infill.sediment_mask, load, "sediment_mask")
        mask = _extend(
            np.asarray(infill.sediment_mask.values, dtype=bool).astype(np.float64), shape, window
        )
    # column grids and per-iteration temporaries (~12 working grids), plus the Anderson
    # history (images, residuals and the images' products: 3 per remembered step, and
    # the last three and the mixed pair)
    grids = 12 + (3 * _ANDERSON_DEPTH + 6 if options.acceleration == "anderson" else 0)
    check_memory(
        8.0 * shape[0] * shape[1] * grids,
        f"infill iteration on a working grid of {shape[0]} x {shape[1]}",
    )
    load_work = np.zeros(shape)
    load_work[window] = np.asarray(load.values, dtype=np.float64)
    footprint_work = None
    if footprint is not None:  # no load beyond the grid
        footprint_work = np.zeros(shape)
        footprint_work[window] = footprint
    surface = _extend(given.surface, shape, window)
    return _Column(
        load_work,
        surface,
        infill,
        gravity,
        level,
        mask,
        footprint_work,
        load_density,
        sediment_mass,
        window,
    )


_FILL_VARIABLES = {
    "moat_fill": (
        "m",
        "thickness of infill (sediment and water) in the flexural depression",
    ),
    "fill_sediment": ("m", "sediment fill thickness"),
    "fill_water": ("m", "change of water depth (negative where displaced by uplift)"),
    "infill_density": ("kg m-3", "density of the material filling the depression"),
    "fill_load": ("Pa", "vertical stress of the fill (positive downward)"),
    "initial_surface": ("m", "surface before flexure, load included (positive up)"),
    "load_root": ("m", "part of the buried load below its pre-flexure base"),
    "surface": ("m", "final surface: initial surface - deflection + sediment fill"),
}
"""Units and long names of the fill variables of a :func:`solve_with_infill` result."""


def _infill_result(
    given: _GivenLoad,
    plate: Plate,
    infill: Infill,
    column: _Column,
    w: np.ndarray,
    solver: InnerSolver,
    attrs: dict[str, Any],
) -> xr.Dataset:
    """Wrap the converged deflection *w* (working domain of *solver*) and its fill in a
    Dataset; the force balance is weighted by the solver's nodal areas."""
    sediment, water, total = column.state(w)
    root = column.root(w)
    g = plate.gravity
    window, area = solver.window, solver.area
    weighted = total if area is None else area * total
    magnitude = float(np.abs(weighted).sum())
    support = float(w.sum()) if area is None else float((area * w).sum())
    balance = (
        abs(plate.mantle_density * g * support - float(weighted.sum())) / magnitude
        if magnitude
        else 0.0
    )
    log.info(
        "infill converged in %d iterations (update %.3g m, balance %.2g)",
        attrs["iterations"],
        attrs["fixed_point_update"],
        balance,
    )
    attrs = {
        **attrs,
        "force_balance_residual": balance,
        "plate_infill_density": "spatially varying (variable infill_density)",
    }
    attrs.update({f"infill_{k}": v for k, v in infill.describe().items()})
    attrs.update(given.extra_attrs)
    w_out = np.ascontiguousarray(w[window])
    result = result_dataset(given.load, w_out, plate, attrs)
    result.attrs["plate_infill_density"] = attrs["plate_infill_density"]
    fill_s, fill_w = sediment[window], water[window]
    final = given.surface - w_out + fill_s
    fields = {
        "moat_fill": np.clip(fill_s + fill_w, 0.0, None),
        "fill_sediment": fill_s,
        "fill_water": fill_w,
        "infill_density": column.marginal_density(w, sediment)[window],
        "fill_load": total[window] - np.asarray(given.load.values, dtype=np.float64),
        "initial_surface": given.surface,
    }
    if root is not None:
        final = final + root[window]
        fields["load_root"] = root[window]
    fields["surface"] = final
    for name, values in fields.items():
        units, long_name = _FILL_VARIABLES[name]
        result[name] = (("y", "x"), values, {"units": units, "long_name": long_name})
    for name, variable in given.extra.items():
        result[name] = variable
    return result
