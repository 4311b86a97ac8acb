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
minimization"; both recalled from memory). The levels are built here from the kernels of
the general-purpose library pyamg (strength, aggregation, fitting of the modes, products on
a pattern), with the energy minimisation and the Galerkin products arranged to hold little
at a time: the set-up peaks at about 0.6 kB per node of the solve grid, where pyamg's own
driver took 1.8 kB. Its memory grows like the grid's, not like a direct factor of most of
it.

Measured (tests/benchmarks/te_map_robustness.py, band capped at a quarter of what it asks
for, 256²; iterations of the solve at its default tolerance): te_map at 250 m / 1 / 4 /
10 km 27 / 27 / 31 / 27; clipped, jumps and holes 17-22; rough (te changing every 1.5
cells) 124 / 69 / 30 at 1 / 4 / 10 km (167 / 69 / 30 with the rigid-body modes alone),
and at 250 m 302: 356 with the rigid-body modes alone, which stopped at the old default
limit of 300 (ConvergenceError at default settings). At 1 km and 250 m the near null space
was strengthened (:meth:`AggregationPreconditioner.strengthen`, :data:`CANDIDATE_CYCLES`)
after 100 and 250 iterations, when the iteration headed for more than
:data:`SLOW_HORIZON` further ones.
The partial band and blend raised
ConvergenceError on all of them but clipped and holes at 4 and 10 km and jumps at 10 km
(24-158 iterations there). Jacobi-smoothed prolongation took 3-4 times as many
iterations; combined with the partial band and blend the multigrid did worse than alone;
two Gauss-Seidel sweeps instead of one: 32 -> 28 iterations on te_map at 512², but a
slower solve (4.9 s against 2.8 s), and 356 -> 346 on the rough map at 250 m.
te_map of tests/benchmarks/variable.py at default settings (tests/benchmarks/variable.py
``--refine``; 2048 km domain): at 2048² of 1 km 23 iterations, set-up 68 s, solve 32 s
(the partial band raised ConvergenceError there before the multigrid). At 4096² of 250 m
(solve grid 4320², 18.7 M nodes): 37 iterations, set-up 386 s, solve 208 s, peak 15.4 GB
for the whole process (42 iterations and 14.3 GB with threshold 0,
:data:`STRENGTH_THRESHOLD`; pyamg's own driver needed about 29 GB there, and the partial
band raised ConvergenceError after 300 iterations and 12 minutes). The figures above are
for point Gauss-Seidel on the finest level. A slow iteration now brings in block
Gauss-Seidel over two grids of overlapping patches there (:mod:`gridflex.solvers.patch_smoother`,
:data:`PATCH_SIZES`, :data:`PATCH_HORIZON`): built from the start, they took the rough map
from 302 to 84 iterations at 256² of 250 m and from 903 to 234 at 1024² of 250 m (solve
299 s against 690 s), but cost smooth maps more than they saved (:data:`PATCH_HORIZON`).
Rough at 2048² of 250 m still stalls (its error estimate followed the same course with
either smoother; tests/benchmarks/te_map_robustness.py).
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.linalg.blas
import scipy.sparse as sp

from gridflex.errors import InputError
from gridflex.memory import check_memory
from gridflex.solvers.patch_smoother import PatchSmoother
from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.preconditioners import scaled_start, symmetric_factor

__all__ = [
    "AGGREGATION_BYTES_PER_NODE",
    "AggregationPreconditioner",
    "CANDIDATE_CYCLES",
    "MAX_ADDED_MODES",
    "MULTIGRID_TOLERANCE_FACTOR",
    "aggregation_bytes",
    "coarsest_factor",
    "rigid_body_modes",
    "smoothed_prolongation",
]

log = logging.getLogger(__name__)

MAX_COARSE_NODES = 2000
"""Unknowns at which the coarsening stops before :data:`MAX_LEVELS` (small grids)."""

MAX_LEVELS = 3
"""Levels at most; the coarsest is solved by sparse LU (SuperLU). A fourth level made the
V-cycle much weaker: te_map of tests/benchmarks/variable.py on a 2048 km domain at 1024² of
2 km (levels of 1.17 M, 219 k, 10.5 k and 486 unknowns) took 93 iterations, and 34 with the
10.5 k level solved exactly; at 256² and 512² (three levels either way) 42 and 40."""

STRENGTH_THRESHOLD = 0.05
"""Connections between nodes i, j count as strong when |K_ij| >= theta sqrt(|K_ii K_jj|);
the aggregates follow strong connections, so they stop at the steep rigidity changes
instead of spanning stiff and weak plate (common practice for coefficients of high
contrast). Measured on te_map of tests/benchmarks/variable.py (2048 km domain), iterations
at 512² / 1024² / 2048² with theta = 0 / 0.05 / 0.08: 40 / 34 / 39, 32 / 28 / 23 and
- / 23 / 19; peak set-up memory at 1024² 624 / 662 / 806 bytes per node (the second level
218 k / 261 k / 352 k unknowns), at 2048² 667 (0.05) and 804 (0.08). At 256² with the band
capped (tests/benchmarks/te_map_robustness.py) theta = 0.05 took 17-31 iterations on te_map,
clipped, jumps and holes at every cell size (27-50 at theta = 0) and 167 / 69 / 30 on the
rough map at 1 / 4 / 10 km (285 / 98 / 47)."""

PATCH_SIZES = (8, 6, 4)
"""Patch sides (nodes) of the finest level's smoother (two grids of patches, the second
shifted by half a patch), tried in turn until one fits in memory
(:func:`gridflex.solvers.patch_smoother.patch_bytes`: about 1.5 / 1.05 / 0.75 kB per node).
Iterations on the rough map of tests/benchmarks/te_map_robustness.py at 250 m: 84 / 94 /
104 at 256², 109 / 105 / 138 at 512² (point Gauss-Seidel 356, 554)."""

MODE_SWEEPS = 4
"""Symmetric Gauss-Seidel sweeps of K x = 0 applied to the rigid-body modes on the finest
level before they are fitted to the aggregates (so that they meet the plate's edges and
te = 0 zones as K's near null space does; pyamg's default, kept)."""

ENERGY_STEPS = 4
"""Conjugate-gradient steps minimising the energy of the prolongation's columns."""

PSEUDO_INVERSE_RCOND = 1e6 * float(np.finfo(np.float64).eps)
"""Relative cut-off of the singular values in the local constraint matrices' pseudo-inverses
(pyamg's choice for double precision, kept)."""

INVERSE_BLOCK = 1 << 18
"""Constraint matrices inverted at a time (bounds the SVD's temporaries)."""

GALERKIN_BLOCKS = 8
"""Blocks of rows the Galerkin product is summed over (at most, unless they would be smaller
than :data:`GALERKIN_BLOCK_ROWS`)."""

GALERKIN_BLOCK_ROWS = 1 << 18
"""Least rows of a block of the Galerkin product."""

AGGREGATION_BYTES_PER_NODE = 800.0
"""Estimated peak memory of the set-up (bytes per node of the solve grid), the operator's
sparse matrix included, with some room: measured with tracemalloc on te_map of
tests/benchmarks/variable.py at 1024² of 2 km (solve grid 1080², 1.17 M nodes), 624 bytes
per node with strength threshold 0 and 662 with 0.05 (the strength of connection, the
energy minimisation and the Galerkin product each about 0.6 kB, the matrix 146 bytes,
0.37 kB kept after the set-up), against 1.78 kB with pyamg's own driver; 667 at 2048². The
whole process peaked at 15.4 GB on the 18.7 M nodes of 4096² of 250 m (824 bytes per
node, every other array included)."""

MULTIGRID_TOLERANCE_FACTOR = 0.1
"""The conjugate gradients preconditioned by multigrid stop at this fraction of the
requested tolerance. Their energy-norm error estimate let through larger pointwise errors
than the band and blend's: measured against a direct solve at 256² of 1 km (band capped
at a quarter, tests/benchmarks/te_map_robustness.py), the largest difference was up to
10.5 times the estimate (rough: 9.0e-6 of the peak at an estimate of 8.6e-7), against at
most 0.6 with the band and blend; at a tenth of the tolerance it was 1.5e-7 (rough) and at
most 1.4e-7 on the other maps, for 6-15 % more iterations."""


PATCH_HORIZON = 0.0
"""Further iterations (at a check every
:data:`~gridflex.solvers.conjugate_gradient.SLOW_EVERY`) beyond which
:meth:`AggregationPreconditioner.strengthen` builds the finest level's patch smoother: 0,
so a solve still short of its tolerance at the first check gets the patches then.

They are not built at set-up: they cost a third of it (9 of 28 s at 1024²) and make a
V-cycle about 1.7 times dearer, which maps the point smoother handles in a few dozen
iterations do not earn back. Measured with the multigrid forced (``max_band_nodes=1``),
iterations and seconds (set-up and solve) with the patches from the start / from the first
check (this rule) / never:

- tests/benchmarks/variable.py te_map at 1024² of 2 km: 25 and 44.0 / 38.6 s (two runs)
  against 28 and 28.9 / 22.8 s without them (the rule: none built);
- tests/benchmarks/te_map_robustness.py at 512²: rough 250 m 109, 23.3 s / 159, 24.8 s /
  298, 58.8 s; rough 1 km 48, 11.3 s / 76, 12.3 s / 154, 15.0 s; rough 4 km 28, 7.8 s /
  40, 6.2 s / 40, 6.2 s; clipped 1 km 20, 7.5 s / 21, 4.3 s / 21, 4.4 s;
- the same at 256²: rough 250 m 4.9 / 5.8 / 14.0 s, 1 km 3.5 / 3.4 / 9.3 s, 4 km 2.5 / 2.8
  / 2.2 s, 10 km 2.1 / 1.4 / 1.4 s, clipped 1 km 1.9 / 1.1 / 1.1 s.

A higher horizon (60 or 100 further iterations: the patches at the second check on rough
at 1 km, 256²) took 137 iterations and 5.2-5.6 s there against 85 and 3.4 s: the
iterations projected from the first 50 fall short of those still needed. At 2048² of 2 km
(te_map, default settings) the rule gave 22 iterations, 111.6 s in all and a peak of
3.7 GB, against 19, 139.8 s and 9.4 GB with the patches built at set-up."""

SLOW_HORIZON = 300
"""Further iterations beyond which :meth:`AggregationPreconditioner.strengthen` adds
vectors to the near null space (or beyond the iterations left before the limit).
Strengthening the multigrid costs one to two set-ups per vector, some tens of iterations
each: on the rough map of tests/benchmarks/te_map_robustness.py at 250 m (vectors added
at iteration 50, point Gauss-Seidel) 126 iterations and 9.0 s against 356 and 8.6 s at
256², 298 and 53 s against 554 and 47 s at 512², 918 and 722 s against 2845 and 1131 s at
1024². A small loss where the solve is short, a large gain (and convergence within the
limit) where it is long."""

MAX_ADDED_MODES = 3
"""Near-null-space vectors :meth:`AggregationPreconditioner.strengthen` adds at most to the
three rigid-body modes."""

CANDIDATE_CYCLES = 8
"""V-cycles on K x = 0 from a random start that make the vector a slow convergence adds to
the near null space (adaptive smoothed aggregation, Brezina, Falgout, MacLachlan,
Manteuffel, McCormick & Ruge 2004, SIAM J. Sci. Comput. 25, "Adaptive smoothed aggregation
(αSA) multigrid"; recalled from memory): what is left of the random vector is the error
the levels reduce slowest, which the rigid-body modes do not span. Measured on the rough
map of tests/benchmarks/te_map_robustness.py at 256² of 250 m (no band; conjugate
gradients to a preconditioned residual of 1e-9): 551 iterations with the three modes, 287 /
121 / 75 with one / two / three such vectors added one after another (8 cycles each; 252
with one vector of 20 cycles); set-up 1.3 -> 3.0 / 6.0 / 7.4 s."""


def aggregation_bytes(operator: PlateOperator, modes: int = 3) -> float:
    """Estimated peak memory (bytes) of :meth:`AggregationPreconditioner.build` with
    *modes* near-null-space vectors per aggregate: :data:`AGGREGATION_BYTES_PER_NODE`
    for the three rigid-body modes, times (modes / 3)² (the coarse blocks' values; measured
    peak at 512² of 250 m on the rough map of tests/benchmarks/te_map_robustness.py with
    3 / 4 / 5 / 6 modes, 631 / 895 / 1579 / 1638 bytes per node, tracemalloc)."""
    return AGGREGATION_BYTES_PER_NODE * (modes / 3.0) ** 2 * float(operator.rigidity.size)


def _check_setup_memory(operator: PlateOperator, modes: int) -> None:
    """InputError when :func:`aggregation_bytes` of a set-up with *modes* near-null-space
    vectors does not fit in the memory available now."""
    check_memory(
        aggregation_bytes(operator, modes),
        f"multigrid set-up of the finite-difference solve on {operator.shape[0]} x "
        f"{operator.shape[1]} nodes with {modes} near-null-space vectors",
    )


def _block_rows(matrix: Any) -> int:
    """Rows per block of a CSR (1) or BSR matrix."""
    return int(matrix.blocksize[0]) if matrix.format == "bsr" else 1


def _constraint_inverses(
    coarse_modes: np.ndarray, indptr: np.ndarray, indices: np.ndarray, block_columns: int
) -> np.ndarray:
    """Pseudo-inverses of Bᵢᵀ Bᵢ, Bᵢ the coarse modes on the columns of block row i of the
    prolongation's pattern; shape (block rows, k, k)."""
    from pyamg import amg_core

    count, k = indptr.size - 1, coarse_modes.shape[1]
    upper = [(i, j) for i in range(k) for j in range(i, k)]
    products = np.column_stack([coarse_modes[:, i] * coarse_modes[:, j] for i, j in upper])
    gram = np.zeros((count, k, k))
    amg_core.calc_BtB(
        k, count, block_columns, np.ravel(products), len(upper), np.ravel(gram), indptr, indices
    )
    del products
    for start in range(0, count, INVERSE_BLOCK):
        chunk = gram[start : start + INVERSE_BLOCK]
        # calc_BtB writes column-major blocks: their transposes (and symmetric anyway)
        chunk[...] = np.linalg.pinv(chunk.transpose(0, 2, 1), rcond=PSEUDO_INVERSE_RCOND)
    return gram


def _pattern(strength: Any, tentative: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The prolongation's sparsity: the aggregates of each node's strong neighbours (the
    pattern of T widened by one strong connection), as BSR row pointers and block column
    indices, with T's values placed on it (blocks of T's shape)."""
    block_rows = strength.shape[0]
    rows_per_block, k = (int(size) for size in tentative.blocksize)
    coarse_blocks = tentative.shape[1] // k
    tentative.sort_indices()
    aggregates = sp.csr_array(
        (np.ones(tentative.indices.size), tentative.indices, tentative.indptr),
        shape=(block_rows, coarse_blocks),
    )
    pattern = strength @ aggregates
    del aggregates
    pattern.sort_indices()
    indptr, indices = pattern.indptr, pattern.indices
    del pattern
    # T's blocks into the pattern (which holds them): keys sorted row by row
    rows = np.arange(block_rows, dtype=np.int64)
    keys = np.repeat(rows, np.diff(indptr)) * coarse_blocks + indices
    tentative_keys = np.repeat(rows, np.diff(tentative.indptr)) * coarse_blocks
    tentative_keys += tentative.indices
    where = np.searchsorted(keys, tentative_keys)
    # (each node is strongly connected within its aggregate, so the pattern holds T)
    if not np.array_equal(keys[np.minimum(where, keys.size - 1)], tentative_keys):
        raise RuntimeError("multigrid set-up: the prolongation's pattern misses T's blocks")
    values = np.zeros((indices.size, rows_per_block, k))
    values[where] = tentative.data
    return indptr, indices, values


def smoothed_prolongation(
    matrix: Any,
    indptr: np.ndarray,
    indices: np.ndarray,
    values: np.ndarray,
    coarse_modes: np.ndarray,
) -> sp.csr_array:
    """The prolongation of smoothed aggregation by energy minimisation.

    The columns of the tentative prolongation T (one aggregate's fitted modes each) are
    relaxed by :data:`ENERGY_STEPS` steps of conjugate gradients on K P = 0 (Gershgorin
    weights), each step kept inside the pattern of T widened by one strong connection and
    projected so that P B_c = T B_c (the rigid-body modes stay exactly represented): Olson,
    Schroder & Tuminaro (2011, SIAM J. Sci. Comput. 33, "A general interpolation strategy
    for algebraic multigrid using energy minimization"; recalled from memory). The method
    and its kernels are pyamg's; here the iteration's matrices share one pattern and are
    value arrays, four of P's size, where pyamg's own smoothing peaked at 1.7 kB per node of
    the plate.

    Parameters
    ----------
    matrix : scipy.sparse.csr_array or bsr_array
        K on this level, symmetric positive definite.
    indptr, indices : numpy.ndarray
        The pattern (:func:`_pattern`): BSR row pointers and block column indices.
    values : numpy.ndarray, shape (blocks, rows per block of K, k)
        T on the pattern; overwritten by P.
    coarse_modes : numpy.ndarray, shape (T's columns, k)
        The modes on the coarse level (B_c; T B_c are the fine modes).

    Returns
    -------
    scipy.sparse.csr_array
        P, shape (K's rows, T's columns).
    """
    from pyamg import amg_core

    rows_per_block, k = values.shape[1], values.shape[2]
    block_rows = indptr.size - 1
    coarse_blocks = coarse_modes.shape[0] // k
    shape = (matrix.shape[0], coarse_modes.shape[0])

    def view(data: np.ndarray) -> sp.bsr_array:
        return sp.bsr_array((data, indices, indptr), shape=shape, copy=False)

    # Gershgorin weights: inverse absolute row sums of K, on each block's rows
    row_sums = abs(matrix) @ np.ones(matrix.shape[0])
    weights = np.divide(1.0, row_sums, out=np.zeros_like(row_sums), where=row_sums != 0)
    del row_sums
    weights = np.repeat(weights.reshape(block_rows, rows_per_block), np.diff(indptr), axis=0)
    weights = weights[:, :, None]
    inverses = np.ravel(_constraint_inverses(coarse_modes, indptr, indices, k))
    modes = np.ravel(coarse_modes)  # (real: the conjugate the kernel asks for)
    if matrix.format == "bsr":
        k_indptr, k_indices, k_values = matrix.indptr, matrix.indices, np.ravel(matrix.data)
    else:
        k_indptr, k_indices, k_values = matrix.indptr, matrix.indices, matrix.data

    def project(target: np.ndarray) -> None:
        """target -= its part that changes P B_c (in place)."""
        surplus = np.ravel(view(target) @ coarse_modes)
        amg_core.satisfy_constraints_helper(
            rows_per_block, k, block_rows, k, modes, surplus, inverses, indptr, indices,
            np.ravel(target),
        )  # fmt: skip

    def product(source: np.ndarray, out: np.ndarray) -> None:
        """out = K source on the pattern, projected."""
        out[...] = 0.0
        amg_core.incomplete_mat_mult_bsr(
            k_indptr, k_indices, k_values, indptr, indices, np.ravel(source), indptr,
            indices, np.ravel(out), block_rows, coarse_blocks, rows_per_block,
            rows_per_block, k,
        )  # fmt: skip
        project(out)

    residual = np.empty_like(values)
    product(values, residual)
    residual *= -1.0
    direction = np.zeros_like(values)
    scratch = np.empty_like(values)  # the weighted residual, then K times the direction
    flat = [np.ravel(array) for array in (values, residual, direction, scratch)]
    previous = 0.0
    for step in range(ENERGY_STEPS):
        np.multiply(residual, weights, out=scratch)
        current = float(np.vdot(residual, scratch))
        if current < 1e-8:  # (pyamg's absolute tolerance, kept)
            break
        if step:
            direction *= current / previous
        direction += scratch
        previous = current
        product(direction, scratch)
        alpha = current / float(np.vdot(direction, scratch))
        scipy.linalg.blas.daxpy(flat[2], flat[0], a=alpha)  # P += alpha d, in place
        scipy.linalg.blas.daxpy(flat[3], flat[1], a=-alpha)  # R -= alpha K d
    del residual, direction, scratch, flat
    smoothed = view(values)
    smoothed.eliminate_zeros()
    return smoothed.tocsr()


def rigid_body_modes(shape: tuple[int, int]) -> np.ndarray:
    """The rigid-body modes of a plate on a grid of *shape* (ny, nx), the near null space
    of K: translation and the two tilts, scaled to O(1); shape (ny nx, 3), row-major
    nodes."""
    ny, nx = shape
    modes = np.empty((ny * nx, 3))
    modes[:, 0] = 1.0
    modes[:, 1].reshape(ny, nx)[...] = np.linspace(-0.5, 0.5, nx)[None, :]
    modes[:, 2].reshape(ny, nx)[...] = np.linspace(-0.5, 0.5, ny)[:, None]
    return modes


def _improved_modes(matrix: Any, modes: np.ndarray) -> np.ndarray:
    """The rigid-body modes after :data:`MODE_SWEEPS` symmetric Gauss-Seidel sweeps of
    K x = 0 (in place; returned)."""
    from pyamg.relaxation.relaxation import gauss_seidel

    zero = np.zeros(matrix.shape[0])
    for column in range(modes.shape[1]):
        mode = np.ascontiguousarray(modes[:, column])
        gauss_seidel(matrix, mode, zero, iterations=MODE_SWEEPS, sweep="symmetric")
        modes[:, column] = mode
    return modes


def _coarsen(matrix: Any, modes: np.ndarray) -> tuple[sp.csr_array, Any, np.ndarray]:
    """One level of smoothed aggregation: the prolongation P, the Galerkin operator Pᵀ K P
    (BSR, blocks of the modes' count) and the coarse modes."""
    from pyamg.aggregation.aggregate import standard_aggregation
    from pyamg.aggregation.tentative import fit_candidates
    from pyamg.strength import symmetric_strength_of_connection

    strength = symmetric_strength_of_connection(matrix, theta=STRENGTH_THRESHOLD)
    aggregates, _ = standard_aggregation(strength)
    tentative, coarse_modes = fit_candidates(aggregates, modes)
    del aggregates
    indptr, indices, values = _pattern(strength, tentative)
    del strength, tentative
    prolongation = smoothed_prolongation(matrix, indptr, indices, values, coarse_modes)
    del indptr, indices, values
    return prolongation, _galerkin(matrix, prolongation, coarse_modes.shape[1]), coarse_modes


def _rows(matrix: Any, start: int, stop: int) -> Any:
    """Block rows start:stop of a CSR or BSR matrix, sharing its arrays."""
    first, last = int(matrix.indptr[start]), int(matrix.indptr[stop])
    arrays = (
        matrix.data[first:last],
        matrix.indices[first:last],
        matrix.indptr[start : stop + 1] - first,
    )
    per_block = _block_rows(matrix)
    shape = ((stop - start) * per_block, matrix.shape[1])
    if matrix.format == "bsr":
        return sp.bsr_array(arrays, shape=shape, copy=False)
    return sp.csr_array(arrays, shape=shape, copy=False)


def _galerkin(matrix: Any, prolongation: sp.csr_array, k: int) -> sp.bsr_array:
    """Pᵀ K P as BSR with k x k blocks, summed over blocks of K's rows (K P whole would
    hold some 40 values per node)."""
    per_block = _block_rows(matrix)
    rows = matrix.shape[0] // per_block
    step = max(GALERKIN_BLOCK_ROWS // per_block, -(-rows // GALERKIN_BLOCKS))
    coarse: Any = None
    for start in range(0, rows, step):
        stop = min(start + step, rows)
        fine = _rows(prolongation, start * per_block, stop * per_block)
        part = fine.T @ (_rows(matrix, start, stop) @ prolongation)
        coarse = part if coarse is None else coarse + part
        del part, fine
    return sp.bsr_array(coarse).tobsr(blocksize=(k, k))


def _patch_smoother(operator: PlateOperator, matrix: Any) -> PatchSmoother | None:
    """The finest level's patch smoother with the largest of :data:`PATCH_SIZES` whose
    memory fits, or None (logged) when none does."""
    refusal = None
    for size in PATCH_SIZES:
        began = time.perf_counter()
        try:
            patches = PatchSmoother.build(sp.csr_array(matrix), operator.shape, size)
        except InputError as exc:
            refusal = exc
            continue
        log.info(
            "multigrid: patch smoother of %d x %d nodes (%s), %.1f s",
            size,
            size,
            "two grids" if patches.overlap else "one grid",
            time.perf_counter() - began,
        )
        return patches
    log.warning("%s; the multigrid smooths with point Gauss-Seidel instead", refusal)
    return None


def coarsest_factor(matrix: Any) -> Any:
    """Sparse LU factor of the coarsest level's operator (symmetric positive semidefinite).

    An all-zero row and column (a zero column of P: an aggregate with fewer nodes than
    modes) gets a unit diagonal, so that the factor exists; the restricted residual is zero
    there, so the solution is too."""
    empty = matrix.diagonal() == 0.0
    if empty.any():
        matrix = matrix + sp.diags_array(empty.astype(np.float64))
    return symmetric_factor(matrix)


@dataclass(eq=False)
class MultigridLevel:
    """One level above the coarsest: its operator and the prolongation from the next.

    Attributes
    ----------
    matrix : scipy.sparse.csr_array or bsr_array
        K on this level (the plate's on the finest, Galerkin products below).
    prolongation : scipy.sparse.csr_array
        P, from the next level's unknowns to this level's.
    """

    matrix: Any
    prolongation: sp.csr_array

    @property
    def restriction(self) -> sp.csc_array:
        """Pᵀ, sharing P's arrays (CSR read as CSC: no copy)."""
        p = self.prolongation
        return sp.csc_array((p.data, p.indices, p.indptr), shape=(p.shape[1], p.shape[0]))

    def smooth(self, x: np.ndarray, rhs: np.ndarray) -> None:
        """One symmetric Gauss-Seidel sweep on K x = rhs, in place."""
        from pyamg.relaxation.relaxation import gauss_seidel

        gauss_seidel(self.matrix, x, rhs, iterations=1, sweep="symmetric")


@dataclass(eq=False)
class AggregationPreconditioner:
    """One symmetric V-cycle of smoothed-aggregation multigrid on K, with the interface of
    :class:`~gridflex.solvers.preconditioners.MultiplicativePreconditioner`. The smoother
    before and after each coarse correction is a symmetric point Gauss-Seidel sweep; on
    the finest level, once a slow iteration has called for them (:meth:`strengthen`,
    :data:`PATCH_HORIZON`), a sweep of block Gauss-Seidel over square patches instead
    (:mod:`gridflex.solvers.patch_smoother`, colours in reverse order after).

    Attributes
    ----------
    operator : PlateOperator
        K on the solve grid.
    levels : list of MultigridLevel
        The levels above the coarsest, finest first.
    coarsest : scipy.sparse.linalg.SuperLU
        Sparse LU factor of the coarsest level's operator.
    added_modes : numpy.ndarray or None
        Vectors added to the rigid-body modes by :meth:`strengthen` (nodes x m), if any.
    patches : PatchSmoother or None
        The finest level's patch smoother; None (point Gauss-Seidel) until
        :meth:`strengthen` builds it, or when there is no level above the coarsest or its
        memory did not fit.
    """

    operator: PlateOperator
    levels: list[MultigridLevel]
    coarsest: Any
    added_modes: np.ndarray | None = None
    patches: PatchSmoother | None = None
    _refused: bool = field(default=False, repr=False)
    _patches_tried: bool = field(default=False, repr=False)

    @classmethod
    def build(
        cls,
        operator: PlateOperator,
        added_modes: np.ndarray | None = None,
        matrix: Any = None,
    ) -> AggregationPreconditioner:
        """Set up the levels for *operator*.

        Parameters
        ----------
        operator : PlateOperator
            K.
        added_modes : numpy.ndarray, shape (nodes, m), optional
            Vectors added to the rigid-body modes as near null space
            (:meth:`strengthen`).
        matrix : scipy.sparse matrix, optional
            *operator*'s matrix, when already assembled.

        Raises
        ------
        InputError
            Not enough memory (estimated first, :func:`aggregation_bytes`).
        """
        _check_setup_memory(operator, 3 + (0 if added_modes is None else added_modes.shape[1]))
        began = time.perf_counter()
        if matrix is None:
            matrix = operator.matrix()
        modes = _improved_modes(matrix, rigid_body_modes(operator.shape))
        if added_modes is not None:
            modes = np.column_stack([modes, added_modes])
        levels: list[MultigridLevel] = []
        sizes = [matrix.shape[0]]
        while (
            len(levels) + 1 < MAX_LEVELS
            and matrix.shape[0] // _block_rows(matrix) > MAX_COARSE_NODES
        ):
            prolongation, coarse, modes = _coarsen(matrix, modes)
            levels.append(MultigridLevel(matrix, prolongation))
            matrix = coarse
            sizes.append(matrix.shape[0])
        del modes
        complexity = sum(level.matrix.nnz for level in levels) + matrix.nnz
        complexity /= levels[0].matrix.nnz if levels else matrix.nnz
        coarsest = coarsest_factor(matrix)
        del matrix
        log.info(
            "multigrid set-up: %d levels (%s nodes), operator complexity %.2f, %.1f s",
            len(sizes),
            " / ".join(str(size) for size in sizes),
            complexity,
            time.perf_counter() - began,
        )
        return cls(operator, levels, coarsest, added_modes)

    def strengthen(self, further: float = math.inf, left: float = math.inf) -> bool:
        """Make the V-cycle stronger when the iteration heads for many *further* iterations
        (``on_slow`` of :func:`~gridflex.solvers.conjugate_gradient.conjugate_gradient`;
        *left*: the iterations left before its limit). True when it changed.

        First, beyond :data:`PATCH_HORIZON`, the finest level's point Gauss-Seidel gives
        way to the patch smoother (:func:`_patch_smoother`; once, and only that, unless
        the patches do not fit in memory). Then, beyond :data:`SLOW_HORIZON` or the
        iterations left, the errors the levels reduce slowest join their near null space,
        one after another up to :data:`MAX_ADDED_MODES` (each computed with the levels
        built with the ones before, :data:`CANDIDATE_CYCLES`), building the levels again
        each time; none when the memory estimate of the next set-up does not fit beside
        the present levels, which are kept until the new ones stand (logged once:
        checked before the vector's cycles, and not tried again).

        The vectors all at once rather than one per slow spell: on the rough map of
        tests/benchmarks/te_map_robustness.py at 256² of 250 m, 126 iterations in all
        (10.2 s with the set-ups) against 225 (14.4 s) adding one vector after each 50
        slow iterations (356 and 8.6 s without), point Gauss-Seidel throughout."""
        if not self._patches_tried and self.levels and further > PATCH_HORIZON:
            self._patches_tried = True  # (kept when the levels are built again: K's alone)
            self.patches = _patch_smoother(self.operator, self.levels[0].matrix)
            if self.patches is not None:
                return True
        if not further > min(left, SLOW_HORIZON):
            return False
        added = False
        while self._add_mode():
            added = True
        return added

    def _add_mode(self) -> bool:
        """One vector of :meth:`strengthen`; True when added."""
        count = 0 if self.added_modes is None else self.added_modes.shape[1]
        if count >= MAX_ADDED_MODES or not self.levels or self._refused:
            return False
        try:  # before the cycles: a set-up that cannot fit is not tried again
            _check_setup_memory(self.operator, 3 + count + 1)
        except InputError as exc:
            log.warning("%s; the multigrid stays as it is", exc)
            self._refused = True
            return False
        began = time.perf_counter()
        matrix = self.levels[0].matrix
        vector = np.random.default_rng(count).standard_normal(matrix.shape[0])
        for _ in range(CANDIDATE_CYCLES):
            vector -= self._cycle(0, matrix @ vector)
            vector /= float(np.abs(vector).max())
        modes = vector[:, None]
        if self.added_modes is not None:
            modes = np.column_stack([self.added_modes, vector])
        try:  # (the present levels are kept until the new ones stand)
            stronger = AggregationPreconditioner.build(self.operator, modes, matrix)
        except InputError as exc:
            log.warning("%s; the multigrid stays as it is", exc)
            self._refused = True
            return False
        self.levels, self.coarsest, self.added_modes = (
            stronger.levels,
            stronger.coarsest,
            stronger.added_modes,
        )
        log.info(
            "multigrid: slow convergence; %d vector(s) added to the rigid-body modes, %.1f s",
            modes.shape[1],
            time.perf_counter() - began,
        )
        return True

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

    @property
    def exact(self) -> bool:
        """False: one V-cycle approximates K⁻¹."""
        return False

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
        """The V-cycle on level *index* from a zero start."""
        if index == len(self.levels):
            return np.asarray(self.coarsest.solve(rhs))
        level = self.levels[index]
        if index == 0 and self.patches is not None:  # (vectors with a spare last entry)
            x, residual = self.patches.smooth(rhs)
            x[:-1] += level.prolongation @ self._cycle(1, level.restriction @ residual[:-1])
            residual[:-1] = rhs - level.matrix @ x[:-1]
            self.patches.sweep(x, residual, reverse=True)
            return x[:-1]
        x = np.zeros_like(rhs)
        level.smooth(x, rhs)
        x += level.prolongation @ self._cycle(
            index + 1, level.restriction @ (rhs - level.matrix @ x)
        )
        level.smooth(x, rhs)
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
