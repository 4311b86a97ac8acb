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


def test_many_blend_levels_are_checked_against_the_memory(monkeypatch):
    # A rigidity range of 1e18 needs seven levels (LEVEL_SPACING 1000), more than the
    # solve's first memory check counts: the preconditioner checks the rest before it
    # builds them and refuses, naming the levels, when they do not fit (hardening: a te
    # map from 0 to 100 km on 4096² nodes had run out of memory in the conjugate gradients).
    import gridflex.memory
    from gridflex.errors import InputError
    from gridflex.solvers.plate_operator import PlateOperator
    from gridflex.solvers.preconditioners import LEVELS_COUNTED, BlendPreconditioner

    n = 32
    rigidity = np.logspace(6, 24, n)[None, :].repeat(n, axis=0)
    op = PlateOperator.build(rigidity, 3300 * 9.81, 0.25, 5e3, 5e3)
    blend = BlendPreconditioner.build(op)  # plenty of memory: built
    assert blend.levels.size > LEVELS_COUNTED
    monkeypatch.setattr(gridflex.memory, "available_memory", lambda: 1024.0)
    with pytest.raises(InputError, match=r"blend levels of the finite-difference"):
        BlendPreconditioner.build(op)
