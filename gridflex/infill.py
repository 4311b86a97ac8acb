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
solver for a constant te (:func:`spectral_inner`), or later a variable-te
finite-difference operator. The FFT working domain is the padded grid; the
column model is applied in the padding too (surface, level and mask extended
from the nearest edge, no load), so force balance holds on the whole domain.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np
import xarray as xr

from gridflex.errors import ConvergenceError, InputError
from gridflex.grid import GridSpec, check_grid, check_same_grid, grid_values
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, SpectralProblem

__all__ = [
    "ACCELERATIONS",
    "SEDIMENT_MODES",
    "Infill",
    "InnerSolver",
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
Progress = Callable[[int, int], Any]


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
    water_density: float = 1030.0
    sediment: str = "none"
    sediment_density: float = 2400.0
    sediment_level: Level | None = None
    fill_existing: bool = False
    sediment_mask: xr.DataArray | None = None
    load_buried: bool = False

    def __post_init__(self) -> None:
        if self.sediment not in SEDIMENT_MODES:
            raise InputError(
                f"infill sediment must be one of {', '.join(map(repr, SEDIMENT_MODES))}; "
                f"got {self.sediment!r}"
            )
        for name in ("sea_level", "water_density", "sediment_density"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not math.isfinite(value):
                raise InputError(f"infill {name} must be a finite number, got {value!r}")
            object.__setattr__(self, name, float(value))
        for name in ("water_density", "sediment_density"):
            if getattr(self, name) < 0:
                raise InputError(f"infill {name} must be >= 0 kg/m^3, got {getattr(self, name)!r}")
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
        if self.sediment == "to_level":
            level = self.sediment_level
            out["sediment_level"] = "grid" if isinstance(level, xr.DataArray) else float(level)
        out["load_buried"] = int(self.load_buried)
        return out


class InnerSolver(Protocol):
    """A linear plate solve (B + k0) w = rhs on a working domain.

    Attributes
    ----------
    shape : tuple of int
        Shape of the working domain (the padded FFT grid, or the grid itself).
    window : tuple of slice
        Where the output grid lies inside the working domain.
    stiffness : float
        k0 (Pa m^-1), the constant Winkler coefficient of the operator.
    """

    shape: tuple[int, int]
    window: tuple[slice, slice]
    stiffness: float

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """w (m, positive down) on the working domain for *rhs* (Pa) on it."""
        ...


@dataclass(frozen=True)
class _SpectralInner:
    problem: SpectralProblem
    shape: tuple[int, int]
    window: tuple[slice, slice]
    stiffness: float

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        # the per-solve balance is not used (the outer loop checks its own), so a dummy
        # magnitude saves a pass over the grid
        w, _ = self.problem.deflection(rhs, 1.0)
        return w


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


def _extend(values: np.ndarray, shape: tuple[int, int], window: tuple[slice, slice]) -> np.ndarray:
    """Put *values* into *window* of a *shape* array, continuing its edges outward."""
    if values.shape == shape:
        return values
    wy, wx = window
    pads = ((wy.start, shape[0] - wy.stop), (wx.start, shape[1] - wx.stop))
    return np.pad(values, pads, mode="edge")


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

    def __post_init__(self) -> None:
        self.water0 = np.clip(self.infill.sea_level - self.surface, 0.0, None)
        if self.infill.sediment == "to_level":
            assert self.level is not None
            # space below the level that sediment may fill at w = 0 (fill_existing) or
            # the height of the surface above the level, which new space must exceed
            self.offset = np.clip(self.surface - self.level, 0.0, None)
        else:
            self.offset = None

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
        root = self.root(w)
        if root is not None:  # under a buried load: its top stays, its base sinks
            sediment *= 1.0 - self.footprint
            top = top + root
        water = np.clip(self.infill.sea_level - (top + sediment), 0.0, None) - self.water0
        total = self.load + self.gravity * (
            self.infill.sediment_density * sediment + self.infill.water_density * water
        )
        if root is not None:
            total += self.gravity * self.load_density * root
        return sediment, water, total

    def root(self, w: np.ndarray) -> np.ndarray | None:
        """Load material filling the depression under a buried load (m), or None."""
        return None if self.footprint is None else w * self.footprint

    def marginal_density(self, w: np.ndarray, sediment: np.ndarray) -> np.ndarray:
        """Density that fills the next bit of depression in each cell (dL/dw / g)."""
        top = self.surface - w + sediment
        density = np.where(top < self.infill.sea_level, self.infill.water_density, 0.0)
        density = np.where(sediment > 0.0, self.infill.sediment_density, density)
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
    (solved through the small normal equations).
    """

    def __init__(self, depth: int) -> None:
        self.depth = depth
        self.df: list[np.ndarray] = []
        self.dg: list[np.ndarray] = []
        self.gram = np.zeros((0, 0))
        self.last: tuple[np.ndarray, np.ndarray] | None = None

    def clear(self) -> None:
        self.df, self.dg, self.gram, self.last = [], [], np.zeros((0, 0)), None

    def step(self, f: np.ndarray, g: np.ndarray) -> np.ndarray:
        if self.last is not None:
            new_df = f - self.last[0]
            self.df.append(new_df)
            self.dg.append(g - self.last[1])
            row = np.array([_dot(column, new_df) for column in self.df])
            m = len(self.df)
            gram = np.zeros((m, m))
            gram[: m - 1, : m - 1] = self.gram
            gram[m - 1, :] = gram[:, m - 1] = row
            if m > self.depth:
                self.df.pop(0)
                self.dg.pop(0)
                gram = gram[1:, 1:]
            self.gram = gram
        self.last = (f, g)
        if not self.df:
            return g
        rhs = np.array([_dot(column, f) for column in self.df])
        gamma, *_ = np.linalg.lstsq(self.gram, rhs, rcond=1e-12)
        out = g.copy()
        scratch = np.empty_like(g)
        for coefficient, column in zip(gamma, self.dg, strict=True):
            np.multiply(column, coefficient, out=scratch)
            out -= scratch
        return out


def _iterate(
    column: _Column,
    inner: InnerSolver,
    shift: float,
    tolerance: float,
    max_iterations: int,
    acceleration: str,
    progress: Progress | None,
) -> tuple[np.ndarray, int, float]:
    """Shifted fixed point (with optional Anderson mixing) to max|update| < tolerance."""
    cg = shift * column.gravity
    w = np.zeros(inner.shape)
    mixer = _Anderson(_ANDERSON_DEPTH)
    best = math.inf
    update = math.inf
    for iteration in range(1, max_iterations + 1):
        _, _, total = column.state(w)
        total -= cg * w
        image = inner.solve(total)
        residual = image - w
        update = float(np.abs(residual).max())
        if progress is not None:
            progress(iteration, max_iterations)
        log.debug("infill iteration %d: max update %.3g m", iteration, update)
        if update < tolerance:
            return image, iteration, update
        if acceleration == "none":
            w = image
            continue
        if update > 2.0 * best:  # mixing went astray: restart from the plain step
            mixer.clear()
        best = min(best, update)
        w = mixer.step(residual.ravel(), image.ravel()).reshape(inner.shape)
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
    edges: str = "infinite",
    inplane_force_x: float = 0.0,
    inplane_force_y: float = 0.0,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = 1e-4,
    max_iterations: int = 300,
    shift: float | None = None,
    acceleration: str = "anderson",
    inner: Callable[[float, float], InnerSolver] | None = None,
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
        Constant te (spectral inner solve). ``plate.infill_density`` is not used:
        the fill is decided per cell.
    initial_surface : xarray.DataArray or float, optional
        Elevation of the top of the solid before flexure, load included (m,
        positive up). Required unless *load* is a Dataset.
    infill : Infill, optional
        The fill rule; water/air by default.
    edges : {"infinite", "periodic"}, default "infinite"
        As in :func:`gridflex.solve`.
    inplane_force_x, inplane_force_y : float, default 0
        In-plane forces (N m^-1, tension positive).
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
        ``inner(stiffness, min_stiffness) -> InnerSolver``, to replace the FFT solve
        (for example a variable-te finite-difference operator).
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
        domain), ``infill_*`` parameters.

    Raises
    ------
    InputError
        Bad grids or parameters; a variable te without *inner*.
    ConvergenceError
        If the tolerance is not reached in *max_iterations*.
    """
    # imported here: solve.py sits above this module and may dispatch to it
    from gridflex.engine import _check_force, check_edge_load, result_dataset

    if not isinstance(plate, Plate):
        raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
    infill = Infill() if infill is None else infill
    if not isinstance(infill, Infill):
        raise InputError(f"infill must be a gridflex.Infill, got {type(infill).__name__}")
    extra: dict[str, Any] = {}
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
    if edges not in ("infinite", "periodic"):
        raise InputError(f"edges must be 'infinite' or 'periodic', got {edges!r}")
    if acceleration not in ACCELERATIONS:
        raise InputError(f"acceleration must be one of {ACCELERATIONS!r}, got {acceleration!r}")
    force_x = _check_force("inplane_force_x", inplane_force_x)
    force_y = _check_force("inplane_force_y", inplane_force_y)
    if not (isinstance(tolerance, (int, float)) and tolerance > 0 and math.isfinite(tolerance)):
        raise InputError(f"tolerance must be a positive number of metres, got {tolerance!r}")
    if (
        isinstance(max_iterations, bool)
        or not isinstance(max_iterations, int)
        or max_iterations < 1
    ):
        raise InputError(f"max_iterations must be a whole number >= 1, got {max_iterations!r}")
    rho_m, g = plate.mantle_density, plate.gravity
    footprint_grid = None
    load_density = 0.0
    if infill.load_buried:
        if "load_height" not in extra or "load_density" not in extra_attrs:
            raise InputError(
                "infill load_buried=True needs a load Dataset with 'load_height' "
                "and a single load_density (gridflex.load_from_elevation)"
            )
        load_density = extra_attrs["load_density"]
        footprint_grid = (np.asarray(extra["load_height"].values) > 0.0).astype(np.float64)
    rho_max = infill.max_density(load_density)
    if rho_max >= rho_m:
        raise InputError(
            f"the densest infill ({rho_max!r} kg/m^3) must be less than mantle_density "
            f"({rho_m!r}); otherwise nothing restores the plate"
        )
    c = 0.5 * rho_max if shift is None else shift
    if not (isinstance(c, (int, float)) and 0.0 <= c < rho_m):
        raise InputError(f"shift must be a density in [0, mantle_density={rho_m!r}), got {shift!r}")
    stiffness = (rho_m - c) * g
    min_stiffness = (rho_m - rho_max) * g
    if inner is not None:
        solver = inner(stiffness, min_stiffness)
        inner_name = type(solver).__name__
    elif plate.is_variable:
        raise InputError(
            "solve_with_infill has no variable-te inner solver yet; give te as a number, "
            "or pass inner= a finite-difference operator"
        )
    else:
        solver = spectral_inner(
            spec,
            float(plate.rigidity),
            stiffness,
            min_stiffness,
            force_x=force_x,
            force_y=force_y,
            periodic=(edges == "periodic"),
            pad_factor=pad_factor,
        )
        inner_name = "spectral"
    values = np.asarray(load.values, dtype=np.float64)
    if edges == "infinite":
        check_edge_load(values, float(np.abs(values).sum()))
    shape, window = solver.shape, solver.window
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
    # history (2 per remembered step, and the last pair)
    grids = 12 + (2 * _ANDERSON_DEPTH + 4 if acceleration == "anderson" else 0)
    check_memory(
        8.0 * shape[0] * shape[1] * grids,
        f"infill iteration on a working grid of {shape[0]} x {shape[1]}",
    )
    load_work = np.zeros(shape)
    load_work[window] = values
    footprint = None
    if footprint_grid is not None:  # no load beyond the grid
        footprint = np.zeros(shape)
        footprint[window] = footprint_grid
    column = _Column(
        load_work, _extend(surface, shape, window), infill, g, level, mask, footprint, load_density
    )
    w, iterations, update = _iterate(
        column, solver, c, float(tolerance), max_iterations, acceleration, progress
    )
    sediment, water, total = column.state(w)
    root = column.root(w)
    magnitude = float(np.abs(total).sum())
    balance = abs(rho_m * g * float(w.sum()) - float(total.sum())) / magnitude if magnitude else 0.0
    log.info(
        "infill converged in %d iterations (update %.3g m, balance %.2g)",
        iterations,
        update,
        balance,
    )
    density = column.marginal_density(w, sediment)
    win = window
    w_out = np.ascontiguousarray(w[win])
    attrs: dict[str, Any] = {
        "solver": f"{inner_name} with self-consistent infill",
        "edges": edges,
        "padded_shape": np.array(shape, dtype=np.int64),
        "pad_factor": float(pad_factor) if edges == "infinite" else 0.0,
        "inplane_force_x": force_x,
        "inplane_force_y": force_y,
        "iterations": iterations,
        "fixed_point_update": update,
        "tolerance": float(tolerance),
        "shift_density": float(c),
        "acceleration": acceleration,
        "force_balance_residual": balance,
        "plate_infill_density": "spatially varying (variable infill_density)",
    }
    attrs.update({f"infill_{k}": v for k, v in infill.describe().items()})
    attrs.update(extra_attrs)
    result = result_dataset(load, w_out, plate, attrs)
    result.attrs["plate_infill_density"] = attrs["plate_infill_density"]
    dims = ("y", "x")
    fill_s, fill_w = sediment[win], water[win]
    result["moat_fill"] = (
        dims,
        np.clip(fill_s + fill_w, 0.0, None),
        {
            "units": "m",
            "long_name": "thickness of infill (sediment and water) in the flexural depression",
        },
    )
    result["fill_sediment"] = (dims, fill_s, {"units": "m", "long_name": "sediment fill thickness"})
    result["fill_water"] = (
        dims,
        fill_w,
        {"units": "m", "long_name": "change of water depth (negative where displaced by uplift)"},
    )
    result["infill_density"] = (
        dims,
        density[win],
        {"units": "kg m-3", "long_name": "density of the material filling the depression"},
    )
    result["fill_load"] = (
        dims,
        total[win] - values,
        {"units": "Pa", "long_name": "vertical stress of the fill (positive downward)"},
    )
    result["initial_surface"] = (
        dims,
        surface,
        {"units": "m", "long_name": "surface before flexure, load included (positive up)"},
    )
    final = surface - w_out + fill_s
    if root is not None:
        final = final + root[win]
        result["load_root"] = (
            dims,
            root[win],
            {"units": "m", "long_name": "part of the buried load below its pre-flexure base"},
        )
    result["surface"] = (
        dims,
        final,
        {"units": "m", "long_name": "final surface: initial surface - deflection + sediment fill"},
    )
    for name, variable in extra.items():
        result[name] = variable
    return result
