"""Preconditioned conjugate gradients with a recomputed (true) final residual."""

from __future__ import annotations

import logging
from collections.abc import Callable

import numpy as np
import scipy.linalg.blas

from ..errors import ConvergenceError

__all__ = ["Progress", "conjugate_gradient"]

log = logging.getLogger(__name__)

Progress = Callable[[int, int], None]
"""Progress callback, called with (iterations done, iteration limit)."""

Operator = Callable[[np.ndarray], np.ndarray]


def _axpy(a: float, x: np.ndarray, y: np.ndarray) -> None:
    """y += a x in place, without a temporary (BLAS daxpy for contiguous float64)."""
    if y.dtype == np.float64 and x.dtype == np.float64 and x.flags.c_contiguous \
            and y.flags.c_contiguous:
        flat = y.reshape(-1)
        out = scipy.linalg.blas.daxpy(x.reshape(-1), flat, a=a)
        if not np.shares_memory(out, flat):  # f2py copied instead of updating in place
            flat[...] = out
    else:
        y += a * x


def conjugate_gradient(
    apply: Operator,
    rhs: np.ndarray,
    precondition: Operator,
    tolerance: float,
    max_iterations: int,
    progress: Progress | None = None,
    start: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[np.ndarray, int, float]:
    """Solve K x = b for a symmetric positive-definite K by preconditioned CG.

    Parameters
    ----------
    apply : callable
        x -> K x.
    rhs : numpy.ndarray
        b.
    precondition : callable
        r -> M⁻¹ r, symmetric positive definite.
    tolerance : float
        Required relative residual ||b − K x|| / ||b|| (2-norm).
    max_iterations : int
        Iteration limit.
    progress : callable, optional
        Called after every iteration with (iterations done, *max_iterations*), and once
        more with (iterations, iterations) on convergence.
    start : tuple of numpy.ndarray, optional
        Initial guess x₀ and its residual b − K x₀; zero by default.

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
        When the tolerance is not reached within *max_iterations*, or the operator or
        preconditioner turns out not to be positive definite.
    """
    b_norm = float(np.linalg.norm(rhs))
    if b_norm == 0.0:
        return np.zeros_like(rhs), 0, 0.0
    relative = 1.0
    if start is None:
        x, r = np.zeros_like(rhs), rhs.copy()
    else:
        x, r = start[0].copy(), start[1].copy()
        if float(np.linalg.norm(r)) <= tolerance * b_norm:
            # the start may solve the problem (say, an exact band solve): check truly
            r = rhs - apply(x)
            relative = float(np.linalg.norm(r)) / b_norm
        if relative <= tolerance:
            if progress is not None:
                progress(0, 0)
            return x, 0, relative
    z = precondition(r)
    p = z.copy()
    rz = float(np.vdot(r, z))
    for iteration in range(1, max_iterations + 1):
        q = apply(p)
        pq = float(np.vdot(p, q))
        if not (pq > 0.0 and rz > 0.0):
            raise ConvergenceError(
                f"conjugate gradients broke down at iteration {iteration}: the operator or "
                "its preconditioner is not positive definite "
                f"(p.Kp = {pq:.3g}, r.z = {rz:.3g})"
            )
        step = rz / pq
        _axpy(step, p, x)
        _axpy(-step, q, r)
        relative = float(np.linalg.norm(r)) / b_norm
        if progress is not None:
            progress(iteration, max_iterations)
        log.debug("CG iteration %d: relative residual %.3e", iteration, relative)
        if relative <= tolerance:
            r = rhs - apply(x)
            relative = float(np.linalg.norm(r)) / b_norm
            if relative <= tolerance:
                if progress is not None:
                    progress(iteration, iteration)  # done: the count reaches the total
                return x, iteration, relative
            log.debug("true residual %.3e above tolerance; restarting", relative)
            z = precondition(r)
            p = z.copy()
            rz = float(np.vdot(r, z))
            continue
        z_old = z
        z = precondition(r)
        rz_new = float(np.vdot(r, z))
        # Polak-Ribière form (flexible CG): robust to a slightly inexact preconditioner
        beta = (rz_new - float(np.vdot(r, z_old))) / rz
        p *= beta
        p += z
        rz = rz_new
    raise ConvergenceError(
        f"conjugate gradients did not converge: relative residual {relative:.3e} after "
        f"{max_iterations} iterations, tolerance {tolerance:.1e}; raise max_iterations or "
        "the tolerance, or smooth very sharp rigidity changes"
    )
