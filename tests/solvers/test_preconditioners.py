"""Preconditioner pieces (gridflex.solvers.preconditioners): the Gaussian-like smoothing.

The preconditioner inside the solve is checked in tests/solvers/test_finite_difference.py.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.ndimage
from numpy.testing import assert_allclose

from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.preconditioners import (
    BandSolver,
    BlendPreconditioner,
    MultiplicativePreconditioner,
    band_is_exact,
    smooth_like_gaussian,
)


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


def test_nearly_constant_rigidity_gets_one_level_and_small_ranges_a_gentle_ramp():
    # common practice (the blend's partition of unity, MIN_RAMP_RATIO): outside the band a
    # rigidity within SINGLE_LEVEL_RATIO is served by one level; a small range keeps two
    # levels but its cos/sin ramp spans at least MIN_RAMP_RATIO, so the weights change
    # gently instead of stepping (a step cuts the plate's coupling across it)
    import math

    from gridflex.solvers.plate_operator import PlateOperator
    from gridflex.solvers.preconditioners import (
        MIN_RAMP_RATIO,
        SINGLE_LEVEL_RATIO,
        BlendPreconditioner,
    )

    n, h = 64, 4e3
    x = np.arange(n)
    ramp = 0.5 * (1 - np.cos(2 * np.pi * x / n))  # periodic, 0 -> 1 -> 0

    def blend_for(ratio: float) -> BlendPreconditioner:
        rigidity = 1e22 * ratio ** ramp[None, :].repeat(n, axis=0)
        return BlendPreconditioner.build(PlateOperator.build(rigidity, 3300 * 9.81, 0.25, h, h))

    for ratio in (1.0001, 1 + 0.5 * (SINGLE_LEVEL_RATIO - 1)):
        assert blend_for(ratio).levels.size == 1
    ratio = 1 + 0.5 * (MIN_RAMP_RATIO - 1)  # above one level, below the least ramp
    blend = blend_for(ratio)
    assert blend.levels.size == 2
    low, high = blend._weights
    assert low is not None and high is not None
    assert np.allclose(low**2 + high**2, 1.0, atol=1e-5)  # unscaled at this ratio (p = 0)
    # the top level's weight never exceeds that of a ramp over MIN_RAMP_RATIO
    top = math.sin(0.5 * math.pi * math.log(ratio) / math.log(MIN_RAMP_RATIO))
    assert float(high.max()) <= top + 1e-6
    assert float(high.max()) > 0.5 * top


@pytest.mark.parametrize(
    "edges",
    [("periodic", "periodic"), ("free", "free"), ("clamped", "clamped"), ("periodic", "free")],
)
def test_a_band_with_only_open_sea_outside_is_the_exact_inverse(edges):
    # band_is_exact: a node with no plate next to it has the restoring term alone in its row
    # of K, so the band over every other node and the blend's local inverse 1 / (a Δρ g)
    # outside it give K^-1 (common practice: block-diagonal K). Checked against K's rows
    # for each kind of edge, and M K x = x; a plate node, or a sea node next to the plate,
    # left outside the band is not exact.
    n, h = 40, 4e3
    rigidity = np.zeros((n, n))
    rigidity[5:22, 3:30] = 1e23 * (1.0 + np.random.default_rng(3).random((17, 27)))
    rigidity[0:3, 30:40] = 5e22  # plate at the grid's edge
    op = PlateOperator.build(rigidity, 3300 * 9.81, 0.25, h, h, edges)
    modes = ["wrap" if e == "periodic" else "constant" for e in edges]
    coupled = scipy.ndimage.maximum_filter(rigidity, size=3, mode=modes).ravel() > 0
    band = np.flatnonzero(coupled)
    outside = np.flatnonzero(~coupled)
    rows = op.rows(outside)
    assert np.array_equal(np.diff(rows.indptr), np.ones(outside.size))
    assert np.array_equal(rows.indices, outside)  # the diagonal alone
    assert band_is_exact(op, band)
    pre = MultiplicativePreconditioner(
        op, BlendPreconditioner.build(op, band), BandSolver.build(op, band), True
    )
    x = np.random.default_rng(4).standard_normal((n, n))
    assert_allclose(pre.apply(op.apply(x)), x, rtol=0, atol=1e-8 * np.abs(x).max())
    plate_node = np.flatnonzero(rigidity.ravel() > 0)[0]
    assert not band_is_exact(op, band[band != plate_node])
    sea_next_to_plate = np.flatnonzero(coupled & (rigidity.ravel() == 0))[0]
    assert not band_is_exact(op, band[band != sea_next_to_plate])
