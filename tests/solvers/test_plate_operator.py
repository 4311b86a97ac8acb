"""The plate operator (gridflex.solvers.plate_operator): its sparse rows and matrix.

Symmetry and the blocked product are checked in tests/solvers/test_finite_difference.py.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex.solvers.plate_operator import AXIS_EDGES
from tests.helpers import random_broken_operator


@pytest.mark.parametrize("edges", list(itertools.product(AXIS_EDGES, repeat=2)))
def test_sparse_rows_equal_the_rows_of_the_product(edges):
    # common practice: K's rows assembled from the 13-point stencil are the rows of the
    # matrix-free product, for any node subset and on every kind of edge
    op, rng = random_broken_operator((13, 11), edges, seed=5)
    n = op.rigidity.size
    identity = np.eye(n)
    full = np.stack([op.apply(identity[k].reshape(op.shape)).ravel() for k in range(n)])
    nodes = np.sort(rng.choice(n, 40, replace=False))
    columns = np.sort(np.union1d(nodes, rng.choice(n, 60, replace=False)))
    rows = op.rows(nodes, columns).toarray()
    assert_allclose(rows, full[np.ix_(nodes, columns)], rtol=1e-13, atol=1e-13 * np.abs(full).max())
    assert_allclose(op.matrix().toarray(), full.T, rtol=1e-13, atol=1e-13 * np.abs(full).max())
