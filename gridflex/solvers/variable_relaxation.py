"""Time-dependent response of a plate of variable rigidity (a te grid).

The same state and the same methods as :class:`gridflex.solvers.viscous.SpectralRelaxation`
(``set_load``, ``set_equilibrium``, ``step``, ``deflection``, ``equilibrium``, ``rate``,
``shape``), so :class:`gridflex.glacial.response.ResponseStepper` drives either. The plate
operator K (bending with the nodal rigidity grid plus the restoring term Δρ g, PHYSICS.md
section 3.1) is that of :class:`~gridflex.solvers.finite_difference.FiniteDifferenceSolver`;
w and q are positive down, times in seconds.

* ``"relaxing"`` (Le Meur & Huybrechts 1996): dw/dt = (w_eq − w) / tau with K w_eq = a q.
  The equilibrium of each load is one finite-difference solve, started from the previous
  equilibrium and kept for the next step; the update over a step is then the same exact
  exponential as the spectral one, applied cell by cell (E = exp(−dt/tau),
  phi = tau (1 − E) / dt)::

      previous:  w1 = E w0 + (1 − E) w_eq(q1)
      linear:    w1 = E w0 + (phi − E) w_eq(q0) + (1 − phi) w_eq(q1)

* ``"half-space"`` (Bueler, Lingle & Brown 2007): C dw/dt + K w = a q, C = 2 eta |∇|
  (symbol 2 eta |k| on the doubly periodic solve grid). The two-stage, L-stable, stiffly
  accurate SDIRK method of order 2 (Alexander 1977, SIAM J. Numer. Anal. 14, 1006–1021,
  recalled from memory; gamma = 1 − 1/√2)::

      stage i:  (K + C / (gamma h)) Y_i = a q(t0 + c_i h) + C Z_i / (gamma h),
                Z_1 = w0,  Z_2 = w0 + (1 − gamma) h k_1,  k_i = (Y_i − Z_i) / (gamma h)
      c = (gamma, 1),  w1 = Y_2

  Both stages use one operator, K plus the constant-coefficient term C / (gamma h), so one
  finite-difference set-up (operator, blend with the term added to each level's symbol)
  serves every step of length h. A step longer than :data:`SUBSTEP_FRACTION` times the
  shortest relaxation time of the modes that carry much of the response is split into
  equal sub-steps. The k = 0 mode (C = 0) is the algebraic constraint K w = a q of the mean and
  is met exactly by the stiffly accurate last stage, as in the spectral update.

  Schemes measured against the exact per-mode update of the spectral code (constant D,
  the 1000 km disc of the Bueler et al. test on 100² cells of 40 km, load switched on at
  t = 0, 20 kyr; largest error over all times and cells, % of the peak deflection), steps
  of 100 / 500 / 1000 yr: backward Euler 1.1 % at 500 yr (first order; 0.2 % needs about
  100 yr), BDF2 0.12 / 1.7 / 4.6 %, SDIRK2 0.003 / 0.074 / 0.30 %, three-stage SDIRK3
  (order 3) 0.000 / 0.012 / 0.086 %. Crank–Nicolson was left out: its amplification
  tends to −1 for the stiff modes, and at k = 0 (C = 0) it makes the mean alternate
  about its equilibrium from step to step. SDIRK2 at two solves per step is as accurate
  per solve as SDIRK3 at these steps and keeps the sub-step rule simple.

Longest wavelengths (half-space with a margin): as in the spectral code, the net force,
first and second moments of the load relax on the infinite plane (:mod:`gridflex.solvers.far_field`,
here over a half-space without plate, beta = Δρ g), so the solve grid's k = 0 mode no
longer makes the whole grid follow the net load at once. The grid carries the rest of the
load plus Δρ g w_far − K w_far / a, the part of the plate's operator the far field leaves
out (w_far evaluated at each stage time from the exact far modes), so w = w_grid + w_far
solves C dw/dt + K w = a q with C free-space for the far part. Each solve takes
w_grid + w_far as its unknown (right-hand side a (q − q_far + Δρ g w_far) + S (Z + w_far),
the same equations without the product K w_far; see ``_driving``), so its tolerance is
relative to the whole deflection. Measured against the constant-te spectral path
(uniform te grid of 40 km, a 200 km disc growing over 3 kyr, 500 yr steps): 0.11 % of the
peak deflection, 0.14 % of the peak rate; te = 0: 0.005 %.

The uplift rate of the half-space is the model's own rate C⁻¹ (a q − K w) (the k = 0 mode
left out, as in the spectral code; with the far field it is zero), which is what the
stiffly accurate last stage
satisfies; that of the relaxing model is (w_eq − w) / tau.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.fft

from gridflex.errors import InputError
from gridflex.grid import GridSpec, wavenumbers_squared
from gridflex.memory import check_memory
from gridflex.solvers.blas_threads import single_threaded_blas
from gridflex.solvers.far_field import MOMENTS, FarField
from gridflex.solvers.finite_difference import (
    DEFAULT_MAX_ITERATIONS,
    FiniteDifferenceSolver,
    SolutionHistory,
)
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR
from gridflex.solvers.viscous import (
    DEFAULT_WIDTH_FACTOR,
    check_relaxation_settings,
    relaxation_pad_distance,
)

__all__ = [
    "PLATE_CUT",
    "SDIRK_GAMMA",
    "SUBSTEP_FRACTION",
    "TOLERANCE",
    "VariableRelaxation",
]

log = logging.getLogger(__name__)

SDIRK_GAMMA = 1.0 - 1.0 / math.sqrt(2.0)
"""Diagonal coefficient of the two-stage L-stable SDIRK method (Alexander 1977)."""

SUBSTEP_FRACTION = 0.35
"""Half-space: longest sub-step as a share of the shortest relaxation time of the modes that
carry much of the response (:func:`_fastest_carrying_time`: the longest wavelength of the
solve grid, and the wavelength below which the plate cuts the response to a tenth or
less). The time error grows like (h / tau)²: measured against the exact spectral update
with te = 0 (no spatial error; 48² cells of 20 km, a 200 km disc ramped on over 3 kyr,
10 kyr) 0.165 % of the peak at h = 0.47 tau1 with linear loads, 0.110 % with held loads,
0.013 % at 0.11 tau1; on the Bueler et al. disc (module docstring) 0.074 % at 0.49 tau1.
With only the longest wavelength's time, an ice cap with a sharp edge on te = 40 km over a
periodic 800 km grid (tests/glacial/test_ice_te_grid.py) lost 0.09 % of the peak in one
2000 yr step to the short waves of its edge; with the plate's cut it is sub-stepped.
At 0.35 the time error stays near 0.1 % of the peak, leaving room for the
finite-difference error in space."""

PLATE_CUT = 10.0
"""Ratio D k⁴ / Δρ g at which a wavelength counts as cut by the plate (its response a
tenth of the local one or less); see :data:`SUBSTEP_FRACTION`."""

TOLERANCE = {"half-space": 1e-5, "relaxing": 1e-5}
"""Tolerance of each finite-difference solve (the estimated relative error of w in the
energy norm, see :meth:`FiniteDifferenceSolver.solve_full`), by model. The stopping rule
certifies the iterate :data:`~gridflex.solvers.conjugate_gradient.ERROR_DELAY` steps back,
so the deflection returned is far more accurate than the tolerance. Measured on
tests/benchmarks/history.py te-grid (margin 10 -> 60 km, 128² cells of 10 km, 40 steps
of 100 yr) against the same run solved to 1e-10, largest error over all steps and cells
as a share of the peak deflection (iterations per solve): half-space 1e-6 / 1e-5 / 1e-4
4.2e-8 / 3.2e-7 / 4.8e-6 (4.43 / 3.51 / 2.63; the half-space solves for w_grid + w_far,
see ``_driving``); relaxing 1e-6 / 1e-5 / 1e-4 2.6e-9 / 2.6e-8 / 1.8e-7 (7.4 / 5.7 / 4.7).
At 1e-5 both stay well within 1e-6 of the peak (the target of a finite-difference solve)
and far below the half-space's time error (about 1e-3 of the peak,
:data:`SUBSTEP_FRACTION`); before the kept-solution starts and the difference-form
preconditioner the half-space at 1e-6 was 7.3e-7 off.

Tried and not kept: a stopping rule without the delay, certifying every iterate by
sqrt(r·M⁻¹r / (μ x·b)) with μ half the smallest eigenvalue of M⁻¹K (estimated once per
set-up by Lanczos from the CG coefficients of a random load: 0.56 relaxing, 0.64
half-space step on the margin). At equal accuracy it needed as many iterations: relaxing
1e-5 / 5e-6 / 3e-6 3.95 / 4.32 / 4.47 iterations per solve with errors 8.3e-7 / 5.5e-7 /
2.6e-7 of the peak, against 4.71 at 1.8e-7 with the delayed estimate at 1e-4; half-space
1e-6 / 2e-6 3.16 / 2.80 at 6.4e-7 / 1.6e-6, against 3.64 at 2.6e-7 and 2.74 at 2.9e-6.
The delay's extra iterations buy the pointwise accuracy the target asks for. More kept
equilibria for the relaxing start: 3 / 5 / 8 gave 5.71 / 5.57 / 5.42 iterations per
solve."""

STEP_MATCH = 1e-6
"""Half-space: a step within this relative difference of a cached step length is taken
with that length (a set-up is reused; the time error, at most 1e-6 of the step, is far
below the scheme's)."""

_CACHE_STEPS = 2
"""Finite-difference set-ups kept for different step lengths (each holds about 20 grids
of the solve shape)."""

_CACHED_EQUILIBRIA = 3
"""Equilibria kept: a load seen again is not solved again, and the next solve starts from
the best combination of as many (:class:`~gridflex.solvers.finite_difference.SolutionHistory`;
on the te-grid benchmark's margin, 7.9 -> 6.9 iterations per solve against the last one
alone)."""

_STAGE_HISTORY = 4
"""Half-space: stage solutions kept per step set-up (with their products) whose best
combination starts the next stage; they span the extrapolations in time of the scheme
(stage 1 from w + gamma h dw/dt needs the last three, stage 2 from w + h k_1 the last
two). Measured on tests/benchmarks/history.py te-grid (margin 10 -> 60 km, 128² cells of
10 km, 20 steps of 100 yr, tolerance 1e-5): 1 / 2 / 4 / 6 kept, 4.75 / 4.45 / 4.22 / 4.15
iterations per solve; each kept solution costs two grids of the solve shape."""


@dataclass(eq=False)
class VariableRelaxation:
    """State of a relaxing plate of variable rigidity on the finite-difference solve grid.

    Create it with :meth:`build`; advance it with :meth:`step`.

    Attributes
    ----------
    spec : GridSpec
        The output grid.
    model : str
        ``"half-space"`` or ``"relaxing"``.
    interpolation : str
        ``"linear"`` or ``"previous"``.
    viscosity : float
        eta (Pa s).
    relaxation_time : float
        tau (s).
    equilibrium_solver : FiniteDifferenceSolver
        K w = a q on the solve grid.
    max_substep : float
        Longest half-space sub-step (s); ``inf`` for the relaxing model.
    tolerance : float
        Relative residual of every solve.
    solves, iterations : int
        Finite-difference solves done so far and their conjugate-gradient iterations.
    """

    spec: GridSpec
    model: str
    interpolation: str
    viscosity: float
    relaxation_time: float
    equilibrium_solver: FiniteDifferenceSolver
    max_substep: float
    tolerance: float
    load: np.ndarray
    state: np.ndarray
    solves: int = 0
    iterations: int = 0
    _settings: dict[str, Any] = field(default_factory=dict, repr=False)
    _equilibria: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list, repr=False)
    _step_solvers: dict[float, FiniteDifferenceSolver] = field(default_factory=dict, repr=False)
    _histories: dict[float, SolutionHistory] = field(default_factory=dict, repr=False)
    _velocity: np.ndarray | None = field(default=None, repr=False)
    _inverse_viscous: np.ndarray | None = field(default=None, repr=False)
    far: FarField | None = field(default=None, repr=False)
    _far_grid: Any = field(default=None, repr=False)
    _far_basis: np.ndarray | None = field(default=None, repr=False)
    _stiffness: float = 0.0
    _far_cache: tuple[np.ndarray, np.ndarray] | None = field(default=None, repr=False)

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        rigidity: np.ndarray,
        stiffness: float,
        poisson_ratio: float,
        model: str,
        viscosity: float,
        relaxation_time: float,
        interpolation: str = "linear",
        periodic: bool = False,
        pad_factor: float = DEFAULT_PAD_FACTOR,
        width_factor: float = DEFAULT_WIDTH_FACTOR,
        *,
        tolerance: float | None = None,
        max_iterations: int = DEFAULT_MAX_ITERATIONS,
    ) -> VariableRelaxation:
        """Set up the equilibrium solve; start at rest with no load.

        Parameters
        ----------
        spec : GridSpec
            Output grid.
        rigidity : numpy.ndarray, shape (ny, nx)
            Nodal rigidity D (N m, >= 0; 0 for no plate).
        stiffness : float
            Δρ g (Pa m⁻¹, > 0).
        poisson_ratio : float
            ν.
        model : {"half-space", "relaxing"}
            Mantle model.
        viscosity : float
            eta (Pa s, > 0).
        relaxation_time : float
            tau (s, > 0).
        interpolation : {"linear", "previous"}
            Load variation within a step.
        periodic : bool
            The grid repeats (no margin); otherwise it is a window onto an unbounded
            plate in a margin of *pad_factor* flexural parameters of each edge's stiffest
            rigidity, and for the half-space at least *width_factor* grid widths
            (:func:`~gridflex.solvers.viscous.relaxation_pad_distance`).
        pad_factor, width_factor : float
            Margin, as above.
        tolerance : float, optional
            Relative residual of each finite-difference solve; by default
            :data:`TOLERANCE` of the model.
        max_iterations : int, default :data:`DEFAULT_MAX_ITERATIONS`
            Iteration limit of each solve.

        Raises
        ------
        InputError
            Bad parameter or rigidity grid, or not enough memory.
        """
        check_relaxation_settings(
            model, interpolation, stiffness, viscosity, relaxation_time, pad_factor, width_factor
        )
        if tolerance is None:
            tolerance = TOLERANCE[model]
        grid = np.asarray(rigidity, dtype=np.float64)
        if grid.shape != spec.shape:
            raise InputError(f"rigidity grid has shape {grid.shape}, the grid {spec.shape}")
        if not np.all(np.isfinite(grid)) or grid.min() < 0:
            raise InputError("rigidity grid must be finite and >= 0 N m everywhere")
        # the half-space's wide margin, as the spectral path pads (grid widths); the
        # plate's own margin (pad_factor flexural parameters) is the solver's rule
        margin = relaxation_pad_distance(spec, 0.0, stiffness, model, 0.0, width_factor)
        settings: dict[str, Any] = {
            "spec": spec,
            "rigidity": grid,
            "stiffness": stiffness,
            "poisson_ratio": poisson_ratio,
            "edges": "periodic" if periodic else "infinite",
            "pad_factor": pad_factor,
            "min_margin": 0.0 if periodic else margin,
            "tolerance": tolerance,
            "max_iterations": max_iterations,
        }
        equilibrium = _build_solver(settings)
        n = equilibrium.shape[0] * equilibrium.shape[1]
        # the step set-ups (about 22 grids each, as the solver counts, and two per kept
        # solution), the state, stage values and products of the half-space (8 grids) and
        # the far field's loads (one grid per moment)
        if model == "half-space":
            check_memory(
                8.0 * n * ((22 + 2 * _STAGE_HISTORY) * _CACHE_STEPS + 8 + MOMENTS),
                f"half-space time steps on a solve grid of {equilibrium.shape}",
            )
        max_substep = math.inf
        if model == "half-space":
            max_substep = SUBSTEP_FRACTION * _fastest_carrying_time(
                equilibrium.shape, spec, float(grid.max()), stiffness, viscosity
            )
        state_shape = equilibrium.shape if model == "half-space" else spec.shape
        far, far_grid, far_basis = None, None, None
        if model == "half-space" and not periodic:
            # the net force, first and second moments relax on the infinite plane over a half-space
            # without plate (beta = Δρ g); the grid carries the rest plus the plate's
            # bending of that far field (see _driving)
            shape = equilibrium.shape
            far = FarField.build(spec, shape, 0.0, stiffness, viscosity, whole_grid=True)
            far_grid = far.grid_interpolation(shape, spec.dy, spec.dx)
            far_basis = far.real_basis(shape)
        log.info(
            "%s model on a te grid: finite-difference solve grid %s, sub-steps <= %.3g s",
            model,
            equilibrium.shape,
            max_substep,
        )
        return cls(
            spec,
            model,
            interpolation,
            float(viscosity),
            float(relaxation_time),
            equilibrium,
            max_substep,
            float(tolerance),
            np.zeros(spec.shape),
            np.zeros(state_shape),
            _settings=settings,
            far=far,
            _far_grid=far_grid,
            _far_basis=far_basis,
            _stiffness=float(stiffness),
        )

    # -- grids ----------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int]:
        """Shape of the finite-difference solve grid."""
        return self.equilibrium_solver.shape

    def _window(self, full: np.ndarray) -> np.ndarray:
        """The grid's part of *full*, always a copy (callers add to it in place)."""
        return np.array(full[self.equilibrium_solver.window], order="C")

    def _embed(self, values: np.ndarray) -> np.ndarray:
        full = np.zeros(self.shape)
        full[self.equilibrium_solver.window] = values
        return full

    def _driving(
        self, load: np.ndarray, modes: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray | None]:
        """The load (Pa) on the solve grid that drives the grid's deflection w_grid plus the
        far field w_far: *load* embedded, less its far part (net force, first and second
        moments, carried by :attr:`far`), plus Δρ g w_far; and w_far (m, on the solve grid)
        of the radial *modes* (those in equilibrium with *load* by default), None when
        there is none.

        The grid's part solves (K + S) w_grid = a (q − q_far + Δρ g w_far) − K w_far + S Z
        (the plate's bending of the far field, which the far part leaves out); the solves
        take the unknown w_grid + w_far instead, whose right-hand side is this load plus
        S (Z + w_far) / a: the same equations (K, S linear), with no product K w_far (one
        operator product per stage saved; S folds into the product the stage takes
        anyway), and the tolerance relative to the whole deflection."""
        full = self._embed(load)
        if self.far is None:
            return full, None
        assert self._far_basis is not None
        sums = self.far.sums(load)
        full -= np.tensordot(sums, self._far_basis, axes=1)
        if modes is None:
            modes = sums[:, None] * self.far.cell_area * self.far.transfer
        if not modes.any():
            return full, None
        w_far = self._far_on_grid(modes)
        full += self._stiffness * w_far
        return full, w_far

    def _far_on_grid(self, modes: np.ndarray) -> np.ndarray:
        """The far field (m) of the radial *modes* on the whole solve grid; the last one is
        kept, since the second stage's modes are those of the state after the step, whose
        deflection is asked for next (one Hankel evaluation per step saved)."""
        assert self.far is not None
        cached = self._far_cache
        if cached is not None and np.array_equal(cached[0], modes):
            return cached[1]
        w_far = self.far.field_with(self._far_grid, modes).reshape(self.shape)
        self._far_cache = (modes.copy(), w_far)
        return w_far

    def _history(self, solver: FiniteDifferenceSolver) -> SolutionHistory:
        """The kept solutions of *solver*, keyed like :meth:`kept_solutions` (dropped with
        their step set-up, see :meth:`_step_solver`)."""
        if solver is self.equilibrium_solver:
            key, size = 0.0, _CACHED_EQUILIBRIA
        else:
            key = next(h for h, s in self._step_solvers.items() if s is solver)
            size = _STAGE_HISTORY
        history = self._histories.get(key)
        if history is None:
            history = self._histories[key] = SolutionHistory(size)
        return history

    def kept_solutions(self) -> list[tuple[float, SolutionHistory]]:
        """The kept solutions of every set-up in use (they start the next solves, so a saved
        state holds them to continue bit for bit): (0 for the equilibrium set-up, else
        the step length h in s; the history), in a fixed order."""
        keys = [0.0, *self._step_solvers]
        return [(k, h) for k in keys if (h := self._histories.get(k)) is not None and h.solutions]

    def keep_solutions(self, key: float, solutions: np.ndarray, products: np.ndarray) -> None:
        """Put back the kept solutions of :meth:`kept_solutions` (*key* as there; the step
        set-up is built if needed), oldest first."""
        solver = self.equilibrium_solver if key == 0.0 else self._step_solver(key)
        history = self._history(solver)
        for w, product in zip(solutions, products, strict=True):
            history.add(np.array(w, dtype=np.float64), np.array(product, dtype=np.float64))

    def _solve(
        self,
        solver: FiniteDifferenceSolver,
        load: np.ndarray,
        start: np.ndarray | None,
    ) -> np.ndarray:
        """One solve, started from the best combination of the solver's kept solutions
        (or from *start* while there are none); the solution is kept."""
        history = self._history(solver)
        if history.solutions:
            start = None
        w, info = solver.solve_full(load, start, tolerance=self.tolerance, history=history)
        self.solves += 1
        self.iterations += int(info["iterations"])
        return w

    def _equilibrium_full(self, load: np.ndarray) -> np.ndarray:
        """K⁻¹ a q on the solve grid for a load on the grid; the last few are kept."""
        for cached, w in self._equilibria:
            if np.array_equal(cached, load):
                return w
        if not load.any():
            w = np.zeros(self.shape)
        else:
            start = None
            if not self._equilibria and self.model == "half-space" and self.state.any():
                start = self.state
            if self.model == "half-space":  # for w + w_far (see _driving)
                driving, w_far = self._driving(load)
                if w_far is None:
                    w = self._solve(self.equilibrium_solver, driving, start)
                else:
                    if start is not None:
                        start = start + w_far
                    w = self._solve(self.equilibrium_solver, driving, start) - w_far
            else:  # started from the best combination of the last equilibria
                w = self._solve(self.equilibrium_solver, self._embed(load), start)
        self._equilibria.append((load.copy(), w))
        if len(self._equilibria) > _CACHED_EQUILIBRIA:
            self._equilibria.pop(0)
        return w

    # -- state (the interface of SpectralRelaxation) ----------------------------------
    def set_load(self, load: np.ndarray) -> None:
        """Make *load* (Pa, on the grid) the load acting now, without moving the plate."""
        self.load = np.array(load, dtype=np.float64)
        if self.far is not None:
            self.far.moments = self.far.sums(self.load) * self.far.cell_area

    def set_equilibrium(self) -> None:
        """Put the plate in elastic equilibrium with the load acting now."""
        full = self._equilibrium_full(self.load)
        self.state = full.copy() if self.model == "half-space" else self._window(full)
        if self.far is not None:
            self.far.set_equilibrium()
        self._velocity = None

    def deflection(self) -> np.ndarray:
        """Current deflection w (m, positive down) on the grid."""
        if self.model == "half-space":
            out = self._window(self.state)
            if self.far is not None:  # (on the solve grid: the stage's field, see _far_on_grid)
                out += self._window(self._far_on_grid(self.far.state))
            return out
        return self.state.copy()

    def equilibrium(self) -> np.ndarray:
        """Elastic equilibrium (m) under the load acting now."""
        out = self._window(self._equilibrium_full(self.load))
        if self.far is not None:
            out += self.far.equilibrium_field()
        return out

    def rate(self) -> np.ndarray:
        """dw/dt (m s⁻¹, positive = moving down) now, under the load acting now.

        Relaxing: (w_eq − w) / tau. Half-space: C⁻¹ (a q − K w) with the k = 0 mode
        (C = 0, the mean following the load at once) left out, as in the spectral code.
        """
        if self.model == "relaxing":
            return (self.equilibrium() - self.state) / self.relaxation_time
        operator = self.equilibrium_solver.operator
        modes = None if self.far is None else self.far.state
        driving, w_far = self._driving(self.load, modes)
        residual = operator.area * driving  # a q − K (w + w_far), see _driving
        residual -= operator.apply(self.state if w_far is None else self.state + w_far)
        if self._inverse_viscous is None:
            symbol = _viscous_symbol(self.shape, self.spec, self.viscosity)
            with np.errstate(divide="ignore"):
                self._inverse_viscous = np.where(symbol > 0, 1.0 / symbol, 0.0)
        spectrum = scipy.fft.rfft2(residual, workers=-1)
        spectrum *= self._inverse_viscous
        out = self._window(scipy.fft.irfft2(spectrum, s=self.shape, workers=-1))
        if self.far is not None:
            out += self.far.rate_field()
        return out

    def step(self, dt: float, load: np.ndarray) -> None:
        """Advance the state by *dt* seconds.

        Parameters
        ----------
        dt : float
            Step length (s, > 0).
        load : numpy.ndarray
            With ``"previous"``: the load (Pa) held during the step. With ``"linear"``:
            the load at the end of the step, reached linearly from the load acting at
            the start. Either way it is the load acting afterwards.
        """
        new = np.array(load, dtype=np.float64)
        if self.model == "relaxing":
            self._relax(dt, new)
        else:
            with single_threaded_blas():  # entered once for both stages' solves
                self._half_space(dt, new)
        self.load = new

    # -- the two models ---------------------------------------------------------------
    def _relax(self, dt: float, new: np.ndarray) -> None:
        x = dt / self.relaxation_time
        decay = math.exp(-x)
        if self.interpolation == "previous":
            target = self._window(self._equilibrium_full(new))
            self.state = decay * self.state + (1.0 - decay) * target
            return
        phi = -math.expm1(-x) / x
        before = self._window(self._equilibrium_full(self.load))
        after = self._window(self._equilibrium_full(new))
        self.state = decay * self.state + (phi - decay) * before + (1.0 - phi) * after

    def _step_solver(self, h: float) -> FiniteDifferenceSolver:
        """The set-up of K + C / (gamma h) (cached for a few step lengths)."""
        solver = self._step_solvers.get(h)
        if solver is not None:
            return solver
        scale = 1.0 / (SDIRK_GAMMA * h)
        spec, viscosity = self.spec, self.viscosity

        def symbol(shape: tuple[int, int]) -> np.ndarray:
            return _viscous_symbol(shape, spec, viscosity) * scale

        solver = _build_solver(self._settings, symbol)
        if len(self._step_solvers) >= _CACHE_STEPS:
            oldest = next(iter(self._step_solvers))
            self._step_solvers.pop(oldest)
            self._histories.pop(oldest, None)  # its operator is gone
        self._step_solvers[h] = solver
        log.info("half-space step of %.4g s: set-up %.2f s", h, solver.setup_seconds)
        return solver

    def _half_space(self, dt: float, new: np.ndarray) -> None:
        parts = max(1, math.ceil(dt / self.max_substep - 1e-9))
        h = dt / parts
        # steps that differ by round-off only (times converted from dates) share a set-up
        h = next((c for c in self._step_solvers if abs(c - h) <= STEP_MATCH * h), h)
        solver = self._step_solver(h)
        term = solver.spectral_term
        assert term is not None
        area = solver.operator.area
        gamma = SDIRK_GAMMA
        old = self.load
        far = self.far
        end = None if far is None else far.sums(new) * far.cell_area
        w = self.state
        for part in range(parts):
            # moments of the load at the end of this sub-step (the far modes are at its start)
            sub_end = None
            if far is not None and end is not None:
                if self.interpolation == "previous":
                    sub_end = end
                else:
                    sub_end = far.moments + (end - far.moments) / (parts - part)

            def stage_load(
                c: float, part: int = part, sub_end: Any = sub_end
            ) -> tuple[np.ndarray, np.ndarray | None]:
                if self.interpolation == "previous":
                    load = new
                else:
                    load = old + ((part + c) / parts) * (new - old)
                if far is None or sub_end is None:
                    return self._embed(load), None
                target = sub_end
                if self.interpolation == "linear" and c != 1.0:
                    target = far.moments + c * (sub_end - far.moments)
                return self._driving(load, far.modes_after(c * h, target, self.interpolation))

            def stage(c: float, z: np.ndarray, start: np.ndarray) -> np.ndarray:
                """Y of the stage at t0 + c h with Z = *z*: solved for Y + w_far (see
                _driving), started from *start* + w_far while nothing is kept."""
                driving, w_far = stage_load(c)
                if w_far is None:
                    driving += term.add_to(z, np.zeros(self.shape)) / area
                    return self._solve(solver, driving, start)
                driving += term.add_to(z + w_far, np.zeros(self.shape)) / area
                return self._solve(solver, driving, start + w_far) - w_far

            # stage 1: Z_1 = w, started from w moved on at the last known rate
            start = w if self._velocity is None else w + (gamma * h) * self._velocity
            y1 = stage(gamma, w, start)
            k1 = (y1 - w) / (gamma * h)
            # stage 2: Z_2 = w + (1 - gamma) h k_1, started from w + h k_1
            z2 = w + ((1.0 - gamma) * h) * k1
            y2 = stage(1.0, z2, w + h * k1)
            self._velocity = (y2 - z2) / (gamma * h)
            w = y2
            if far is not None and sub_end is not None:
                far.step(far.factors(h, self.interpolation), sub_end, self.interpolation)
        self.state = w


def _build_solver(settings: dict[str, Any], symbol: Any = None) -> FiniteDifferenceSolver:
    return FiniteDifferenceSolver.build(
        settings["spec"],
        settings["rigidity"],
        settings["stiffness"],
        settings["poisson_ratio"],
        settings["edges"],
        pad_factor=settings["pad_factor"],
        min_margin=settings["min_margin"],
        tolerance=settings["tolerance"],
        max_iterations=settings["max_iterations"],
        spectral_symbol=symbol,
    )


def _viscous_symbol(shape: tuple[int, int], spec: GridSpec, viscosity: float) -> np.ndarray:
    """2 eta |k| (Pa s m⁻¹) on the rfft2 half-spectrum of a grid of *shape*."""
    ky2, kx2 = wavenumbers_squared(shape, spec.dy, spec.dx)
    return 2.0 * viscosity * np.sqrt(ky2 + kx2)


def _fastest_carrying_time(
    shape: tuple[int, int], spec: GridSpec, rigidity: float, stiffness: float, viscosity: float
) -> float:
    """The shortest relaxation time (s) of the modes that carry much of the response.

    With tau(k) = 2 eta k / (D k⁴ + Δρ g) and D the largest rigidity, the smaller of
    tau at the longest wavelength 2 pi / k1 of the solve grid and tau at the wavenumber
    k_c where the plate has cut the response to 1 / (1 + :data:`PLATE_CUT`) of the local
    one (D k_c⁴ = PLATE_CUT Δρ g); modes faster than both carry little (the mean, met
    exactly, or short waves the plate hardly lets through).
    """
    k1 = 2.0 * math.pi / max(shape[0] * spec.dy, shape[1] * spec.dx)
    time = 2.0 * viscosity * k1 / (rigidity * k1**4 + stiffness)
    if rigidity > 0:
        k_c = (PLATE_CUT * stiffness / rigidity) ** 0.25
        time = min(time, 2.0 * viscosity * k_c / ((1.0 + PLATE_CUT) * stiffness))
    return time
