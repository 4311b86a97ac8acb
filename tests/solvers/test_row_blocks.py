"""Blocked row loops (gridflex.solvers.row_blocks): block order and the blocked dot product."""

from __future__ import annotations

import numpy as np
import pytest

from gridflex.solvers import row_blocks


def test_row_blocks_return_in_block_order_and_dot_matches(monkeypatch):
    # common practice: block results come back in block order whatever the threads did
    monkeypatch.setattr(row_blocks, "BLOCK_ELEMENTS", 10)
    got = row_blocks.for_row_blocks(103, 3, lambda j0, j1, thread: (j0, j1))
    assert got == [(j, min(j + 3, 103)) for j in range(0, 103, 3)]
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((2, 50, 7))
    assert row_blocks.dot(a, b) == pytest.approx(float(np.sum(a * b)), rel=1e-13)
