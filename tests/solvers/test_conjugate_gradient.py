"""The conjugate-gradient iteration (gridflex.solvers.conjugate_gradient): restarts and stalls."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex.errors import ConvergenceError
from gridflex.solvers.conjugate_gradient import conjugate_gradient


def test_conjugate_gradient_restarts_then_reports_a_stall():
    # common practice: when the recurrence residual meets the tolerance but the true one
    # does not, the iteration restarts (telling the caller); a restart that does not halve
    # the true residual is round-off, reported at once instead of at the iteration limit
    n = 64
    second = np.diag(np.full(n, 2.0)) - np.diag(np.ones(n - 1), 1) - np.diag(np.ones(n - 1), -1)
    matrix = 1e6 * second @ second + 1e-3 * np.eye(n)
    rhs = np.random.default_rng(0).standard_normal((n, 1))

    def apply(x, out):
        out[...] = matrix @ x
        return out

    def identity(r, out, norm):
        out[...] = r
        return out

    x, _, residual = conjugate_gradient(apply, rhs, identity, 1e-8, 5000)
    assert residual <= 1e-8
    assert_allclose(x, np.linalg.solve(matrix, rhs), rtol=0, atol=1e-6 * np.abs(x).max())
    restarts = []
    with pytest.raises(ConvergenceError, match="stalled at a true relative residual"):
        conjugate_gradient(apply, rhs, identity, 1e-22, 5000, on_restart=lambda: restarts.append(1))
    assert restarts
