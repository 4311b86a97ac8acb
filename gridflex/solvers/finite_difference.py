"""Variable-rigidity flexure: the finite-difference solve.

Builds the plate operator of :mod:`gridflex.solvers.plate_operator` on the solve grid (for
``edges="infinite"`` the grid embedded in a periodic margin in which the edge rigidity
continues), the preconditioner of :mod:`gridflex.solvers.preconditioners`, and runs the
conjugate gradients of :mod:`gridflex.solvers.conjugate_gradient` to a stated relative
accuracy of the deflection (estimated from the CG coefficients), recording the true
residual and the normwise backward error at the end.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.fft

from gridflex.errors import ConvergenceError, InputError
from gridflex.grid import GridSpec
from gridflex.memory import check_memory
from gridflex.progress import Progress
from gridflex.solvers.blas_threads import single_threaded_blas
from gridflex.solvers.conjugate_gradient import START_MARGIN, conjugate_gradient
from gridflex.solvers.multigrid import AggregationPreconditioner
from gridflex.solvers.plate_operator import AXIS_EDGES, PlateOperator, area_weights, corner_rigidity
from gridflex.solvers.preconditioners import (
    BandSolver,
    BlendPreconditioner,
    MultiplicativePreconditioner,
    PlatePreconditioner,
    band_is_exact,
)
from gridflex.solvers.rigidity_features import (
    BAND_FLEXURAL_PARAMETERS,
    BREAK_FLEXURAL_PARAMETERS,
    STEEP_FLEXURAL_PARAMETERS,
    SharpDistance,
    factor_budget,
    find_sharp_features,
    sharp_band,
)
from gridflex.solvers.row_blocks import dot
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR
from gridflex.validation import check_choice, check_integer, check_number

__all__ = [
    "AXIS_EDGES",
    "BAND_FLEXURAL_PARAMETERS",
    "BREAK_FLEXURAL_PARAMETERS",
    "DEFAULT_MAX_BAND_NODES",
    "DEFAULT_MAX_ITERATIONS",
    "DEFAULT_TOLERANCE",
    "EDGES",
    "FiniteDifferenceSolver",
    "STEEP_FLEXURAL_PARAMETERS",
    "PlateOperator",
    "SolutionHistory",
    "SpectralTerm",
    "area_weights",
    "corner_rigidity",
    "finite_difference_deflection",
    "galerkin_coefficients",
    "pad_rigidity",
    "roundoff_residual",
    "solve_shape",
]

log = logging.getLogger(__name__)

EDGES = ("infinite", "clamped", "free", "periodic")
"""Grid-edge options of the finite-difference solve (same on all four edges)."""

DEFAULT_TOLERANCE = 1e-6
"""Estimated relative error of the deflection in the energy norm, ||w* − w||_K / ||w*||_K,
at which the iteration stops (:func:`~gridflex.solvers.conjugate_gradient.conjugate_gradient`).
Measured against a sparse LU solve of the same operator (256² of 1 km, periodic, a 20 km
zone of te 0.5 km in a 25 km plate, a te 5 -> 50 km margin, a margin with hinges): at 1e-6
the estimate was 5e-7 to 9e-7, the true energy-norm error 6e-8 to 7e-8 and the largest
error of w 7e-9 to 4e-8 of its peak (the target is 1e-6 of the peak); at 1e-4 the largest
error reached 2e-6 of the peak, at 1e-5 6e-8."""

DEFAULT_MAX_ITERATIONS = 3000
"""Iteration limit before :class:`~gridflex.errors.ConvergenceError` is raised. An iteration
that stops converging ends long before it
(:data:`~gridflex.solvers.conjugate_gradient.PROGRESS_WINDOW`); the limit leaves room for
slow ones that keep converging. It was 300, which stopped rough te maps that were still
converging: te changing every 1.5 cells over 0-100 km (tests/benchmarks/te_map_robustness.py,
aggregation multigrid) took 356 iterations at 256² of 250 m and 554 at 512² of 250 m."""

DEFAULT_MAX_BAND_NODES = 1_500_000
"""Cap on the band size (nodes). Beyond it the band falls back to its least widths; when
even those do not fit, the solve takes aggregation multigrid instead of band and blend
(:mod:`gridflex.solvers.multigrid`), unless the cap is 0 (the blend alone) or the
multigrid's memory does not fit (then the widths shrink until the band fits,
:data:`~gridflex.solvers.rigidity_features.BAND_SHRINK`, or only the nodes that fit are
kept). Raised from 400 k with
the wider bands of :data:`~gridflex.solvers.rigidity_features.STIFF_SIDE_FLEXURAL_PARAMETERS`,
and from 1 M with the reach of
:data:`~gridflex.solvers.rigidity_features.STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`: the hinge
network of tests/benchmarks/variable.py at 2048² of 1 km (``--refine``) asks for 1.23 M
nodes; under 1 M it would fall back to the band of one flexural parameter (989 k nodes,
10 iterations, peak memory 3.6 GB, as measured before), with the whole band it took 7
(peak memory 4.2 GB). The LU memory cap
(:func:`~gridflex.solvers.rigidity_features.factor_budget`) usually binds first."""


def _ramp(count: int, share: float = 0.5) -> np.ndarray:
    """Weights 0 -> 1 over *count* pad cells: flat over half of each side's part of the
    pad (the first *share* of it belongs to the side it starts from), sin² over the middle
    half between (flat quarters at both ends for *share* 0.5)."""
    s = np.arange(1, count + 1, dtype=np.float64)
    u = np.clip((s - 0.5 * share * (count + 1)) / (0.5 * (count + 1)), 0.0, 1.0)
    return np.sin(0.5 * np.pi * u) ** 2


def _periodic_pad(
    last: np.ndarray, first: np.ndarray, extra: int, floor: float, share: float = 0.5
) -> np.ndarray:
    """*extra* lines joining the line *last* smoothly to the line *first* (shape
    (extra, n)): log D follows :func:`_ramp`; a zero edge value continues through its
    side's part of the pad (*share* of it belongs to *last*)."""
    t = _ramp(extra, share)[:, None]
    pad = np.log(np.maximum(last, floor))[None, :] * (1.0 - t)
    pad += t * np.log(np.maximum(first, floor))[None, :]
    np.exp(pad, out=pad)
    near_last = (np.arange(1, extra + 1) <= share * extra)[:, None]
    pad[(near_last & (last == 0)[None, :]) | (~near_last & (first == 0)[None, :])] = 0.0
    return pad


def pad_rigidity(
    rigidity: np.ndarray, shape: tuple[int, int], shares: tuple[float, float] = (0.5, 0.5)
) -> np.ndarray:
    """Embed a rigidity grid in a larger periodic grid that continues each edge outward.

    The grid occupies ``[:ny, :nx]`` of *shape*; the pad after the last row (column) is
    shared between that edge (the first *shares* [0] ([1]) of it) and the first row
    (column), reached across the periodic wrap. Beyond each edge the edge values continue
    for half its part of the pad, then log D blends smoothly (sin² ramp over the middle
    half) into the opposite edge's values, so that the periodic wrap carries no jump
    (equal shares: a quarter, the middle half, a quarter). Zero rigidity (a break reaching
    the edge) continues through its edge's part of the pad.

    Parameters
    ----------
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal rigidity (N m).
    shape : tuple of int
        Padded shape, at least (ny, nx).
    shares : tuple of float, default (0.5, 0.5)
        Part of the pad along y and x that belongs to the last row and column, in (0, 1).

    Returns
    -------
    numpy.ndarray of *shape*
    """
    ny, nx = rigidity.shape
    out = np.empty(shape)
    out[:ny, :nx] = rigidity
    floor = float(np.min(rigidity, where=rigidity > 0, initial=np.inf))
    floor = floor if np.isfinite(floor) else 1.0
    if shape[1] > nx:  # along x: the pad of every row, built as columns
        pad = _periodic_pad(rigidity[:, -1], rigidity[:, 0], shape[1] - nx, floor, shares[1])
        out[:ny, nx:] = pad.T
    if shape[0] > ny:  # along y, from the first and last rows of the x-padded grid
        out[ny:] = _periodic_pad(out[ny - 1], out[0], shape[0] - ny, floor, shares[0])
    return out


def _side_margins(
    spec: GridSpec,
    rigidity: np.ndarray,
    stiffness: float,
    pad_factor: float,
    min_margin: float = 0.0,
) -> tuple[tuple[int, int], tuple[int, int]]:
    """Margin cells (before the first, after the last row; the same for columns) of
    ``edges="infinite"``: on each side *pad_factor* flexural parameters of the stiffest
    rigidity on that edge (at least *min_margin* metres, and 2 cells). The deflection
    beyond an edge decays with that edge's plate, so a margin sized per side keeps the
    decay lengths of each side while a weak edge no longer pays for a stiff one."""
    out = []
    for first, last, h in (
        (rigidity[0], rigidity[-1], spec.dy),
        (rigidity[:, 0], rigidity[:, -1], spec.dx),
    ):
        cells = []
        for edge in (first, last):
            alpha = (4.0 * float(edge.max()) / stiffness) ** 0.25
            cells.append(max(math.ceil(max(pad_factor * alpha, min_margin) / h), 2))
        out.append((cells[0], cells[1]))
    return out[0], out[1]


def _infinite_shape(
    spec: GridSpec,
    rigidity: np.ndarray,
    stiffness: float,
    pad_factor: float,
    min_margin: float = 0.0,
) -> tuple[int, int]:
    """Solve grid for ``edges="infinite"``: the grid and the margins of
    :func:`_side_margins` of both sides, rounded up to fast FFT lengths."""
    margins = _side_margins(spec, rigidity, stiffness, pad_factor, min_margin)
    out = []
    for n, (before, after) in zip(spec.shape, margins, strict=True):
        out.append(scipy.fft.next_fast_len(n + before + after, real=True))
    return (out[0], out[1])


def solve_shape(
    spec: GridSpec,
    rigidity: np.ndarray,
    pad_stiffness: float,
    edges: str | tuple[str, str] = "infinite",
    pad_factor: float = DEFAULT_PAD_FACTOR,
    min_margin: float = 0.0,
) -> tuple[int, int]:
    """Shape of the solve grid :meth:`FiniteDifferenceSolver.build` sets up for these
    arguments (the grid itself, or for ``edges="infinite"`` the grid and its margin sized
    with the flexural parameter of *pad_stiffness*, Pa m⁻¹); two set-ups that differ only
    in *pad_stiffness* are the same when their shapes are."""
    if edges != "infinite":
        return spec.shape
    return _infinite_shape(spec, rigidity, pad_stiffness, pad_factor, min_margin)


def roundoff_residual(rigidity: np.ndarray, stiffness: float, spacing: float) -> float:
    """Rough smallest relative residual a float64 deflection can have (dimensionless).

    The fourth differences lose eps (alpha / h)^4 to cancellation, alpha the largest
    flexural parameter and h the spacing; the factor 0.4 is fitted to the stalls seen with
    alpha / h = 137 (tests/benchmarks/variable.py --refine at 1024²: 1.1e-8 on the smooth
    margin, 3.0e-8 on the step; the larger is taken).
    """
    alpha = (4.0 * float(rigidity.max()) / stiffness) ** 0.25
    return 0.4 * float(np.finfo(np.float64).eps) * (alpha / spacing) ** 4


def _check_arguments(
    edges: str | tuple[str, str], tolerance: float, max_iterations: int, pad_factor: float
) -> None:
    """Raise :class:`~gridflex.errors.InputError` for a bad edge option or solver setting."""
    if isinstance(edges, tuple):
        if len(edges) != 2 or any(e not in AXIS_EDGES for e in edges):
            raise InputError(f"an edges pair must hold two of {AXIS_EDGES!r}; got {edges!r}")
    else:
        check_choice("edges", edges, EDGES)
    if not 0.0 < check_number("tolerance", tolerance) < 1.0:
        raise InputError(f"tolerance must lie in (0, 1), got {tolerance!r}")
    check_integer("max_iterations", max_iterations, minimum=1)
    check_number("pad_factor", pad_factor, minimum=0.0)


GRID_ARRAYS = 22
"""Float64 grids of the solve grid's shape a solve holds at its peak, band factors apart, with
up to :data:`~gridflex.solvers.preconditioners.LEVELS_COUNTED` blend levels (more are checked
when the preconditioner is built)."""


def _grid_bytes(shape: tuple[int, int]) -> float:
    """Memory (bytes) of the solve's grid arrays (:data:`GRID_ARRAYS`)."""
    return 8.0 * shape[0] * shape[1] * GRID_ARRAYS


def _solve_rigidity(
    spec: GridSpec,
    rigidity: np.ndarray,
    pad_stiffness: float,
    edges: str | tuple[str, str],
    pad_factor: float,
    min_margin: float = 0.0,
) -> tuple[np.ndarray, tuple[str, str]]:
    """Rigidity on the solve grid, and its axis edges.

    For ``edges="infinite"`` the grid embedded in a periodic margin (:func:`pad_rigidity`)
    sized with the flexural parameter of *pad_stiffness* (at least *min_margin* metres);
    otherwise the grid itself. Checks the memory the solve will need first.
    """
    if rigidity.shape != spec.shape:
        raise InputError(f"rigidity grid has shape {rigidity.shape}, the grid {spec.shape}")
    if edges == "infinite":
        shape = _infinite_shape(spec, rigidity, pad_stiffness, pad_factor, min_margin)
    else:
        shape = spec.shape
    # in float64 grids: rigidity, area, bending and twist weights (4), load and right-hand
    # side (2), CG vectors (6), blend weights and spectra (1 per level), local term (1),
    # set-up temporaries (3), double-precision spectra after a restart (1 per level):
    # measured peak 17-19 with tracemalloc on tests/benchmarks/variable.py at 1024²; the band's
    # LU factors are capped apart (factor_budget)
    check_memory(
        _grid_bytes(shape), f"finite-difference solve on a grid of {shape[0]} x {shape[1]}"
    )
    if edges != "infinite":
        axis_edges = edges if isinstance(edges, tuple) else (edges, edges)
        return rigidity, axis_edges
    # the part of each pad that belongs to the last row (column): its margin's share
    margins = _side_margins(spec, rigidity, pad_stiffness, pad_factor, min_margin)
    shares = [after / (before + after) for before, after in margins]
    return pad_rigidity(rigidity, shape, (shares[0], shares[1])), ("periodic", "periodic")


def _preconditioner(
    operator: PlateOperator,
    band_width: float | None,
    max_band_nodes: int,
    spectral_term: SpectralTerm | None,
) -> tuple[PlatePreconditioner, float]:
    """The band round the operator's sharp features, the blend, and their combination;
    also the band width used (m). With a *spectral_term* the band is left out (its exact
    solve would need the term's dense matrix) and the blend's levels include the term.

    When the band the features ask for is over its caps even at the least widths (it had
    to shrink, or only part of it fits), the blend with that band need not converge (rough
    te maps on fine large grids): the aggregation multigrid of
    :mod:`gridflex.solvers.multigrid` is taken instead where its memory fits (width 0)."""
    if spectral_term is None:
        features = find_sharp_features(operator)
        widths = None
        if band_width is None:  # each sharp node's own width (SharpFeatures.widths)
            band_width, widths = features.band_width, features.widths
        budget = factor_budget(_grid_bytes(operator.shape))
        # one distance transform for the band and its fallback (least widths <= widths)
        distance = None
        if features.nodes.any():
            widest = max(float(band_width), max(operator.dx, operator.dy))
            distance = SharpDistance.build(operator, features.nodes, widest, widths is not None)
        nodes, width_used, _ = sharp_band(
            operator,
            float(band_width),
            int(max_band_nodes),
            features.nodes,
            widths,
            budget,
            distance,
        )
        complete = not features.nodes.any() or width_used >= band_width
        least = features.least_widths
        if widths is not None and least is not None and width_used < band_width:
            # over the caps: the widths of STIFF_SIDE_FLEXURAL_PARAMETERS before shrinking
            # (STIFF_SIDE_REACH_FLEXURAL_PARAMETERS); the larger band of the two
            fallback, fallback_width, _ = sharp_band(
                operator,
                float(least.max()),
                int(max_band_nodes),
                features.nodes,
                least,
                budget,
                distance,
            )
            complete = fallback_width >= float(least.max())
            if fallback.size > nodes.size:
                nodes, width_used = fallback, fallback_width
        if not complete and int(max_band_nodes) > 0:
            multigrid = _multigrid(operator, nodes.size)
            if multigrid is not None:
                return multigrid, 0.0
    else:
        nodes, width_used = np.zeros(0, dtype=np.int64), 0.0
    band = BandSolver.build(operator, nodes)
    extra = None if spectral_term is None else spectral_term.symbol
    blend = BlendPreconditioner.build(operator, nodes, extra)
    log.info(
        "finite-difference solve on %s nodes: %d blend levels, band of %d nodes (%.0f m)",
        operator.shape,
        blend.levels.size,
        band.size,
        width_used,
    )
    # (with a spectral term the band is left out and the blend only approximates it)
    exact = spectral_term is None and band_is_exact(operator, nodes)
    return MultiplicativePreconditioner(operator, blend, band, exact), width_used


def _multigrid(operator: PlateOperator, band_nodes: int) -> AggregationPreconditioner | None:
    """The aggregation multigrid for a plate whose band is over its caps, or None (logged)
    when its estimated memory does not fit (the partial band and blend are used then)."""
    log.info(
        "the band round the sharp rigidity changes is over its caps (%d nodes fit): "
        "aggregation multigrid instead",
        band_nodes,
    )
    try:
        return AggregationPreconditioner.build(operator)
    except InputError as exc:  # (its memory, estimated before anything is allocated)
        log.warning(
            "%s; the solve uses the partial band and blend, which may not converge on "
            "rough te maps",
            exc,
        )
        return None


@dataclass(eq=False)
class SpectralTerm:
    """A constant-coefficient term S w added to the plate operator, applied by FFT on the
    (doubly periodic) solve grid: S w = irfft2(s(k) rfft2(w)) with a symbol s >= 0.

    Used by the implicit time step of a plate over a viscous half-space, whose operator
    adds 2 η |k| / Δt (Bueler, Lingle & Brown 2007, Ann. Glaciol. 46, 97–105; PHYSICS.md 7.3).

    Attributes
    ----------
    symbol : numpy.ndarray, shape (ny, nx // 2 + 1)
        s(k) on the rfft2 half-spectrum of the solve grid (Pa m⁻¹), finite and >= 0.
    """

    symbol: np.ndarray

    def add_to(self, w: np.ndarray, out: np.ndarray) -> np.ndarray:
        """out += S w; returns *out*."""
        spectrum = scipy.fft.rfft2(w, workers=-1)
        spectrum *= self.symbol
        out += scipy.fft.irfft2(spectrum, s=w.shape, workers=-1)
        return out


@dataclass(eq=False)
class FiniteDifferenceSolver:
    """A variable-rigidity plate set up once (operator, preconditioner, band factor) and
    solved for any number of loads, each optionally started from a previous deflection.

    Build it with :meth:`build`; :meth:`solve` takes a load on the grid,
    :meth:`solve_full` a load on the whole solve grid (the grid sits at
    ``[:ny, :nx]`` of it, :attr:`window`; for ``edges="infinite"`` the rest is the
    periodic margin).

    Attributes
    ----------
    operator : PlateOperator
        K on the solve grid.
    preconditioner : PlatePreconditioner
        Band and blend (:class:`MultiplicativePreconditioner`), or aggregation multigrid
        over the band's caps (:class:`AggregationPreconditioner`).
    grid_shape : tuple of int
        (ny, nx) of the grid.
    spacing : tuple of float
        (dy, dx) (m).
    band_width : float
        Width of the exact-solve band used (m).
    tolerance : float
        Default stopping tolerance of :meth:`solve`.
    max_iterations : int
        Default iteration limit.
    spectral_term : SpectralTerm or None
        Constant-coefficient term added to K (applied by FFT), if any.
    setup_seconds : float
        Time spent building (s).
    """

    operator: PlateOperator
    preconditioner: PlatePreconditioner
    grid_shape: tuple[int, int]
    spacing: tuple[float, float]
    band_width: float
    tolerance: float
    max_iterations: int
    spectral_term: SpectralTerm | None
    setup_seconds: float

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        rigidity: np.ndarray,
        stiffness: float,
        poisson_ratio: float,
        edges: str | tuple[str, str] = "infinite",
        *,
        pad_factor: float = DEFAULT_PAD_FACTOR,
        pad_stiffness: float | None = None,
        min_margin: float = 0.0,
        tolerance: float = DEFAULT_TOLERANCE,
        max_iterations: int = DEFAULT_MAX_ITERATIONS,
        band_width: float | None = None,
        max_band_nodes: int = DEFAULT_MAX_BAND_NODES,
        spectral_symbol: Callable[[tuple[int, int]], np.ndarray] | None = None,
    ) -> FiniteDifferenceSolver:
        """Set up the solve of K w = a q for a rigidity grid.

        Parameters
        ----------
        spec, rigidity, stiffness, poisson_ratio, edges, pad_factor, tolerance,
        max_iterations, band_width, max_band_nodes
            As in :func:`finite_difference_deflection`.
        pad_stiffness : float, optional
            Restoring stiffness (Pa m⁻¹) whose flexural parameter sets the margin of
            ``edges="infinite"`` (the weakest restoring force the caller will meet, say
            under a fill lighter than the operator's); *stiffness* by default.
        min_margin : float, default 0
            Smallest margin (m) on each side for ``edges="infinite"``, for a caller whose
            response reaches further than the plate's (the viscous half-space's transient).
        spectral_symbol : callable, optional
            ``spectral_symbol(solve_shape)`` returns the symbol of a
            :class:`SpectralTerm` on the rfft2 half-spectrum of the solve grid; needs a
            doubly periodic solve grid (``edges`` "infinite" or "periodic").

        Raises
        ------
        InputError
            Bad edges, settings or sizes; not enough memory; a spectral term on a grid
            that is not doubly periodic.
        """
        _check_arguments(edges, tolerance, max_iterations, pad_factor)
        start = time.perf_counter()
        pad = (
            stiffness
            if pad_stiffness is None
            else check_number("pad_stiffness", pad_stiffness, unit="Pa/m", minimum=0.0, strict=True)
        )
        margin = check_number("min_margin", min_margin, unit="m", minimum=0.0)
        solve_rigidity, axis_edges = _solve_rigidity(
            spec, np.asarray(rigidity, dtype=np.float64), pad, edges, pad_factor, margin
        )
        operator = PlateOperator.build(
            solve_rigidity, stiffness, poisson_ratio, spec.dy, spec.dx, axis_edges
        )
        term = None
        if spectral_symbol is not None:
            if axis_edges != ("periodic", "periodic"):
                raise InputError(
                    "a spectral term needs a doubly periodic solve grid: "
                    f"edges='infinite' or 'periodic', got {edges!r}"
                )
            term = SpectralTerm(np.asarray(spectral_symbol(operator.shape), dtype=np.float64))
        with single_threaded_blas():  # see gridflex.solvers.blas_threads
            preconditioner, width_used = _preconditioner(operator, band_width, max_band_nodes, term)
        return cls(
            operator,
            preconditioner,
            spec.shape,
            (spec.dy, spec.dx),
            float(width_used),
            float(tolerance),
            int(max_iterations),
            term,
            time.perf_counter() - start,
        )

    @property
    def shape(self) -> tuple[int, int]:
        """Shape of the solve grid."""
        return self.operator.shape

    @property
    def window(self) -> tuple[slice, slice]:
        """Where the grid lies in the solve grid."""
        return (slice(0, self.grid_shape[0]), slice(0, self.grid_shape[1]))

    def operator_norm(self) -> float:
        """Estimate of ||K||₂ (Pa m⁻¹): the largest value of the constant-rigidity symbol
        D_max (4 / dx² + 4 / dy²)² + Δρ g (PHYSICS.md 2.2) at the largest rigidity, plus
        the spectral term's largest value; for a constant rigidity it is exact on a
        periodic grid, and it is the largest Gershgorin row sum of the 13-point stencil."""
        op = self.operator
        bending = float(op.rigidity.max()) * (4.0 / op.dx**2 + 4.0 / op.dy**2) ** 2
        extra = 0.0 if self.spectral_term is None else float(self.spectral_term.symbol.max())
        return bending + op.stiffness + extra

    def apply(self, w: np.ndarray, out: np.ndarray) -> np.ndarray:
        """K w (plus the spectral term, if any) into *out* (solve grid)."""
        self.operator.apply(w, out)
        if self.spectral_term is not None:
            self.spectral_term.add_to(w, out)
        return out

    def solve(
        self,
        load: np.ndarray,
        start: np.ndarray | None = None,
        *,
        tolerance: float | None = None,
        progress: Progress | None = None,
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Deflection (m, positive down) on the grid for a load (Pa) on the grid.

        *start* (on the grid) is a first guess, for example the deflection of a nearby
        problem; the margin of the solve grid then starts from zero.
        """
        full = np.zeros(self.shape)
        full[self.window] = load
        guess = None
        if start is not None:
            guess = np.zeros(self.shape)
            guess[self.window] = start
        w, info = self.solve_full(full, guess, tolerance=tolerance, progress=progress)
        return np.ascontiguousarray(w[self.window]), info

    def solve_full(
        self,
        load: np.ndarray,
        start: np.ndarray | None = None,
        *,
        tolerance: float | None = None,
        progress: Progress | None = None,
        history: SolutionHistory | None = None,
        start_product: np.ndarray | None = None,
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Deflection (m) on the whole solve grid for a load (Pa) on it.

        Parameters
        ----------
        load : numpy.ndarray, shape :attr:`shape`
            q (Pa, positive down) on the solve grid.
        start : numpy.ndarray, shape :attr:`shape`, optional
            First guess of w (m); zero by default.
        history : SolutionHistory, optional
            Without *start*: earlier solutions of this solver with their products; their
            best combination is the first guess (no operator product taken for it), and
            the new solution is added to it.
        tolerance : float, optional
            Overrides :attr:`tolerance` for this solve.
        progress : callable, optional
            As in :func:`finite_difference_deflection`.
        start_product : numpy.ndarray, shape :attr:`shape`, optional
            K *start* (the area-weighted load, Pa), when known: the ``product`` of the
            solve that returned *start*, or the same combination of such products as
            *start* is of their deflections. Saves one product with K; a wrong one
            costs accuracy of the start only, since the result is checked against its
            true residual.

        Returns
        -------
        deflection : numpy.ndarray, shape :attr:`shape`
        info : dict
            As in :func:`finite_difference_deflection`, and ``product``, K w on the solve
            grid (area-weighted load, Pa), for a later *start_product*.
        """
        tol = self.tolerance if tolerance is None else float(tolerance)
        if not 0.0 < tol < 1.0:
            raise InputError(f"tolerance must lie in (0, 1), got {tolerance!r}")
        began = time.perf_counter()
        operator, preconditioner = self.operator, self.preconditioner
        dy, dx = self.spacing
        rhs = operator.area * load
        product = None if start is None else start_product
        if start is None and history is not None:
            combined = history.start(rhs)
            if combined is not None:
                start, product = combined
        with single_threaded_blas():
            first = preconditioner.initial_guess(rhs, start, self.apply, product)
            try:
                outcome = conjugate_gradient(
                    self.apply,
                    rhs,
                    preconditioner.apply,
                    tol * preconditioner.tolerance_factor,
                    self.max_iterations,
                    progress,
                    first,
                    preconditioner.use_double_precision,
                    operator_norm=self.operator_norm(),
                    on_slow=preconditioner.strengthen,
                    start_margin=1.0 if preconditioner.exact else START_MARGIN,
                )
            except ConvergenceError as exc:
                alpha = (4.0 * float(operator.rigidity.max()) / operator.stiffness) ** 0.25
                floor = roundoff_residual(operator.rigidity, operator.stiffness, min(dx, dy))
                raise ConvergenceError(
                    f"{exc}. On this grid the flexural parameter spans up to "
                    f"{alpha / min(dx, dy):.0f} cells; double-precision round-off alone "
                    f"limits the relative residual to about {floor:.0e}"
                ) from exc
        x = outcome.x
        if history is not None and outcome.product is not None:
            history.add(x.copy(), outcome.product)  # x goes to the caller
        # diagnostics by reductions, without full-grid temporaries (about 60 ms a solve
        # at 1440² nodes, which the infill's many inner solves paid each time)
        total = float(np.linalg.norm(rhs.reshape(-1), 1))
        imbalance = abs(operator.stiffness * dot(operator.area, x) - float(rhs.sum()))
        info: dict[str, Any] = {
            "iterations": outcome.iterations,
            "residual": outcome.residual,
            "accuracy": outcome.accuracy,
            "backward_error": outcome.backward_error,
            "at_round_off": outcome.at_round_off,
            "tolerance": tol,
            "solve_shape": self.shape,
            "preconditioner": preconditioner.description,
            "blend_levels": preconditioner.blend_levels,
            "band_nodes": preconditioner.band_size,
            "band_width": self.band_width,
            "force_balance_residual": imbalance / total if total > 0 else 0.0,
            "locally_compensated_load": (float(load.sum()) - dot(operator.area, load)) * dy * dx,
            "setup_seconds": self.setup_seconds,
            "solve_seconds": time.perf_counter() - began,
            "product": outcome.product,
        }
        return x, info


def galerkin_coefficients(gram: np.ndarray, projected: np.ndarray) -> np.ndarray | None:
    """Coefficients c of the Galerkin combination Σ cᵢ wᵢ from the (symmetrised) matrix
    wᵢ·K wⱼ and the projections wᵢ·b; directions with a relative eigenvalue below 1e-10 are
    dropped (solutions the earlier ones barely distinguish). None when none is left."""
    gram = 0.5 * (gram + gram.T)
    values, vectors = np.linalg.eigh(gram)
    keep = values > 1e-10 * max(float(values.max()), 0.0)
    if not keep.any():
        return None
    return np.asarray(vectors[:, keep] @ ((vectors[:, keep].T @ projected) / values[keep]))


@dataclass(eq=False)
class SolutionHistory:
    """The last few solutions of one :class:`FiniteDifferenceSolver` with their exact
    products (K w as the solve computed it for its final true residual), for starts that
    cost no operator product.

    The start of a new solve is the Galerkin combination of the kept solutions (the best
    in the energy norm within their span, :func:`galerkin_coefficients`), and its residual
    is b − Σ cᵢ K wᵢ from the kept products. For a sequence of related solves (the stages
    of time steps) the span holds any extrapolation in time from the kept solutions, so
    the start is at least as good as such an extrapolation. The matrix wᵢ·K wⱼ is kept
    and extended by one row per solution. Pass it to :meth:`FiniteDifferenceSolver.solve_full`
    as ``history``; a history belongs to one solver (one operator).

    Attributes
    ----------
    size : int
        Solutions kept (the oldest is dropped).
    """

    size: int
    solutions: list[np.ndarray] = field(default_factory=list)
    products: list[np.ndarray] = field(default_factory=list)
    _gram: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)), repr=False)

    def add(self, solution: np.ndarray, product: np.ndarray) -> None:
        """Keep *solution* and its product K *solution* (not copied: not to be modified)."""
        if len(self.solutions) >= self.size:
            self.solutions.pop(0)
            self.products.pop(0)
            self._gram = self._gram[1:, 1:]
        row = np.array([dot(solution, q) for q in self.products])
        count = len(self.solutions) + 1
        gram = np.empty((count, count))
        gram[:-1, :-1] = self._gram
        gram[-1, :-1] = gram[:-1, -1] = row
        gram[-1, -1] = dot(solution, product)
        self._gram = gram
        self.solutions.append(solution)
        self.products.append(product)

    def start(self, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """The start x₀ for the right-hand side *rhs* and its product K x₀; None when
        nothing is kept or the kept solutions do not combine."""
        if not self.solutions:
            return None
        projected = np.array([dot(w, rhs) for w in self.solutions])
        coefficients = galerkin_coefficients(self._gram, projected)
        if coefficients is None:
            return None
        x, product, term = np.zeros(rhs.shape), np.zeros(rhs.shape), np.empty(rhs.shape)
        for c, w, k_w in zip(coefficients, self.solutions, self.products, strict=True):
            x += np.multiply(w, c, out=term)  # (one work array, not two per solution)
            product += np.multiply(k_w, c, out=term)
        return x, product


def finite_difference_deflection(
    load: np.ndarray,
    spec: GridSpec,
    rigidity: np.ndarray,
    stiffness: float,
    poisson_ratio: float,
    edges: str | tuple[str, str] = "infinite",
    *,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    band_width: float | None = None,
    max_band_nodes: int = DEFAULT_MAX_BAND_NODES,
    progress: Progress | None = None,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Deflection of a plate of spatially varying rigidity by preconditioned CG.

    One solve of a :class:`FiniteDifferenceSolver` (build it once to solve many loads).

    Parameters
    ----------
    load : numpy.ndarray, shape (ny, nx)
        Vertical stress q (Pa, positive downward).
    spec : GridSpec
        Grid shape and spacing (m).
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal flexural rigidity D (N m), >= 0; 0 marks broken cells.
    stiffness : float
        Restoring stiffness Δρ g (Pa m⁻¹).
    poisson_ratio : float
        ν.
    edges : {"infinite", "clamped", "free", "periodic"}, default "infinite"
        ``"infinite"``: the grid is a window onto an unbounded plate: it is embedded in a
        periodic margin of *pad_factor* flexural parameters (of each edge's largest rigidity)
        on each side, in which the edge rigidity continues (:func:`pad_rigidity`) and the
        load is zero. ``"clamped"``, ``"free"``, ``"periodic"``: see :data:`AXIS_EDGES`.
        A pair of :data:`AXIS_EDGES` values sets the y and x axes separately (no margin),
        for example ``("periodic", "free")`` for a strip that models a line load.
    pad_factor : float, default 4.5
        Margin for ``"infinite"``, in flexural parameters.
    tolerance : float, default 1e-6
        Relative accuracy of the deflection to reach: the iteration stops when the
        estimated error of w in the energy norm, ||w* − w||_K / ||w*||_K (w* the exact
        solution of the discrete equations, ||v||_K² = v·K v), is below it
        (:data:`DEFAULT_TOLERANCE`; the estimate is described in
        :func:`~gridflex.solvers.conjugate_gradient.conjugate_gradient`). The default keeps
        the largest error of w well within 1e-6 of its peak. When double-precision
        round-off stops the iteration above it (normwise backward error within a few
        dozen unit round-offs), the solve returns with ``at_round_off`` set.
    max_iterations : int, default :data:`DEFAULT_MAX_ITERATIONS`
        Iteration limit.
    band_width : float, optional
        Width (m) of the exact-solve band round sharp features, the same everywhere. By
        default each sharp node gets the width its features call for
        (:attr:`~gridflex.solvers.rigidity_features.SharpFeatures.widths`:
        :data:`BAND_FLEXURAL_PARAMETERS` flexural parameters of the weak side of a jump,
        :data:`STEEP_FLEXURAL_PARAMETERS` at a steep change or grid edge,
        :data:`BREAK_FLEXURAL_PARAMETERS` next to a break, and at least the reach of
        :data:`~gridflex.solvers.rigidity_features.STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`
        into the stiff side of a jump or a break; over the band caps, at least
        :data:`~gridflex.solvers.rigidity_features.STIFF_SIDE_FLEXURAL_PARAMETERS`).
    max_band_nodes : int, default 1500000
        Cap on the band size; see :func:`~gridflex.solvers.rigidity_features.sharp_band`.
        Over it even at the least widths, the solve takes aggregation multigrid
        (:data:`DEFAULT_MAX_BAND_NODES`); 0 switches the band off (the blend alone).
    progress : callable, optional
        Called with (iterations done, iteration limit) after each iteration and with
        (iterations, iterations) when converged.

    Returns
    -------
    deflection : numpy.ndarray, shape (ny, nx)
        w (m, positive down).
    info : dict
        ``iterations``, ``residual`` (true relative residual ||a q − K w|| / ||a q||),
        ``accuracy`` (estimated relative error of w in the energy norm),
        ``backward_error`` (normwise, ||a q − K w|| / (||K|| ||w|| + ||a q||), with
        ||K||₂ from :meth:`FiniteDifferenceSolver.operator_norm`), ``at_round_off``
        (stopped at the round-off limit above the tolerance), ``tolerance``,
        ``solve_shape``, ``preconditioner`` (``"band and blend"``, ``"blend"``, or
        ``"aggregation multigrid"`` when the band is over its caps even at its least
        widths), ``blend_levels`` (N m), ``band_nodes``, ``band_width`` (m),
        ``force_balance_residual``, ``locally_compensated_load`` (N, load on the gap side
        of plate ends), ``setup_seconds``, ``solve_seconds``.

    Raises
    ------
    InputError
        Bad edges, tolerance or sizes; not enough memory.
    ConvergenceError
        The iteration did not converge: the error estimate was still above the tolerance
        after *max_iterations* with a backward error above round-off, or restarts stopped
        reducing it, or the iteration broke down.
    """
    solver = FiniteDifferenceSolver.build(
        spec,
        rigidity,
        stiffness,
        poisson_ratio,
        edges,
        pad_factor=pad_factor,
        tolerance=tolerance,
        max_iterations=max_iterations,
        band_width=band_width,
        max_band_nodes=max_band_nodes,
    )
    return solver.solve(np.asarray(load, dtype=np.float64), progress=progress)
