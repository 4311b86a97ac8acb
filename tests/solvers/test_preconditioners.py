"""Preconditioner pieces (gridflex.solvers.preconditioners): the Gaussian-like smoothing.

The preconditioner inside the solve is checked in tests/solvers/test_finite_difference.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from gridflex.solvers.preconditioners import smooth_like_gaussian


def test_smoothing_keeps_the_mean_and_has_the_gaussian_variance():
    # common practice: three box passes of width w have variance (w² - 1) / 4 per axis
    grid = np.zeros((41, 301))
    grid[20, 150] = 1.0
    out = smooth_like_gaussian(grid.copy(), (0.0, 8.0), ("wrap", "wrap"))
    assert out.sum() == pytest.approx(1.0, rel=1e-12)
    x = np.arange(301) - 150
    variance = float((out[20] * x**2).sum())
    assert variance == pytest.approx(8.0**2, rel=0.05)
