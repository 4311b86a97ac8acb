"""Preconditioned conjugate gradients with a recomputed (true) final residual.

The vectors live in arrays allocated once; the updates of an iteration are fused into two
passes over memory in cache-sized row blocks shared among threads
(:mod:`gridflex.solvers.row_blocks`).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable

import numpy as np

from gridflex.errors import ConvergenceError
from gridflex.progress import Progress
from gridflex.solvers.row_blocks import block_rows, for_row_blocks, thread_count

__all__ = ["Operator", "Preconditioner", "conjugate_gradient"]

log = logging.getLogger(__name__)

STALL_FACTOR = 0.5
"""A restart must bring the true relative residual below this fraction of the previous
restart's, or the iteration is declared stalled (:class:`~gridflex.errors.ConvergenceError`)
instead of running on to the iteration limit."""

Operator = Callable[[np.ndarray, np.ndarray], np.ndarray]
"""``apply(x, out)``: writes K x into *out* (same shape as x) and returns it."""

Preconditioner = Callable[[np.ndarray, np.ndarray, float], np.ndarray]
"""``precondition(r, out, norm)``: writes M⁻¹ r into *out* and returns it; *norm* is
||r||₂, which the preconditioner may use (say, to judge what is negligible)."""


class _Vectors:
    """The CG vectors as 2-D float64 arrays and the fused, blocked updates between them."""

    def __init__(self, rhs: np.ndarray) -> None:
        grid = rhs.reshape(rhs.shape[0], -1) if rhs.ndim >= 2 else rhs.reshape(1, -1)
        self.shape2 = grid.shape
        self.rows = block_rows(self.shape2[1], self.shape2[0])
        self.x, self.r, self.z, self.z_old, self.p, self.q = (np.zeros(rhs.shape) for _ in range(6))
        self._tmp = [np.empty((self.rows, self.shape2[1])) for _ in range(thread_count())]

    def _grid(self, a: np.ndarray) -> np.ndarray:
        return a.reshape(self.shape2)

    def dot(self, a: np.ndarray, b: np.ndarray) -> float:
        """Σ a b, block by block (fixed order)."""
        a2, b2 = self._grid(a), self._grid(b)
        return math.fsum(
            for_row_blocks(
                self.shape2[0],
                self.rows,
                lambda j0, j1, _t: float(np.einsum("ij,ij->", a2[j0:j1], b2[j0:j1])),
            )
        )

    def step(self, alpha: float) -> float:
        """x += alpha p; r -= alpha q; returns ||r||²."""
        x, r, p, q = (self._grid(a) for a in (self.x, self.r, self.p, self.q))

        def work(j0: int, j1: int, thread: int) -> float:
            tmp = self._tmp[thread][: j1 - j0]
            np.multiply(p[j0:j1], alpha, out=tmp)
            x[j0:j1] += tmp
            np.multiply(q[j0:j1], alpha, out=tmp)
            rb = r[j0:j1]
            rb -= tmp
            return float(np.einsum("ij,ij->", rb, rb))

        return math.fsum(for_row_blocks(self.shape2[0], self.rows, work))

    def products_with_r(self) -> tuple[float, float]:
        """(r·z, r·z_old) in one pass."""
        r, z, z_old = (self._grid(a) for a in (self.r, self.z, self.z_old))

        def work(j0: int, j1: int, _t: int) -> tuple[float, float]:
            rb = r[j0:j1]
            return (
                float(np.einsum("ij,ij->", rb, z[j0:j1])),
                float(np.einsum("ij,ij->", rb, z_old[j0:j1])),
            )

        parts = for_row_blocks(self.shape2[0], self.rows, work)
        return math.fsum(a for a, _ in parts), math.fsum(b for _, b in parts)

    def new_direction(self, beta: float) -> None:
        """p = z + beta p."""
        p, z = self._grid(self.p), self._grid(self.z)

        def work(j0: int, j1: int, _t: int) -> None:
            pb = p[j0:j1]
            pb *= beta
            pb += z[j0:j1]

        for_row_blocks(self.shape2[0], self.rows, work)


def conjugate_gradient(
    apply: Operator,
    rhs: np.ndarray,
    precondition: Preconditioner,
    tolerance: float,
    max_iterations: int,
    progress: Progress | None = None,
    start: tuple[np.ndarray, np.ndarray] | None = None,
    on_restart: Callable[[], None] | None = None,
) -> tuple[np.ndarray, int, float]:
    """Solve K x = b for a symmetric positive-definite K by preconditioned CG.

    Parameters
    ----------
    apply : callable
        ``apply(x, out)`` writes K x into *out* (:data:`Operator`).
    rhs : numpy.ndarray
        b (float64).
    precondition : callable
        ``precondition(r, out, norm)`` writes M⁻¹ r into *out*, M⁻¹ symmetric positive
        definite (:data:`Preconditioner`).
    tolerance : float
        Required relative residual ||b − K x|| / ||b|| (2-norm).
    max_iterations : int
        Iteration limit.
    progress : callable, optional
        Called after every iteration with (iterations done, *max_iterations*), and once
        more with (iterations, iterations) on convergence.
    start : tuple of numpy.ndarray, optional
        Initial guess x₀ and its residual b − K x₀; zero by default.
    on_restart : callable, optional
        Called before the iteration restarts because the recurrence residual met the
        tolerance but the true one did not (say, to make the preconditioner exact).

    Returns
    -------
    x : numpy.ndarray
        The solution.
    iterations : int
        Iterations used.
    residual : float
        The true relative residual ||b − K x|| / ||b||, recomputed from x (not the
        recurrence estimate).

    Raises
    ------
    ConvergenceError
        When the tolerance is not reached within *max_iterations*, when a restart does not
        at least halve the true residual of the previous one (stalled at round-off), or
        when the operator or preconditioner turns out not to be positive definite.

    Notes
    -----
    The direction update is the Polak-Ribière (flexible) form,
    β = r·(z − z_old) / (r_old·z_old), which tolerates a preconditioner that varies
    slightly between iterations (single-precision FFTs).
    """
    v = _Vectors(rhs)
    b_norm = math.sqrt(v.dot(rhs, rhs))
    if b_norm == 0.0:
        return np.zeros_like(rhs), 0, 0.0

    def true_residual() -> float:
        apply(v.x, v.q)
        np.subtract(rhs, v.q, out=v.r)
        return math.sqrt(v.dot(v.r, v.r)) / b_norm

    if start is None:
        v.r[...] = rhs
        relative = 1.0
    else:
        v.x[...], v.r[...] = start
        relative = math.sqrt(v.dot(v.r, v.r)) / b_norm
        if relative <= tolerance:
            # the start may solve the problem (say, an exact band solve): check truly
            relative = true_residual()
            if relative <= tolerance:
                if progress is not None:
                    progress(0, 0)
                return v.x, 0, relative
    precondition(v.r, v.z, relative * b_norm)
    v.p[...] = v.z
    rz = v.dot(v.r, v.z)
    last_restart = math.inf
    for iteration in range(1, max_iterations + 1):
        apply(v.p, v.q)
        pq = v.dot(v.p, v.q)
        if not (pq > 0.0 and rz > 0.0):
            raise ConvergenceError(
                f"conjugate gradients broke down at iteration {iteration}: the operator or "
                "its preconditioner is not positive definite "
                f"(p.Kp = {pq:.3g}, r.z = {rz:.3g})"
            )
        relative = math.sqrt(v.step(rz / pq)) / b_norm
        if progress is not None:
            progress(iteration, max_iterations)
        log.debug("CG iteration %d: relative residual %.3e", iteration, relative)
        if relative <= tolerance:
            relative = true_residual()
            if relative <= tolerance:
                if progress is not None:
                    progress(iteration, iteration)  # done: the count reaches the total
                return v.x, iteration, relative
            if relative > STALL_FACTOR * last_restart:
                raise ConvergenceError(
                    f"conjugate gradients stalled at a true relative residual of "
                    f"{relative:.3e} after {iteration} iterations (tolerance "
                    f"{tolerance:.1e}): round-off limits the residual; raise the tolerance"
                )
            last_restart = relative
            log.debug("true residual %.3e above tolerance; restarting", relative)
            if on_restart is not None:
                on_restart()
            precondition(v.r, v.z, relative * b_norm)
            v.p[...] = v.z
            rz = v.dot(v.r, v.z)
            continue
        v.z, v.z_old = v.z_old, v.z
        precondition(v.r, v.z, relative * b_norm)
        rz_new, rz_old = v.products_with_r()
        v.new_direction((rz_new - rz_old) / rz)
        rz = rz_new
    raise ConvergenceError(
        f"conjugate gradients did not converge: relative residual {relative:.3e} after "
        f"{max_iterations} iterations, tolerance {tolerance:.1e}; raise max_iterations or "
        "the tolerance, or smooth very sharp rigidity changes"
    )
