"""Aggregation multigrid preconditioner for plates whose band does not fit.

The band and blend of :mod:`gridflex.solvers.preconditioners` need an exact factor of the
band round the rigidity's sharp features. On rough te maps of fine, large grids that band
is over its caps (nodes, LU memory), and the blend with a partial band does not converge.
There the finite-difference solve takes this preconditioner instead: one V-cycle of
smoothed-aggregation algebraic multigrid (Vaněk, Mandel & Brezina 1996, Computing 56,
"Algebraic multigrid by smoothed aggregation for second and fourth order elliptic
problems"), with the plate's rigid-body modes 1, x, y as the near null space and the
prolongation smoothed by energy minimisation (Olson, Schroder & Tuminaro 2011, SIAM J. Sci.
Comput. 33, "A general interpolation strategy for algebraic multigrid using energy
minimization"; both recalled from memory), built by the general-purpose library pyamg.
Its memory grows like the grid's, not like a direct factor of most of it.

Measured (tests/benchmarks/te_map_robustness.py, band capped at a quarter of what it asks
for, 256²; iterations of the solve at its default tolerance): te_map at 250 m / 1 / 4 /
10 km 33 / 34 / 50 / 40; clipped, jumps and holes 24-32; rough (te changing every 1.5
cells) 251 / 98 / 47 at 1 / 4 / 10 km and no convergence at 250 m. The partial band and
blend raised ConvergenceError on all of them but clipped and holes at 4 and 10 km and
jumps at 10 km (24-158 iterations there). Jacobi-smoothed
prolongation took 3-4 times as many iterations; combined with the partial band and blend
the multigrid did worse than alone. te_map at 2048² of 1 km (2048 km domain) and of 500 m,
where the partial band raised ConvergenceError: 40 and 38 iterations (set-up about 90 s,
solve 55-65 s, peak 7.0-7.4 GB). At 4096² of 250 m (18.7 M nodes) the set-up does not fit
in 24 GiB.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from gridflex.memory import check_memory
from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.preconditioners import scaled_start

__all__ = [
    "AGGREGATION_BYTES_PER_NODE",
    "AggregationPreconditioner",
    "MULTIGRID_TOLERANCE_FACTOR",
    "aggregation_bytes",
]

log = logging.getLogger(__name__)

MAX_COARSE_NODES = 2000
"""Unknowns at which the coarsening stops before :data:`MAX_LEVELS` (small grids)."""

MAX_LEVELS = 3
"""Levels at most; the coarsest is solved by sparse LU (SuperLU). A fourth level made the
V-cycle much weaker: te_map of tests/benchmarks/variable.py on a 2048 km domain at 1024² of
2 km (levels of 1.17 M, 219 k, 10.5 k and 486 unknowns) took 93 iterations, and 34 with the
10.5 k level solved exactly; at 256² and 512² (three levels either way) 42 and 40."""

AGGREGATION_BYTES_PER_NODE = 2000.0
"""Estimated peak memory of the set-up (bytes per node of the solve grid), the operator's
sparse matrix included, with some room: measured with tracemalloc at 576² (te_map) 1.59 kB
per node (the energy-minimising smoothing most of it, the matrix 148 bytes, 0.55 kB kept
after the set-up); the whole process peaked at 1.5-1.6 kB per node on the 2160² solve
grid of 2048² (te_map, 1 km and 500 m cells), every other array included."""


MULTIGRID_TOLERANCE_FACTOR = 0.1
"""The conjugate gradients preconditioned by multigrid stop at this fraction of the
requested tolerance. Their energy-norm error estimate let through larger pointwise errors
than the band and blend's: measured against a direct solve at 256² of 1 km (band capped
at a quarter, tests/benchmarks/te_map_robustness.py), the largest difference was up to
10.5 times the estimate (rough: 9.0e-6 of the peak at an estimate of 8.6e-7), against at
most 0.6 with the band and blend; at a tenth of the tolerance it was 1.5e-7 (rough) and at
most 1.4e-7 on the other maps, for 6-15 % more iterations."""


def aggregation_bytes(operator: PlateOperator) -> float:
    """Estimated peak memory (bytes) of :meth:`AggregationPreconditioner.build`."""
    return AGGREGATION_BYTES_PER_NODE * float(operator.rigidity.size)


@dataclass(eq=False)
class AggregationPreconditioner:
    """One symmetric V-cycle of smoothed-aggregation multigrid on K (symmetric
    Gauss-Seidel before and after each coarse correction), with the interface of
    :class:`~gridflex.solvers.preconditioners.MultiplicativePreconditioner`.

    Attributes
    ----------
    operator : PlateOperator
        K on the solve grid.
    hierarchy : pyamg.multilevel.MultilevelSolver
        The levels.
    """

    operator: PlateOperator
    hierarchy: Any

    @classmethod
    def build(cls, operator: PlateOperator) -> AggregationPreconditioner:
        """Set up the levels for *operator*.

        Raises
        ------
        InputError
            Not enough memory (estimated first, :func:`aggregation_bytes`).
        """
        import pyamg  # (imported here: only plates over the band's caps need it)

        check_memory(
            aggregation_bytes(operator),
            f"multigrid set-up of the finite-difference solve on {operator.shape[0]} x "
            f"{operator.shape[1]} nodes",
        )
        began = time.perf_counter()
        matrix = operator.matrix()
        ny, nx = operator.shape
        # rigid-body modes of a plate: translation and the two tilts (scaled to O(1))
        tilt_y, tilt_x = np.meshgrid(
            np.linspace(-0.5, 0.5, ny), np.linspace(-0.5, 0.5, nx), indexing="ij"
        )
        modes = np.column_stack([np.ones(ny * nx), tilt_x.ravel(), tilt_y.ravel()])
        smoother = ("gauss_seidel", {"sweep": "symmetric"})
        hierarchy = pyamg.smoothed_aggregation_solver(
            matrix,
            B=modes,
            smooth=("energy", {}),
            presmoother=smoother,
            postsmoother=smoother,
            max_coarse=MAX_COARSE_NODES,
            max_levels=MAX_LEVELS,
            coarse_solver=(
                "splu",
                {
                    "permc_spec": "MMD_AT_PLUS_A",
                    "diag_pivot_thresh": 0.0,
                    "options": {"SymmetricMode": True},
                },
            ),
        )
        del matrix, modes, tilt_x, tilt_y
        for level in hierarchy.levels:  # set-up data the cycle does not use
            for name in ("C", "AggOp", "T", "B", "BH"):
                if hasattr(level, name):
                    delattr(level, name)
            if hasattr(level, "P"):  # restriction = Pᵀ: a view instead of a copy
                level.R = level.P.T
        coarsest = hierarchy.levels[-1].A  # factorised now (the library waits for a solve)
        hierarchy.coarse_solver(coarsest, np.zeros(coarsest.shape[0]))
        seconds = time.perf_counter() - began
        log.info(
            "multigrid set-up: %d levels (%s nodes), operator complexity %.2f, %.1f s",
            len(hierarchy.levels),
            " / ".join(str(level.A.shape[0]) for level in hierarchy.levels),
            hierarchy.operator_complexity(),
            seconds,
        )
        return cls(operator, hierarchy)

    @property
    def band_size(self) -> int:
        """Band nodes solved exactly: none."""
        return 0

    @property
    def blend_levels(self) -> np.ndarray:
        """Rigidity levels of a blend (N m): none."""
        return np.zeros(0)

    @property
    def description(self) -> str:
        """Name of the preconditioner, as recorded in the solve's information."""
        return "aggregation multigrid"

    @property
    def tolerance_factor(self) -> float:
        """Share of the requested tolerance the iteration stops at
        (:data:`MULTIGRID_TOLERANCE_FACTOR`)."""
        return MULTIGRID_TOLERANCE_FACTOR

    def use_double_precision(self) -> None:
        """Nothing to do: the cycle is in double precision."""

    def apply(
        self, residual: np.ndarray, out: np.ndarray | None = None, norm: float | None = None
    ) -> np.ndarray:
        """Preconditioned residual z (m) for a residual r (Pa): one V-cycle from zero.

        Parameters
        ----------
        residual : numpy.ndarray, shape (ny, nx)
            r (Pa).
        out : numpy.ndarray, shape (ny, nx), optional
            Where to write z; a new array by default.
        norm : float, optional
            Not used (the interface of the band and blend).
        """
        z = self._cycle(0, residual.reshape(-1)).reshape(residual.shape)
        if out is None:
            return z
        out[...] = z
        return out

    def _cycle(self, index: int, rhs: np.ndarray) -> np.ndarray:
        """The V-cycle on level *index* from a zero start (the library's own solve loop
        would take two residual norms more per cycle on the finest level)."""
        levels = self.hierarchy.levels
        if index == len(levels) - 1:
            return np.asarray(self.hierarchy.coarse_solver(levels[index].A, rhs))
        level = levels[index]
        x = np.zeros_like(rhs)
        level.presmoother(level.A, x, rhs)
        x += level.P @ self._cycle(index + 1, level.R @ (rhs - level.A @ x))
        level.postsmoother(level.A, x, rhs)
        return x

    def initial_guess(
        self,
        rhs: np.ndarray,
        start: np.ndarray | None = None,
        apply: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
        product: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """A start x₀ and its residual b − K x₀: zero, or *start* scaled as in
        :func:`~gridflex.solvers.preconditioners.scaled_start` (arguments as there)."""
        return scaled_start(rhs, start, self.operator.apply if apply is None else apply, product)
