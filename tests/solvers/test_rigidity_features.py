"""Sharp-feature detection and band widths (gridflex.solvers.rigidity_features)."""

from __future__ import annotations

import numpy as np
import pytest

from gridflex.memory import available_memory
from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.rigidity_features import (
    BAND_FLEXURAL_PARAMETERS,
    BAND_SHRINK,
    BREAK_FLEXURAL_PARAMETERS,
    FACTOR_BYTES_PER_NODE_CELL,
    FACTOR_MEMORY_SHARE,
    MAX_FACTOR_BYTES,
    REACH_FRAME_NODES,
    STIFF_SIDE_FLEXURAL_PARAMETERS,
    STIFF_SIDE_REACH_FLEXURAL_PARAMETERS,
    factor_budget,
    find_sharp_features,
    sharp_band,
)

NU = 0.25
STIFFNESS = 2270 * 9.81


def _stiff_side(alpha: float, h: float) -> float:
    """The band rule's width into a stiff plate (STIFF_SIDE_REACH_FLEXURAL_PARAMETERS less
    REACH_FRAME_NODES spacings, at least STIFF_SIDE_FLEXURAL_PARAMETERS)."""
    reach = STIFF_SIDE_REACH_FLEXURAL_PARAMETERS * alpha - REACH_FRAME_NODES * h
    return max(reach, STIFF_SIDE_FLEXURAL_PARAMETERS * alpha)


def test_sharp_features_and_band_widths():
    # common practice (the band rules of gridflex.solvers.rigidity_features): a ten-fold
    # jump is sharp and widens by BAND_FLEXURAL_PARAMETERS flexural parameters of its weak
    # side or the stiff-side rule (_stiff_side) of its stiff side, whichever is more; a
    # break alone by the larger of BREAK_FLEXURAL_PARAMETERS and the stiff-side rule of the
    # plate; a constant plate has no sharp node
    n, h = 128, 2000.0
    constant = PlateOperator.build(np.full((n, n), 1e23), STIFFNESS, NU, h, h)
    assert not find_sharp_features(constant).nodes.any()
    low, high = 1e21, 1e24
    rigidity = np.full((n, n), low)
    rigidity[:, 64:] = high
    step = find_sharp_features(PlateOperator.build(rigidity, STIFFNESS, NU, h, h))
    assert step.nodes[:, 63:65].all() and not step.nodes[:, 30].any()
    alpha_low, alpha_high = ((4 * d / STIFFNESS) ** 0.25 for d in (low, high))
    expected = max(BAND_FLEXURAL_PARAMETERS * alpha_low, _stiff_side(alpha_high, h))
    assert step.band_width == pytest.approx(expected, rel=1e-6)
    assert step.widths is not None and step.widths.max() == step.band_width
    hinge = np.full((n, 2 * n), high)
    hinge[:, n] = 0.0
    op = PlateOperator.build(hinge, STIFFNESS, NU, h, h)
    broken = find_sharp_features(op)
    expected = max(BREAK_FLEXURAL_PARAMETERS * alpha_high, _stiff_side(alpha_high, h))
    assert broken.band_width == pytest.approx(expected, rel=1e-6)
    nodes, width, _ = sharp_band(op, broken.band_width, 10**6, broken.nodes)
    columns = np.unique(nodes % (2 * n))
    reach = int(width // h)
    assert columns.min() == n - 1 - reach and columns.max() == n + 1 + reach


def test_band_follows_each_sharp_node_own_width():
    # common practice: with per-node widths a hinge reaches the stiff-side rule's width
    # (_stiff_side) of the plate next to each of its nodes: wider where the plate is
    # stiff, narrower where it is weak, instead of one width for all (rigidity 1e22 to
    # 1e23 N m, smooth along the hinge)
    n, h = 128, 2000.0
    rows = np.arange(n)
    rigidity = np.repeat(10 ** (22.5 + 0.5 * np.cos(2 * np.pi * rows / n)), n).reshape(n, n)
    rigidity[:, 30] = 0.0
    op = PlateOperator.build(rigidity, STIFFNESS, NU, h, h)
    features = find_sharp_features(op)
    nodes, _, _ = sharp_band(op, features.band_width, 10**6, features.nodes, features.widths)
    band = np.zeros(n * n, dtype=bool)
    band[nodes] = True
    band = band.reshape(n, n)
    for row in (0, n // 2):  # stiffest and weakest rows
        alpha = (4 * rigidity[row, 31] / STIFFNESS) ** 0.25
        reach = max(BREAK_FLEXURAL_PARAMETERS * alpha, _stiff_side(alpha, h)) / h
        # east of the hinge, and west of it across the periodic edge at column 0
        assert np.flatnonzero(band[row, 30:94]).max() == pytest.approx(reach, abs=1.5)
        west = np.flatnonzero(~np.roll(band[row], -31)[::-1])[0] - 1  # columns 29, 28, ...
        assert west == pytest.approx(reach, abs=1.5)


def test_band_shrinks_to_its_factor_memory_cap():
    # common practice (the cap rule of sharp_band): under a factor-memory cap below the
    # estimate of the full band, the width shrinks by BAND_SHRINK steps until the estimate
    # FACTOR_BYTES_PER_NODE_CELL x nodes x (2 width / h + 1) fits; a cap of zero drops it
    n, h = 128, 2000.0
    hinge = np.full((n, n), 1e24)
    hinge[:, 60] = 0.0
    op = PlateOperator.build(hinge, STIFFNESS, NU, h, h)
    features = find_sharp_features(op)
    full, full_width, _ = sharp_band(op, features.band_width, 10**6, features.nodes)
    full_bytes = FACTOR_BYTES_PER_NODE_CELL * full.size * (2 * full_width / h + 1)
    cap = 0.5 * full_bytes
    nodes, width, _ = sharp_band(op, features.band_width, 10**6, features.nodes, None, cap)
    steps = np.log(width / full_width) / np.log(BAND_SHRINK)
    assert steps == pytest.approx(round(steps), abs=1e-9) and steps >= 1
    assert width < full_width and 0 < nodes.size < full.size
    assert FACTOR_BYTES_PER_NODE_CELL * nodes.size * (2 * width / h + 1) <= cap
    none, zero_width, _ = sharp_band(op, features.band_width, 10**6, features.nodes, None, 0.0)
    assert none.size == 0 and zero_width == 0.0


def test_factor_budget_is_a_share_of_the_memory_left():
    # common practice: the cap is FACTOR_MEMORY_SHARE of the memory left after the grid
    # arrays, at most MAX_FACTOR_BYTES, and zero when the grids alone take it all
    assert factor_budget(1e18) == 0.0
    before = float(available_memory())
    budget = factor_budget(0.25 * before)
    after = float(available_memory())
    assert 0.0 < budget <= MAX_FACTOR_BYTES
    # (free memory moves while other processes run: bracket it by the readings around)
    low, high = sorted(FACTOR_MEMORY_SHARE * (free - 0.25 * before) for free in (before, after))
    assert min(MAX_FACTOR_BYTES, 0.95 * low) <= budget <= min(MAX_FACTOR_BYTES, 1.05 * high)


def test_steep_rise_out_of_te_zero_is_found_against_the_local_plate():
    # common practice (the band rule of LOCAL_STEEP_WINDOW): a ten-fold change of D
    # within half a flexural parameter of the weakest plate in the window is steep. te
    # rising linearly from 0 to 100 km over 100 km, at te = 30 km: within 16 km on either
    # side te spans 14 to 46 km (D 35-fold) and te = 14 km has a flexural parameter of
    # about 47 km, so the node is steep; the window of STEEP_WINDOW, set by the grid's
    # smallest non-zero te (1 km cells: te 1 km, flexural parameter 6.3 km), spans te 24
    # to 36 km there (D 3.4-fold) and misses it. te 50 -> 100 km over 255 km (D
    # eight-fold in all) is not steep anywhere
    n, h = 256, 1000.0
    x = np.arange(n) * h
    te = np.clip(x - 60e3, 0.0, 100e3)
    rigidity = np.repeat((1e11 * te**3 / (12 * (1 - NU**2)))[None, :], 8, axis=0)
    found = find_sharp_features(PlateOperator.build(rigidity, STIFFNESS, NU, h, h)).nodes
    assert found[:, int(np.argmin(np.abs(te - 30e3)))].all()
    gentle = np.repeat((50e3 + 50e3 * x / x[-1])[None, :] ** 3 * 1e11 / 11.25, 8, axis=0)
    assert not find_sharp_features(PlateOperator.build(gentle, STIFFNESS, NU, h, h)).nodes.any()


def test_band_over_its_cap_keeps_the_sharpest_nodes_that_fit():
    # common practice (the cap rule of sharp_band): when even the narrowest band exceeds
    # the node cap, the nodes that fit are kept, sharp nodes first and among them those
    # next to a break (infinite contrast); only a cap of 0 drops the band
    n, h = 64, 4000.0
    rigidity = np.full((n, n), 1e23)
    rigidity[:, 40:] = 1e21  # a hundred-fold step
    rigidity[20, 10] = 0.0  # one broken node
    operator = PlateOperator.build(rigidity, STIFFNESS, NU, h, h)
    found = find_sharp_features(operator)
    full, _, _ = sharp_band(operator, found.band_width, 10**9, found.nodes, found.widths)
    cap = 5
    nodes, width, _ = sharp_band(operator, found.band_width, cap, found.nodes, found.widths)
    assert cap < found.nodes.sum() < full.size
    assert nodes.size == cap and width == h
    kept = np.unravel_index(nodes, (n, n))
    assert found.nodes[kept].all()  # sharp nodes only
    assert (np.abs(kept[0] - 20) <= 1).all() and (np.abs(kept[1] - 10) <= 1).all()  # the break
    empty, width, _ = sharp_band(operator, found.band_width, 0, found.nodes, found.widths)
    assert empty.size == 0 and width == 0.0


@pytest.mark.parametrize("te", [30e3, 60e3])
def test_hinge_band_reaches_the_same_distance_on_every_grid(te):
    # common practice (the band rule of STIFF_SIDE_REACH_FLEXURAL_PARAMETERS): the band
    # round a hinge, plus its ring of sharp neighbours (1 node) and the stencil frame of
    # the band solve (2 nodes), reaches STIFF_SIDE_REACH_FLEXURAL_PARAMETERS flexural
    # parameters into the plate on every grid fine enough (to within one spacing), and at
    # least STIFF_SIDE_FLEXURAL_PARAMETERS from the sharp nodes on coarse ones
    rigidity_value = 1e11 * te**3 / (12 * (1 - NU**2))
    alpha = (4 * rigidity_value / STIFFNESS) ** 0.25
    reaches = []
    for h in (alpha / 10.5, alpha / 20.5, alpha / 40.5, alpha / 3.5):
        n = int(6 * alpha / h) + 8
        rigidity = np.full((8, n), rigidity_value)
        rigidity[:, 2] = 0.0
        op = PlateOperator.build(rigidity, STIFFNESS, NU, h, h)
        features = find_sharp_features(op)
        nodes, _, _ = sharp_band(op, features.band_width, 10**6, features.nodes, features.widths)
        columns = nodes % n
        edge = (np.max(columns[columns < n // 2]) - 2) * h  # band edge from the hinge (m)
        reach = edge + 2 * h  # the band solve's frame: the 13-point stencil's 2 node rows
        reaches.append(reach)
        if STIFF_SIDE_REACH_FLEXURAL_PARAMETERS * alpha - REACH_FRAME_NODES * h > alpha:
            assert reach == pytest.approx(STIFF_SIDE_REACH_FLEXURAL_PARAMETERS * alpha, abs=h)
            assert REACH_FRAME_NODES == 3  # ring (1) and frame (2) as counted here
        else:
            assert edge - h == pytest.approx(STIFF_SIDE_FLEXURAL_PARAMETERS * alpha, abs=h)
        # the fall-back widths keep STIFF_SIDE_FLEXURAL_PARAMETERS alone
        assert features.least_widths is not None and features.widths is not None
        assert features.least_widths.max() == pytest.approx(
            max(STIFF_SIDE_FLEXURAL_PARAMETERS, BREAK_FLEXURAL_PARAMETERS) * alpha, rel=1e-6
        )
        assert (features.least_widths <= features.widths).all()
    # the three fine grids: one reach in metres (a width of its own in metres from the
    # sharp nodes would reach 4 spacings further, 0.38 of alpha at alpha / 10.5)
    assert max(reaches[:3]) - min(reaches[:3]) <= alpha / 10.5


def test_band_distance_checks_its_memory_first(monkeypatch):
    # common practice (memory estimated before big allocations): the band's distance
    # transform runs on the solve grid wrapped by the widest band; with too little memory
    # it refuses, naming the step, instead of failing inside scipy
    import gridflex.memory
    from gridflex.errors import InputError

    n, h = 64, 2000.0
    hinge = np.full((n, n), 1e23)
    hinge[:, 20] = 0.0
    op = PlateOperator.build(hinge, STIFFNESS, NU, h, h)
    features = find_sharp_features(op)
    nodes, _, _ = sharp_band(op, features.band_width, 10**6, features.nodes, features.widths)
    assert nodes.size > 0
    monkeypatch.setattr(gridflex.memory, "available_memory", lambda: 1024.0)
    with pytest.raises(InputError, match="distance transform of the finite-difference band"):
        sharp_band(op, features.band_width, 10**6, features.nodes, features.widths)


def test_one_distance_transform_serves_the_band_and_its_fallback():
    # common practice (one computation, shared): the distances made once for the widest
    # band give the same band, for the per-node widths and for the narrower fallback
    # widths, as a distance transform made for each call
    from gridflex.solvers.rigidity_features import SharpDistance

    n, h = 96, 4000.0
    rigidity = np.full((n, n), 1e23)
    rigidity[:, 3] = 0.0  # a hinge near the periodic edge
    rigidity[40:60, 50:70] = 1e20  # a weak patch
    op = PlateOperator.build(rigidity, STIFFNESS, NU, h, h)
    features = find_sharp_features(op)
    assert features.widths is not None and features.least_widths is not None
    shared = SharpDistance.build(op, features.nodes, features.band_width)
    for widths in (features.widths, features.least_widths):
        width = float(widths.max())
        fresh, _, _ = sharp_band(op, width, 10**6, features.nodes, widths)
        reused, _, _ = sharp_band(op, width, 10**6, features.nodes, widths, distance=shared)
        assert fresh.size > 0
        assert np.array_equal(fresh, reused)
