"""The conjugate-gradient iteration (gridflex.solvers.conjugate_gradient): the stopping
rule on the estimated error, the round-off limit, restarts, warm starts."""

from __future__ import annotations

from collections import deque

import numpy as np
import pytest
from numpy.testing import assert_allclose

import gridflex.solvers.conjugate_gradient as cg_module
from gridflex.errors import ConvergenceError
from gridflex.solvers.conjugate_gradient import (
    ERROR_DELAY,
    SLOW_EVERY,
    _further,
    conjugate_gradient,
)

N = 64
_SECOND = np.diag(np.full(N, 2.0)) - np.diag(np.ones(N - 1), 1) - np.diag(np.ones(N - 1), -1)
MATRIX = 1e6 * _SECOND @ _SECOND + 1e-3 * np.eye(N)  # a 1-D beam on a weak foundation
RHS = np.random.default_rng(0).standard_normal((N, 1))
EXACT = np.linalg.solve(MATRIX, RHS)


def _apply(x, out):
    out[...] = MATRIX @ x
    return out


def _identity(r, out, norm):
    out[...] = r
    return out


def _energy_error(x):
    error = (x - EXACT).ravel()
    return float(np.sqrt(error @ MATRIX @ error / (EXACT.ravel() @ MATRIX @ EXACT.ravel())))


def test_stops_on_the_estimated_energy_error_and_the_estimate_bounds_it():
    # Hestenes & Stiefel 1952; Strakoš & Tichý 2002 (ETNA 13): the squared energy-norm error
    # of iterate k is the sum of alpha_j r_j.z_j over the later steps; the delayed partial
    # sum, taken for the iterate d steps back, is close to the error of the returned one
    # (a lower bound for the iterate it is taken for, so it can fall short on plateaus of
    # this unpreconditioned, badly conditioned iteration: seen 1.07 times at 1e-5)
    for tolerance in (1e-3, 1e-5, 1e-7):
        out = conjugate_gradient(_apply, RHS, _identity, tolerance, 5000, operator_norm=16e6)
        actual = _energy_error(out.x)
        assert out.accuracy <= tolerance
        assert actual <= 2.0 * out.accuracy, (tolerance, actual, out.accuracy)
        assert out.accuracy <= 1e4 * max(actual, 1e-14)  # and not absurdly pessimistic
        residual = float(np.linalg.norm(RHS - MATRIX @ out.x) / np.linalg.norm(RHS))
        assert out.residual == pytest.approx(residual, rel=1e-6)


def test_unreachable_tolerance_stops_at_round_off_with_its_backward_error():
    # Higham 2002, "Accuracy and Stability of Numerical Algorithms", ch. 7: the normwise
    # backward error ||b - K x|| / (||K|| ||x|| + ||b||) of a computed solution cannot go
    # much below the unit round-off; an unreachable tolerance stops there instead of
    # raising, flagged, the accuracy it reached recorded
    out = conjugate_gradient(_apply, RHS, _identity, 1e-22, 5000, operator_norm=16e6)
    assert out.at_round_off
    assert out.backward_error <= 64 * np.finfo(float).eps
    assert _energy_error(out.x) <= 1e-8
    assert out.accuracy > 1e-22


def test_no_operator_norm_means_a_stall_raises():
    # without ||K|| the backward error is unknown: a restart that does not halve the error
    # estimate is reported as a stall at once, not after the iteration limit
    restarts = []
    with pytest.raises(ConvergenceError, match="stalled at an estimated relative error"):
        conjugate_gradient(
            _apply, RHS, _identity, 1e-22, 5000, on_restart=lambda: restarts.append(1)
        )
    assert restarts


def test_iteration_limit_raises_with_the_estimate():
    with pytest.raises(ConvergenceError, match="did not converge: estimated relative error"):
        conjugate_gradient(_apply, RHS, _identity, 1e-8, 5, operator_norm=16e6)


def test_accurate_start_returns_without_iterating():
    # common practice: a start that already meets the tolerance costs no iteration
    start = conjugate_gradient(_apply, RHS, _identity, 1e-12, 5000, operator_norm=16e6).x
    out = conjugate_gradient(
        _apply, RHS, _identity, 1e-6, 5000, start=(start, RHS - MATRIX @ start)
    )
    assert out.iterations == 0
    assert _energy_error(out.x) <= out.accuracy <= 1e-6


def test_exact_preconditioner_stops_after_one_step():
    def exact(r, out, norm):
        out[...] = np.linalg.solve(MATRIX, r)
        return out

    out = conjugate_gradient(_apply, RHS, exact, 1e-8, 50, operator_norm=16e6)
    assert out.iterations == 1
    assert_allclose(out.x, EXACT, rtol=0, atol=1e-8 * np.abs(EXACT).max())


def test_an_exact_preconditioner_certifies_its_start_without_the_margin():
    # With M = K, r.M^-1 r = e.K e exactly (the energy norm of the error; common practice),
    # so a start within the tolerance is certified by its own estimate, and the recorded
    # accuracy is its energy-norm error itself; with the default margin (START_MARGIN,
    # for an M^-1 K whose smallest eigenvalue may be small) the same start is not taken
    def exact(r, out, norm):
        out[...] = np.linalg.solve(MATRIX, r)
        return out

    start = EXACT * (1.0 + 1e-9 * np.random.default_rng(1).standard_normal(EXACT.shape))
    first = (start, RHS - MATRIX @ start)
    tight = conjugate_gradient(_apply, RHS, exact, 1e-6, 50, start=first, start_margin=1.0)
    assert tight.iterations == 0
    assert tight.accuracy == pytest.approx(_energy_error(start), rel=1e-3)
    margined = conjugate_gradient(_apply, RHS, exact, 1e-6, 50, start=first)
    assert margined.iterations == 1
    with pytest.raises(ValueError, match="start_margin"):
        conjugate_gradient(_apply, RHS, exact, 1e-6, 50, start=first, start_margin=2.0)


def test_a_start_with_a_wrong_residual_is_not_taken_on_its_word():
    # A start handed in with a residual that is not b - K x0 (a product of K taken from
    # elsewhere) looks converged on the recurrence; the true residual shows the drift and
    # the iteration goes on from it, so the result still meets the tolerance, and K x
    # comes back with it (common practice: residual replacement, the drift check of the
    # main exit)
    start = np.zeros_like(RHS)
    out = conjugate_gradient(
        _apply, RHS, _identity, 1e-6, 5000, start=(start, 1e-14 * RHS), operator_norm=16e6
    )
    assert out.iterations > 0
    assert _energy_error(out.x) <= 2.0 * out.accuracy <= 2e-6
    assert out.product is not None
    assert_allclose(out.product, MATRIX @ out.x, rtol=0, atol=1e-9 * np.abs(RHS).max())


def test_a_slow_iteration_asks_to_strengthen_the_preconditioner_and_restarts_with_it():
    # common practice (a restarted CG is again optimal for its new preconditioner): the
    # unpreconditioned beam is far from converged after SLOW_EVERY iterations; the hook
    # swaps in the exact inverse, the iteration restarts from the true residual and stops
    inverse = np.linalg.inv(MATRIX)
    exact = []

    def precondition(r, out, norm):
        out[...] = inverse @ r if exact else r
        return out

    def strengthen(further, left):
        assert further > left  # far from converged: heading past the limit
        exact.append(True)
        return True

    out = conjugate_gradient(
        _apply, RHS, precondition, 1e-8, 3 * SLOW_EVERY, operator_norm=16e6, on_slow=strengthen
    )
    assert exact == [True]  # asked once, at SLOW_EVERY
    assert SLOW_EVERY < out.iterations <= SLOW_EVERY + ERROR_DELAY + 2
    assert _energy_error(out.x) <= 1e-8


def test_a_hook_that_cannot_strengthen_leaves_the_iteration_alone():
    calls = []

    def unable(further, left):
        calls.append((further, left))
        return False

    plain = conjugate_gradient(_apply, RHS, _identity, 1e-5, 5000, operator_norm=16e6)
    # a limit of just the iterations it needs: slow by the rule at every checkpoint
    limit = plain.iterations
    hooked = conjugate_gradient(
        _apply, RHS, _identity, 1e-5, limit, operator_norm=16e6, on_slow=unable
    )
    assert hooked.iterations == plain.iterations
    assert_allclose(hooked.x, plain.x, rtol=0, atol=0)
    assert len(calls) == (limit - 1) // SLOW_EVERY
    assert [left for _, left in calls] == [limit - k * SLOW_EVERY for k in range(1, len(calls) + 1)]


def test_further_iterations_follow_the_recent_decline():
    # the smallest estimates so far falling 10x every 10 iterations, now at 1e-3, reach
    # 1e-8 in 50 more
    steps = np.arange(SLOW_EVERY + 1)
    steady = deque(10.0 ** (-(steps - SLOW_EVERY) / 10.0 - 3.0))
    assert _further(steady, 1e-8) == pytest.approx(50.0)
    late = deque([np.inf] * (SLOW_EVERY - 10) + list(10.0 ** (-np.arange(11) / 10.0 - 2.0)))
    assert _further(late, 1e-8) == pytest.approx(50.0)  # from the first finite one
    assert _further(steady, 1e-2) == 0.0  # already there
    assert _further(deque([np.inf] * (SLOW_EVERY + 1)), 1e-8) == np.inf  # no estimate yet
    assert _further(deque([1e-3] * (SLOW_EVERY + 1)), 1e-8) == np.inf  # no decline


def test_an_iteration_that_stops_converging_ends_before_its_limit(monkeypatch):
    # common practice: the unpreconditioned beam's error estimate stays near 0.3-0.8 for
    # dozens of iterations before it falls; with a short window that counts as no progress
    # and ends with a message naming it, long before the limit of 5000
    monkeypatch.setattr(cg_module, "PROGRESS_WINDOW", 20)
    with pytest.raises(ConvergenceError, match="fell less than 2-fold over the last 20"):
        conjugate_gradient(_apply, RHS, _identity, 1e-10, 5000, operator_norm=16e6)
    # with the default window the same iteration converges (202 iterations seen)
    monkeypatch.undo()
    out = conjugate_gradient(_apply, RHS, _identity, 1e-10, 5000, operator_norm=16e6)
    assert out.iterations < 5000 and _energy_error(out.x) <= 1e-9
