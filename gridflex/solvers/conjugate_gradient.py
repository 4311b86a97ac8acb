"""Preconditioned conjugate gradients to a stated accuracy of the solution, estimated from the
CG coefficients, with the true residual and the normwise backward error recomputed at the end.

The vectors live in arrays allocated once; the updates of an iteration are fused into two
passes over memory in cache-sized row blocks shared among threads
(:mod:`gridflex.solvers.row_blocks`).
"""

from __future__ import annotations

import logging
import math
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from gridflex.errors import ConvergenceError
from gridflex.progress import Progress
from gridflex.solvers.row_blocks import block_rows, for_row_blocks, thread_count

__all__ = ["START_MARGIN", "Outcome", "Operator", "Preconditioner", "conjugate_gradient"]

log = logging.getLogger(__name__)

STALL_FACTOR = 0.5
"""A restart must bring the error estimate below this fraction of the previous restart's,
or the iteration is declared stalled (:class:`~gridflex.errors.ConvergenceError`) instead of
running on to the iteration limit."""

SLOW_EVERY = 50
"""Iterations after which, and after every as many more, the iteration tells the
preconditioner how many further iterations it heads for (``on_slow`` of
:func:`conjugate_gradient`, :func:`_further`), so that a preconditioner that can be made
stronger decides whether to (the multigrid's
:meth:`~gridflex.solvers.multigrid.AggregationPreconditioner.strengthen`)."""

PROGRESS_WINDOW = 300
"""The iteration gives up before its limit when the smallest error estimate so far has not
fallen below :data:`PROGRESS_FACTOR` times what it was this many iterations earlier (then
:class:`~gridflex.errors.ConvergenceError`, or x at the round-off limit): a slow iteration
that keeps converging runs on to its limit, one that has stopped converging ends early."""

PROGRESS_FACTOR = 0.5
"""See :data:`PROGRESS_WINDOW`."""

ERROR_DELAY = 4
"""Steps d summed in the error estimate of :func:`conjugate_gradient` (the iteration stops
d steps after the iterate whose error it estimates)."""

BACKWARD_ERROR_FLOOR = 64.0
"""Normwise backward error, in unit round-offs, at which x is taken as the best double
precision gives (the product K x alone is rounded at about eps ||K|| ||x||)."""

DRIFT_LIMIT = 0.1
"""Largest ||δ|| / ||r|| (δ the difference between the true residual b − K x and the
recurrence residual r) at which the error estimate of the recurrence is taken for x;
beyond it the iteration restarts from the true residual (or stops at the round-off limit)."""

START_MARGIN = 0.01
"""x is returned on its preconditioned residual alone (an accurate start, say) when
sqrt(r·M⁻¹r / x·b) is below this fraction of the tolerance, checked with the true
residual; the recorded accuracy is that estimate divided by START_MARGIN. r·M⁻¹r equals
||e||_K² only within the spectrum of M⁻¹K, and the margin allows for its smallest
eigenvalue down to START_MARGIN² = 1e-4; measured on a 20 km zone of te 0.5 km in a 25 km
plate (256² of 1 km, periodic): 0.1 let through an iterate whose true error was 0.57 of
the recorded accuracy (r·M⁻¹r 32 times below ||e||_K²). An exact preconditioner (M = K
up to rounding: a band with only open sea outside it,
:func:`gridflex.solvers.preconditioners.band_is_exact`) needs no margin (``start_margin``
1 in :func:`conjugate_gradient`)."""


@dataclass(frozen=True, eq=False)
class Outcome:
    """What :func:`conjugate_gradient` returns.

    Attributes
    ----------
    x : numpy.ndarray
        The solution.
    iterations : int
        Iterations used.
    residual : float
        True relative residual ||b − K x|| / ||b||, recomputed from x.
    accuracy : float
        Estimated relative error of x in the energy norm (see :func:`conjugate_gradient`).
    backward_error : float
        Normwise backward error ||b − K x|| / (||K|| ||x|| + ||b||); inf without an
        operator norm.
    at_round_off : bool
        The iteration stopped at the round-off limit, above the tolerance.
    product : numpy.ndarray or None
        K x as computed for the true residual at the end (b − K x = the final residual),
        which a caller may keep to start later solves without another product; None
        when b = 0.
    """

    x: np.ndarray
    iterations: int
    residual: float
    accuracy: float
    backward_error: float
    at_round_off: bool
    product: np.ndarray | None = None


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


def _further(bests: deque[float], tolerance: float) -> float:
    """Further iterations the smallest error estimates so far *bests* (one per iteration,
    the last last), falling at their rate over the last :data:`SLOW_EVERY` iterations (or
    since the first finite one), need to reach *tolerance*; inf when they have no finite
    value yet or have not fallen. The smallest estimate so far, not the estimate itself:
    that one rises and falls on plateaus, and a rise over ten iterations called for the
    rescue on solves that then converged soon."""
    window = list(bests)[-SLOW_EVERY - 1 :]
    finite = [i for i, value in enumerate(window) if math.isfinite(value)]
    if not finite or finite[0] == len(window) - 1:
        return math.inf
    first, last = window[finite[0]], window[-1]
    if not 0.0 < last < first:
        return math.inf
    rate = math.log(last / first) / (len(window) - 1 - finite[0])  # < 0
    return max(math.log(tolerance / last) / rate, 0.0)


def conjugate_gradient(
    apply: Operator,
    rhs: np.ndarray,
    precondition: Preconditioner,
    tolerance: float,
    max_iterations: int,
    progress: Progress | None = None,
    start: tuple[np.ndarray, np.ndarray] | None = None,
    on_restart: Callable[[], None] | None = None,
    *,
    operator_norm: float | None = None,
    delay: int = ERROR_DELAY,
    on_slow: Callable[[float, int], bool] | None = None,
    start_margin: float = START_MARGIN,
) -> Outcome:
    """Solve K x = b for a symmetric positive-definite K by preconditioned CG, to a stated
    relative error of x in the energy norm.

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
        Required relative error of x in the energy norm, ||x* − x||_K / ||x*||_K (x* the
        exact solution; ||v||_K² = v·K v), estimated as described in the notes.
    max_iterations : int
        Iteration limit.
    progress : callable, optional
        Called after every iteration with (iterations done, *max_iterations*), and once
        more with (iterations, iterations) on convergence.
    start : tuple of numpy.ndarray, optional
        Initial guess x₀ and its residual b − K x₀; zero by default.
    on_restart : callable, optional
        Called before the iteration restarts from the true residual because the
        recurrence drifted from it (say, to make the preconditioner exact).
    operator_norm : float, optional
        An estimate of ||K||₂ for the normwise backward error; without it the backward
        error is not used to stop.
    delay : int, default :data:`ERROR_DELAY`
        Iterations d over which the error estimate of the notes is summed.
    on_slow : callable, optional
        ``on_slow(further, left)``, called after every :data:`SLOW_EVERY` iterations with
        the further iterations the smallest error estimate so far, falling at its recent
        rate, needs to reach *tolerance* (:func:`_further`; inf when it is not falling)
        and the iterations left before *max_iterations*; when it returns True (the
        preconditioner changed), the iteration restarts from the true residual with the
        new preconditioner.
    start_margin : float, default :data:`START_MARGIN`
        Share of the tolerance below which sqrt(r·M⁻¹r / x·b) returns an iterate on its
        preconditioned residual alone, and the factor that estimate is divided by; 1 for
        an exact preconditioner (M = K up to rounding, so r·M⁻¹r = ||e||_K²).

    Returns
    -------
    Outcome
        x, iterations, the true relative residual, the estimated accuracy, the backward
        error.

    Raises
    ------
    ConvergenceError
        When the error estimate is still above *tolerance* after *max_iterations*, or has
        stopped falling (:data:`PROGRESS_WINDOW`), and the backward error is above
        round-off; when a restart does not at least halve the error estimate of the
        previous one; or when the operator or preconditioner turns out not to be positive
        definite.

    Notes
    -----
    The direction update is the Polak-Ribière (flexible) form,
    β = r·(z − z_old) / (r_old·z_old), which tolerates a preconditioner that varies
    slightly between iterations (single-precision FFTs).

    Each step lowers the squared energy-norm error by exactly α_j r_j·z_j (the step
    length minimises it along p_j and r_j·p_j = r_j·z_j), so the error of iterate k is
    ||e_k||_K² = Σ_{j >= k} α_j r_j·z_j, and the sum over the next d steps, ν_k, is a lower
    bound that is close once the iteration converges at a steady rate (Hestenes & Stiefel
    1952; Strakoš & Tichý 2002, ETNA 13, "On error estimation in the conjugate gradient
    method and why it works in finite precision computations"). ||x*||_K² = x*·b is
    estimated by x_{k+d}·b. The identity needs only exact line searches, so it holds
    for the flexible update too. The iteration stops at step k + d once
    sqrt(ν_k / x·b) <= *tolerance* and returns x_{k+d}; the recorded ``accuracy`` is
    sqrt(ν_k / x·b) (1 + ||δ|| / ||r||), the estimate for x_k, which is larger than
    x_{k+d}'s error, widened by the drift δ between the true residual b − K x and the
    recurrence residual r.

    The estimate follows the recurrence, which in floating point drifts from the true
    residual once that reaches the round-off level. When ||δ|| exceeds
    :data:`DRIFT_LIMIT` ||r||, the error is estimated from the true residual instead,
    sqrt(r·M⁻¹r / x·b), and the iteration restarts from it; if the normwise backward error
    η = ||b − K x|| / (||K|| ||x|| + ||b||) (Rigal & Gaches 1967; Arioli, Duff & Ruiz
    1992; Higham 2002, "Accuracy and Stability of Numerical Algorithms", 2nd ed., ch. 7)
    is already within :data:`BACKWARD_ERROR_FLOOR` unit round-offs, x is as good as double
    precision allows and is returned (``at_round_off`` set) instead.

    An iterate (a start, too) whose preconditioned residual gives sqrt(r·M⁻¹r / x·b)
    below *start_margin* times the tolerance is returned, with that estimate divided
    by *start_margin* as its accuracy, once checked with the true residual: while
    the drift stays within :data:`DRIFT_LIMIT`, as on the main exit, the recurrence's
    r·M⁻¹r stands (widened by the drift), otherwise the true residual's is taken.
    """
    v = _Vectors(rhs)
    b_norm = math.sqrt(v.dot(rhs, rhs))
    if b_norm == 0.0:
        return Outcome(np.zeros_like(rhs), 0, 0.0, 0.0, 0.0, False, np.zeros_like(rhs))
    eps = float(np.finfo(np.float64).eps)
    delay = max(int(delay), 1)
    if not 0.0 < start_margin <= 1.0:
        raise ValueError(f"start_margin must lie in (0, 1], got {start_margin!r}")

    def true_residual() -> float:
        """b − K x into r (and K x into q); returns ||r||."""
        apply(v.x, v.q)
        np.subtract(rhs, v.q, out=v.r)
        return math.sqrt(v.dot(v.r, v.r))

    def backward_error(r_norm: float) -> float:
        if operator_norm is None:
            return math.inf
        return r_norm / (operator_norm * math.sqrt(v.dot(v.x, v.x)) + b_norm)

    def finish(iteration: int, r_norm: float, accuracy: float, limit: bool) -> Outcome:
        if progress is not None:
            progress(iteration, iteration)  # done: the count reaches the total
        # every way out has just taken the true residual: v.q holds K x
        return Outcome(
            v.x, iteration, r_norm / b_norm, accuracy, backward_error(r_norm), limit, v.q
        )

    if start is None:
        v.r[...] = rhs
        r_norm = b_norm
    else:
        v.x[...], v.r[...] = start
        r_norm = math.sqrt(v.dot(v.r, v.r))
    precondition(v.r, v.z, r_norm)
    rz = v.dot(v.r, v.z)

    last_restart = math.inf

    def verdict(iteration: int, accuracy: float) -> Outcome | None:
        """With r the true residual: the outcome when *accuracy* meets the tolerance or x
        is at the round-off limit; None to restart from r; raises on a stall."""
        nonlocal last_restart
        if accuracy <= tolerance:
            return finish(iteration, r_norm, accuracy, False)
        eta = backward_error(r_norm)
        if eta <= BACKWARD_ERROR_FLOOR * eps:
            log.warning(
                "conjugate gradients stopped at the round-off limit: estimated relative "
                "error %.1e of the deflection (tolerance %.1e), backward error %.1e",
                accuracy,
                tolerance,
                eta,
            )
            return finish(iteration, r_norm, accuracy, True)
        if accuracy > STALL_FACTOR * last_restart:
            raise ConvergenceError(
                f"conjugate gradients stalled at an estimated relative error of "
                f"{accuracy:.3e} after {iteration} iterations (tolerance {tolerance:.1e}, "
                f"backward error {eta:.1e}): round-off limits the accuracy; raise the "
                "tolerance"
            )
        last_restart = accuracy
        log.debug("restarting from the true residual (error estimate %.2e)", accuracy)
        return None

    def small_residual(iteration: int) -> Outcome | bool:
        """When the preconditioned residual says x is well within the tolerance (an
        accurate start, an exact preconditioner), confirm it with the true residual: the
        outcome; True when checked in vain (r, z and rz then hold the true residual's
        values: restart from them); False when not checked."""
        nonlocal r_norm, rz
        energy = v.dot(v.x, rhs)
        if not (energy > 0.0 and 0.0 <= rz <= (start_margin * tolerance) ** 2 * energy):
            return False
        recurrence = v.r.copy()
        recurrence_norm = r_norm
        r_norm = true_residual()
        if r_norm == 0.0:
            return finish(iteration, 0.0, 0.0, False)
        # as on the main exit: while the recurrence tracks the true residual (drift δ),
        # its r·M⁻¹r stands for the true one's, widened by the drift
        np.subtract(v.r, recurrence, out=recurrence)
        drift = math.sqrt(v.dot(recurrence, recurrence))
        drift = drift / recurrence_norm if recurrence_norm > 0.0 else math.inf
        estimate = math.sqrt(max(rz, 0.0) / energy) / start_margin * (1.0 + drift)
        if drift <= DRIFT_LIMIT and estimate <= tolerance:
            return finish(iteration, r_norm, estimate, False)
        precondition(v.r, v.z, r_norm)
        rz = v.dot(v.r, v.z)
        done = verdict(iteration, math.sqrt(max(rz, 0.0) / energy) / start_margin)
        return True if done is None else done

    def restart() -> None:
        nonlocal rz
        if on_restart is not None:
            on_restart()
            precondition(v.r, v.z, r_norm)
            rz = v.dot(v.r, v.z)
        v.p[...] = v.z
        steps.clear()

    steps: list[float] = []  # α_j r_j·z_j since the last (re)start
    bests: deque[float] = deque(maxlen=PROGRESS_WINDOW + 1)  # the smallest so far, by step
    best = math.inf
    done = max_iterations
    if start is not None:
        first = small_residual(0)
        if isinstance(first, Outcome):
            return first
        if first:
            restart()
    v.p[...] = v.z
    estimate = math.inf
    for iteration in range(1, max_iterations + 1):
        apply(v.p, v.q)
        pq = v.dot(v.p, v.q)
        if not (pq > 0.0 and rz > 0.0):
            raise ConvergenceError(
                f"conjugate gradients broke down at iteration {iteration}: the operator or "
                "its preconditioner is not positive definite "
                f"(p.Kp = {pq:.3g}, r.z = {rz:.3g})"
            )
        alpha = rz / pq
        r_norm = math.sqrt(v.step(alpha))
        steps.append(alpha * rz)
        if progress is not None:
            progress(iteration, max_iterations)
        energy = v.dot(v.x, rhs)
        estimate = math.inf
        if len(steps) >= delay and energy > 0.0:
            estimate = math.sqrt(math.fsum(steps[-delay:]) / energy)
        log.debug(
            "CG iteration %d: relative residual %.3e, error estimate %.3e",
            iteration,
            r_norm / b_norm,
            estimate,
        )
        if estimate <= tolerance:
            recurrence = v.r.copy()
            recurrence_norm = r_norm
            r_norm = true_residual()
            np.subtract(v.r, recurrence, out=recurrence)  # the drift δ
            drift = math.sqrt(v.dot(recurrence, recurrence)) / recurrence_norm
            if drift <= DRIFT_LIMIT:
                # the recurrence tracks the true residual: the estimate holds for x
                return finish(iteration, r_norm, estimate * (1.0 + drift), False)
            # the recurrence has lost track: estimate the error from the true residual
            precondition(v.r, v.z, r_norm)
            rz = v.dot(v.r, v.z)
            outcome = verdict(iteration, math.sqrt(max(rz, 0.0) / energy))
            if outcome is not None:
                return outcome
            restart()
            continue
        best = min(best, estimate)
        bests.append(best)
        if len(bests) > PROGRESS_WINDOW and best > PROGRESS_FACTOR * bests[0]:
            done = iteration  # no progress: as at the limit (below)
            break
        if (
            on_slow is not None
            and iteration % SLOW_EVERY == 0
            and on_slow(_further(bests, tolerance), max_iterations - iteration)
        ):
            r_norm = true_residual()
            precondition(v.r, v.z, r_norm)
            rz = v.dot(v.r, v.z)
            v.p[...] = v.z
            steps.clear()
            continue
        v.z, v.z_old = v.z_old, v.z
        precondition(v.r, v.z, r_norm)
        rz_new, rz_old = v.products_with_r()
        beta = (rz_new - rz_old) / rz
        rz = rz_new
        checked = small_residual(iteration)
        if isinstance(checked, Outcome):
            return checked
        if checked:
            restart()
            continue
        v.new_direction(beta)
    r_norm = true_residual()
    eta = backward_error(r_norm)
    if eta <= BACKWARD_ERROR_FLOOR * eps:
        log.warning(
            "conjugate gradients stopped (%s) at the round-off limit: "
            "backward error %.1e, estimated relative error %.1e (tolerance %.1e)",
            "iteration limit" if done == max_iterations else "no progress",
            eta,
            estimate,
            tolerance,
        )
        return finish(done, r_norm, estimate, True)
    if done < max_iterations:
        raise ConvergenceError(
            f"conjugate gradients did not converge: the estimated relative error "
            f"{best:.3e} fell less than {1.0 / PROGRESS_FACTOR:g}-fold over the last "
            f"{PROGRESS_WINDOW} iterations (relative residual {r_norm / b_norm:.3e}, "
            f"backward error {eta:.1e}, {done} iterations, tolerance {tolerance:.1e}); raise "
            "the tolerance, or smooth very sharp rigidity changes"
        )
    raise ConvergenceError(
        f"conjugate gradients did not converge: estimated relative error {estimate:.3e} "
        f"(relative residual {r_norm / b_norm:.3e}, backward error {eta:.1e}) after "
        f"{max_iterations} iterations, tolerance {tolerance:.1e}; raise max_iterations or "
        "the tolerance, or smooth very sharp rigidity changes"
    )
